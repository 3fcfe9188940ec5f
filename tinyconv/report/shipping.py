"""What a shipper needs about the pick: its cost per layer, the export, the device."""

from __future__ import annotations

import pandas as pd

from tinyconv import fmt
from tinyconv.report.html import Column, Section, esc, notice, num, paragraph, table
from tinyconv.report.rundata import RunData
from tinyconv.report.words import code


def _bytes_or_in_place(v: object) -> str:
    return "in place" if float(v) == 0 else num(v)  # type: ignore[arg-type]


COST_COLUMNS = (
    Column("step", "step", code, numeric=False),
    Column("kind", "kind", esc, numeric=False),
    Column("input", "input", esc), Column("output", "output", esc),
    Column("parameters", "params", num), Column("MACs", "macs", num),
    Column("flash (bytes)", "flash_bytes", num, title="int8 weights, biases, multipliers, "
           "shifts and the input table"),
    Column("activation buffer (bytes)", "memory_bytes", _bytes_or_in_place,
           title="input + output + scratch held by the step, int8; the largest sets the "
                 "buffer's size"),
)


def cost_section(data: RunData, frame: pd.DataFrame) -> Section:
    """The pick's cost per layer (``pick_cost.csv``), with the device model's time."""
    budget = data.config.get("budget") or {}
    core, clock = budget.get("core"), budget.get("clock_mhz")
    columns = COST_COLUMNS
    timed = bool(core) and frame["instructions"].notna().any()
    if timed:
        from tinyconv.device.cores import core_named
        part = core_named(core)
        clock = float(clock) if clock else part.clock_mhz
        columns += (Column("instructions (model)", "instructions", num),
                    Column(f"ms at {clock:g} MHz", "ms", lambda v: num(v, 3)))
    peak = list(frame["peak"].astype(bool))
    body = table(frame, columns, highlight=peak, css="cost")
    pick = data.pick
    words = (f"In all: {num(frame['params'].sum())} parameters, {num(frame['macs'].sum())} "
             f"MACs per image, {num(frame['flash_bytes'].sum())} bytes of flash and an "
             f"activation buffer of {num(frame['memory_bytes'].max())} bytes (the highlighted "
             "step sets it; ReLU, batch norm, dropout and flatten work in place).")
    if timed:
        words += (f" On {core} at {clock:g} MHz the device model gives "
                  f"{num(frame['ms'].sum(), 2)} ms per image, assuming "
                  f"{part.cpi:g} cycles per instruction: measure it with "
                  f"tinyconv export --core {core} before relying on it.")
    return Section("cost", "What the pick costs, layer by layer", body + paragraph(words),
                   lead=f"{pick['candidate']} as the int8 C export lays it out: the numbers "
                        "of tinyconv cost, the same that the budgets were checked against.")


def export_section(data: RunData) -> Section | None:
    """The export's figures (``export/summary.json``): int8 agreement and accuracy."""
    e = data.export
    if not e:
        return None
    arch = str(e.get("arch", "?"))
    pick = data.pick
    which = ("the pick" if arch == str(pick["arch"] if "arch" in pick else pick["candidate"])
             else "not the current pick")
    rows = [("exported network", code(arch) + f" ({esc(which)})")]
    if e.get("cv_accuracy") is not None:
        rows.append(("held-out accuracy in the search",
                     esc(fmt.accuracy(e["cv_accuracy"], e.get("cv_accuracy_se") or 0.0))))
    n = int(e.get("n_eval") or 0)
    if n:
        rows.append(("int8 agreement with the float network",
                     esc(f"{fmt.percent(e.get('agreement'))} of {n:,} images "
                         "(the same class chosen)")))
        if e.get("float_accuracy") is not None:
            rows.append(("accuracy on those images",
                         esc(f"float {fmt.percent(e['float_accuracy'])}, int8 "
                             f"{fmt.percent(e.get('int8_accuracy'))}")))
    rows.append(("flash of the constant arrays", esc(f"{num(e.get('flash_bytes'))} bytes")))
    rows.append(("calibration", esc(f"{e.get('calibration', '?')} over "
                                    f"{num(e.get('n_calib'))} images; weights rounded with "
                                    f"{e.get('rounding', '?')}")))
    files = ", ".join(str(f).rsplit("/", 1)[-1] for f in e.get("files", ()))
    rows.append(("files", esc(files)))
    body = ('<div class="tablewrap"><table><tbody>'
            + "".join(f"<tr><th>{esc(k)}</th><td>{v}</td></tr>" for k, v in rows)
            + "</tbody></table></div>")
    seen = str(e.get("eval_set", ""))
    if n and "training" in seen:
        body += paragraph(
            f"The export retrains the network on all {n:,} images, so these accuracies are "
            "on images it trained on: they show what quantisation changed, not how well the "
            "network generalises (the search's held-out accuracy above says that).")
    return Section("export", "The exported int8 network", body,
                   lead="What tinyconv export wrote and how closely the int8 network follows "
                        "the float one.")

def device_section(data: RunData) -> Section | None:
    """The exported pick measured on an emulated core (``export/device.json``)."""
    d = data.device
    if not d:
        return None
    est = d.get("estimate", {})

    def row(what: str, measured: object, model: object, digits: int = 0) -> tuple:
        return (what, num(measured, digits), num(model, digits))
    rows = [row("instructions per image", d["instructions"], est.get("instructions")),
            row("instructions per MAC", d["instructions_per_mac"],
                (est.get("instructions") or 0) / max(d.get("macs") or 1, 1), 2),
            row(f"ms per image at {num(d['clock_mhz'])} MHz", d["ms_at_clock"],
                est.get("ms_at_clock"), 2),
            row("flash bytes (code + constants)", d["flash_bytes"], est.get("flash_bytes")),
            row("RAM bytes (activations + stack)", d["ram_bytes"], est.get("ram_bytes"))]
    body = ("<table><thead><tr><th>figure</th><th>measured</th><th>cost model</th></tr>"
            "</thead><tbody>" + "".join(f"<tr><td>{esc(a)}</td><td>{b}</td><td>{c}</td></tr>"
                                        for a, b, c in rows) + "</tbody></table>")
    exact = ("every logit of every image equals the NumPy integer reference (bit-exact)"
             if d["bit_exact"] else f"{d['mismatched_images']} images differ from the "
             "NumPy integer reference: do not ship this build")
    body += paragraph(
        f"The exported int8 C of {d['arch']}, cross-compiled with arm-none-eabi-gcc "
        f"{d.get('compiler_opt', '')} for {d['core']} and run under QEMU ({d['board']}, "
        f"exact instruction counting) on {d['images']} images held out of the calibration: "
        f"{exact}. The time assumes {d['cpi']:g} cycles per instruction (QEMU counts "
        "instructions, not cycles); measure on the part before relying on it.")
    exported = (data.export or {}).get("arch")
    if exported and exported != d["arch"]:
        body = notice(f"This measurement is of {d['arch']}, from an earlier export: the last "
                      f"export wrote {exported} without measuring it. Export again with "
                      "--core to measure it.") + body
    return Section("device", "On the device", body)
