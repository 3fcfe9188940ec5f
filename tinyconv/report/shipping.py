"""What a shipper needs about the pick: its cost per layer, the export, the device."""

from __future__ import annotations

from tinyconv.report.html import Section, esc, num, paragraph
from tinyconv.report.rundata import RunData

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
    return Section("device", "On the device", body)
