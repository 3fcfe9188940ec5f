"""Export a trained network: float weights, int8 C source and header, summary.

:func:`export_network` is a pure function of a trained network and its
normalisation; reading a run folder and retraining the pick is
:mod:`tinyconv.workflows.export_pick`.
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import numpy as np

from tinyconv.cost import cost_of
from tinyconv.errors import DataError
from tinyconv.export.c_writer import CCode, check_prefix, generate_c
from tinyconv.export.summary import ExportSummary
from tinyconv.files import write_bytes_whole
from tinyconv.quant import compare, quantize_network

__all__ = ["export_network", "ExportSummary", "generate_c", "CCode"]

#: what to do after a failed write, for the error message
AGAIN = "export again"
WEIGHTS_FILE = "network.npz"
SUMMARY_FILE = "summary.json"
DEVICE_FILE = "device.json"


def export_network(net, norm_mean, norm_std, calib_images: np.ndarray, out_dir,
                   prefix: str = "tc", classes=None, eval_images: np.ndarray | None = None,
                   eval_labels: np.ndarray | None = None, eval_set: str = "held-out",
                   meta: dict | None = None, cv_accuracy: tuple[float, float] | None = None,
                   rounding: str = "feedback", core=None, clock_mhz: float | None = None,
                   device_images: np.ndarray | None = None,
                   log=None) -> ExportSummary:
    """Quantise ``net`` and write everything a device build needs.

    Parameters
    ----------
    net : tinyconv.network.Network
        Trained float network.
    norm_mean, norm_std : array_like, shape (c,)
        Its input normalisation, ``(p / 255 - mean) / std``.
    calib_images : ndarray of uint8, shape (m, h, w, c)
        Calibration images in the network's input size and colour mode.
    out_dir : path
        Created if missing. Receives ``network.npz`` (float weights,
        architecture and normalisation), ``{prefix}.c``, ``{prefix}.h`` and
        ``summary.json``.
    prefix : str
        C symbol and file prefix (a C identifier).
    classes : sequence of str, optional
        Class names in logit order (default ``"0"``, ``"1"``, ...).
    eval_images, eval_labels : optional
        Held-out uint8 images (and labels) for the float/int8 comparison.
    eval_set : str
        What the evaluation images are, for the summary.
    meta : dict, optional
        Extra JSON-ready facts stored in ``network.npz``; its ``recipe`` (the
        training recipe, when exported from a run) also goes in the summary.
    cv_accuracy : (mean, se), optional
        The search's cross-validated accuracy, recorded in the summary.
    rounding : {"feedback", "nearest"}
        Weight rounding (:mod:`tinyconv.quant.rounding`).
    core : tinyconv.device.cores.Core, optional
        Also build the C for this core, run it under QEMU on ``device_images``
        and write the measurement as ``device.json``
        (:func:`tinyconv.device.figures.device_record`).
    clock_mhz : float, optional
        The part's clock for the time figure (default: the core's assumed clock).
    device_images : ndarray of uint8, shape (m, h, w, c), optional
        Images for the device run (default: the evaluation images, else the
        calibration images); ``calibration.npz`` keeps them with the calibration
        images so that ``tinyconv emulate --network`` rebuilds the same int8 network.
    log : callable, optional
        Receives progress lines.

    Returns
    -------
    ExportSummary
        Also written as ``summary.json``.

    Raises
    ------
    ArchError
        When a batch norm cannot be folded.
    DataError, InputError
        For unusable images, normalisation, prefix or class names.
    """
    prefix = check_prefix(prefix)
    classes = tuple(str(c) for c in classes) if classes is not None else tuple(
        str(i) for i in range(net.n_classes))
    cost = cost_of(net.arch, net.n_classes)
    qnet = quantize_network(net, norm_mean, norm_std, calib_images, rounding=rounding)
    code = generate_c(qnet, prefix, classes, macs=cost.macs)
    # The generated code and the cost model are one number each; a difference is a bug.
    if code.activation_bytes != cost.peak_int8_bytes or code.flash_bytes != cost.flash_bytes:
        raise RuntimeError(f"generated C for {net.arch} has buffer {code.activation_bytes} B and "
                           f"flash {code.flash_bytes} B, but the cost model says "
                           f"{cost.peak_int8_bytes} B and {cost.flash_bytes} B")
    n_eval, agreement, f_acc, q_acc = 0, None, None, None
    if eval_images is not None:
        if eval_labels is not None and len(eval_labels) != len(eval_images):
            raise DataError(f"{len(eval_labels)} labels for {len(eval_images)} held-out "
                            "images; give one label per image")
        result = compare(net, qnet, norm_mean, norm_std, eval_images, eval_labels)
        n_eval, agreement = result.n, result.agreement
        f_acc, q_acc = result.float_accuracy, result.int8_accuracy

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    files = [out / WEIGHTS_FILE, out / f"{prefix}.c", out / f"{prefix}.h", out / SUMMARY_FILE]
    net.save(files[0], meta={"classes": list(classes), "prefix": prefix, **(meta or {})},
             arrays={"norm_mean": np.asarray(norm_mean, np.float32),
                     "norm_std": np.asarray(norm_std, np.float32)})
    write_bytes_whole(files[1], code.source.encode(), then=AGAIN)
    write_bytes_whole(files[2], code.header.encode(), then=AGAIN)
    summary = ExportSummary(
        arch=str(net.arch), classes=classes, prefix=prefix,
        input_shape=tuple(qnet.input_shape), flash_bytes=code.flash_bytes,
        activation_bytes=code.activation_bytes, macs=cost.macs, params=cost.params,
        n_calib=qnet.n_calib, calibration=qnet.calibration, rounding=qnet.rounding,
        logits_scale=float(qnet.logits_scale), logits_zero_point=int(qnet.logits_zp),
        n_eval=n_eval, agreement=agreement, float_accuracy=f_acc, int8_accuracy=q_acc,
        eval_set=eval_set, cv_accuracy=None if cv_accuracy is None else float(cv_accuracy[0]),
        cv_accuracy_se=None if cv_accuracy is None else float(cv_accuracy[1]),
        files=tuple(str(f) for f in files), recipe=(meta or {}).get("recipe"))
    from tinyconv.device.calibration import save_calibration
    if device_images is None:
        device_images = eval_images if eval_images is not None else calib_images
    files.append(save_calibration(out, calib_images, device_images))
    if core is not None:
        from tinyconv.device.figures import device_record
        from tinyconv.device.measure import measure
        (log or (lambda text: None))(f"building for {core.name} and running "
                                     f"{len(device_images)} images on QEMU {core.board}")
        m = measure(qnet, device_images, core, prefix=prefix, macs=cost.macs)
        record = device_record(m, str(net.arch), net.n_classes, core, clock_mhz,
                               f"exported weights ({eval_set} images)")
        files.append(out / DEVICE_FILE)
        write_bytes_whole(files[-1], (json.dumps(record, indent=2) + "\n").encode(),
                          then=AGAIN)
        summary = dataclasses.replace(summary, device=record)
    summary = dataclasses.replace(summary, files=tuple(str(f) for f in files))
    write_bytes_whole(files[3], (summary.to_json() + "\n").encode(), then=AGAIN)
    return summary
