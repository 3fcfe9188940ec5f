"""What an export wrote and what it measured, as a frozen record and JSON."""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass
from pathlib import Path

from tinyconv import fmt


@dataclass(frozen=True)
class ExportSummary:
    """The figures of one export.

    Attributes
    ----------
    arch : str
        Architecture text.
    classes : tuple of str
        Class names in logit order.
    prefix : str
        C symbol prefix.
    input_shape : tuple (h, w, c)
    flash_bytes : int
        Bytes of the generated constant arrays (= the cost model's int8 flash).
    activation_bytes : int
        Bytes of the static activation buffer (= the cost model's int8 peak).
    macs, params : int
        Multiply-accumulates per image and trained parameters (cost model).
    n_calib : int
        Calibration images; ``calibration`` names the range rule and
        ``rounding`` the weight rounding.
    logits_scale, logits_zero_point : float, int
        Real logit = ``logits_scale * (q - logits_zero_point)``.
    n_eval : int
        Held-out images compared (0 when none were given).
    agreement : float or None
        Fraction of them where the int8 and float arg-max agree.
    float_accuracy, int8_accuracy : float or None
        Accuracies on them, when labels were given.
    eval_set : str
        What those images are (e.g. ``held-out``).
    cv_accuracy, cv_accuracy_se : float or None
        The search's cross-validated float accuracy of this candidate and its
        standard error, when exported from a run.
    files : tuple of str
        Paths written (weights .npz, .c, .h, summary.json, calibration.npz,
        and device.json when measured).
    device : dict or None
        The device measurement (``device.json``) when the export ran on a core.
    recipe : str or None
        The training recipe it was trained with (``search.recipes``), when
        exported from a run.
    """

    arch: str
    classes: tuple[str, ...]
    prefix: str
    input_shape: tuple[int, int, int]
    flash_bytes: int
    activation_bytes: int
    macs: int
    params: int
    n_calib: int
    calibration: str
    rounding: str
    logits_scale: float
    logits_zero_point: int
    n_eval: int = 0
    agreement: float | None = None
    float_accuracy: float | None = None
    int8_accuracy: float | None = None
    eval_set: str = "held-out"
    cv_accuracy: float | None = None
    cv_accuracy_se: float | None = None
    files: tuple[str, ...] = ()
    device: dict | None = None
    recipe: str | None = None

    def to_dict(self) -> dict:
        """Plain data (lists for tuples), ready for JSON."""
        out = asdict(self)
        for key in ("classes", "input_shape", "files"):
            out[key] = list(out[key])
        return out

    def to_json(self) -> str:
        return json.dumps(self.to_dict(), indent=2, sort_keys=True)

    @staticmethod
    def from_json(text: str) -> "ExportSummary":
        data = json.loads(text)
        for key in ("classes", "input_shape", "files"):
            data[key] = tuple(data[key])
        return ExportSummary(**data)

    def lines(self) -> list[str]:
        """A short human-readable account (what the export command prints)."""
        out = [f"architecture  {self.arch}",
               *([f"recipe        {self.recipe}"] if self.recipe else []),
               f"flash         {self.flash_bytes:,} bytes ({self.flash_bytes / 1024:.1f} KB) "
               "of constant arrays",
               f"buffer        {self.activation_bytes:,} bytes ({self.activation_bytes / 1024:.1f} KB) "
               "of activations",
               f"MACs          {self.macs:,} per image; {self.params:,} parameters",
               f"calibration   {self.calibration} over {self.n_calib} images; weights "
               f"rounded with {self.rounding}"]
        if self.cv_accuracy is not None:
            out.append(f"search        cross-validated float accuracy "
                       f"{fmt.accuracy(self.cv_accuracy, self.cv_accuracy_se or 0.0)} (SE)")
        if self.n_eval:
            line = (f"int8 vs float {fmt.percent(self.agreement)} top-1 agreement on "
                    f"{self.n_eval} {self.eval_set} images")
            if self.float_accuracy is not None:
                line += (f"; accuracy float {fmt.percent(self.float_accuracy)}, "
                         f"int8 {fmt.percent(self.int8_accuracy)}")
            out.append(line)
        if self.device:
            d = self.device
            out.append(f"device        {d['core']}: {d['instructions']:,} instructions per "
                       f"image ({d['instructions_per_mac']:.1f} per MAC), {d['ms_at_clock']:.2f} "
                       f"ms at {d['clock_mhz']:g} MHz (assuming {d['cpi']:g} cycles per "
                       f"instruction); flash {d['flash_bytes']:,} B, RAM {d['ram_bytes']:,} B; "
                       + ("bit-exact" if d["bit_exact"] else
                          f"NOT bit-exact on {d['mismatched_images']} images"))
        out += [f"wrote         {Path(f)}" for f in self.files]
        return out
