"""The pick's cost, layer by layer: the cost model's rows and the device model's time.

The same numbers as ``tinyconv cost ARCH --core CORE`` (:func:`tinyconv.cost.cost_of`
and :func:`tinyconv.device.model.estimate`), as a plain frame for the page and
for ``pick_cost.csv``.
"""

from __future__ import annotations

import pandas as pd

from tinyconv.cost import cost_of

COLUMNS = ("step", "kind", "input", "output", "params", "macs", "flash_bytes",
           "memory_bytes", "peak", "instructions", "ms")


def pick_cost_table(candidate: str, n_classes: int, core: str | None = None,
                    clock_mhz: float | None = None) -> pd.DataFrame:
    """One row per step of the int8 network (the input step first).

    Parameters
    ----------
    candidate : architecture text
    n_classes : classes of the head
    core, clock_mhz : the run's device, when it names one; then ``instructions``
        (the device model's, per image) and ``ms`` (at the clock, under the
        core's assumed cycles per instruction) are filled, else NaN

    Returns
    -------
    DataFrame with :data:`COLUMNS`: ``memory_bytes`` is what the step holds in
    the activation buffer (input + output + the kernel's scratch, int8; 0 for
    steps that work in place) and ``peak`` marks the step that sets the peak.
    """
    cost = cost_of(candidate, n_classes)
    t = cost.table()
    memory = t["live_elements"] + t["scratch_bytes"]
    frame = pd.DataFrame({
        "step": t["name"], "kind": t["kind"], "input": t["in_shape"], "output": t["out_shape"],
        "params": t["params"], "macs": t["macs"], "flash_bytes": t["flash_bytes"],
        "memory_bytes": memory, "peak": memory == cost.peak_int8_bytes,
        "instructions": float("nan"), "ms": float("nan")})
    if core:
        from tinyconv.device.cores import core_named, milliseconds
        from tinyconv.device.model import estimate

        part = core_named(core)
        for step in estimate(candidate, n_classes, part).steps:
            frame.loc[step.row, "instructions"] = step.instructions
            frame.loc[step.row, "ms"] = milliseconds(step.instructions, part, clock_mhz)
    return frame[list(COLUMNS)]
