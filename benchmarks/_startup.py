"""Start-up figures: Numba's first compile, and warm starts of the command and of training.

Each figure is taken in fresh child processes (a process start is what a user
waits for):

* cold compile: a child with ``NUMBA_CACHE_DIR`` set to a new, empty folder
  takes the first training step and the first inference pass of each network
  (every kernel compiles and is written to that cache); a second child on the
  same folder does the same, now loading the kernels from the cache; their
  difference is the compile time a first-ever run pays;
* ``tinyconv --help``: whole-process wall time, median of several runs after
  one untimed run;
* one epoch of N2 on 256 random images through ``tinyconv.train.fit`` (SGD
  with momentum): whole-process wall time with the normal (warm) kernel cache.
"""

from __future__ import annotations

import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import _timing

HERE = Path(__file__).resolve().parent

_FIRST_STEPS = r"""
import json, sys, time
t0 = time.perf_counter()
sys.path.insert(0, sys.argv[1])
import numpy as np
import _nets
import tinyconv.network
t_import = time.perf_counter() - t0
out = {"import_s": t_import, "nets": {}}
for name in sys.argv[2].split(","):
    text = _nets.REFERENCE[name][0]
    net = _nets.ours_network(text)
    x, y = _nets.random_batch(text, _nets.TRAIN_BATCH, seed=1)
    step = _nets.ours_train_step(net, x, y)
    t = time.perf_counter(); step(); first = time.perf_counter() - t
    t = time.perf_counter(); step(); second = time.perf_counter() - t
    xi, _ = _nets.random_batch(text, _nets.INFER_BATCH, seed=2)
    t = time.perf_counter(); net.forward(xi, training=False); infer_first = time.perf_counter() - t
    t = time.perf_counter(); net.forward(xi, training=False); infer_second = time.perf_counter() - t
    out["nets"][name] = {"train_first_s": first, "train_second_s": second,
                         "infer_first_s": infer_first, "infer_second_s": infer_second}
out["total_s"] = time.perf_counter() - t0
print(json.dumps(out))
"""

_ONE_EPOCH = r"""
import json, sys, time
t0 = time.perf_counter()
sys.path.insert(0, sys.argv[1])
import numpy as np
import _nets
from tinyconv.train import TrainConfig, fit
text = _nets.REFERENCE["N2"][0]
x, y = _nets.random_batch(text, 256, seed=3)
net = _nets.ours_network(text)
t_ready = time.perf_counter()
hist = fit(net, x, y, TrainConfig(epochs=1, batch_size=64, optimizer="sgd", lr=0.01))
t_end = time.perf_counter()
print(json.dumps({"ready_s": t_ready - t0, "fit_s": t_end - t_ready, "status": hist.status}))
"""


def _child(code: str, args: list[str], env: dict[str, str]) -> tuple[float, dict]:
    """Run ``python -c code args``; its wall seconds and the JSON on its last stdout line."""
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-c", code, *args], env=env, capture_output=True,
                          text=True, check=False)
    wall = time.perf_counter() - t0
    if proc.returncode != 0:
        raise RuntimeError(f"start-up child failed (exit {proc.returncode}):\n{proc.stderr[-2000:]}")
    return wall, json.loads(proc.stdout.strip().splitlines()[-1])


def cold_compile(nets: tuple[str, ...], threads: int = 1) -> dict:
    """First-step times with an empty Numba cache, then with that cache filled."""
    cache = tempfile.mkdtemp(prefix="tinyconv-numba-cold-")
    try:
        env = _timing.thread_env(threads)
        env["NUMBA_CACHE_DIR"] = cache
        args = [str(HERE), ",".join(nets)]
        cold_wall, cold = _child(_FIRST_STEPS, args, env)
        warm_wall, warm = _child(_FIRST_STEPS, args, env)
        files = sum(len(f) for _, _, f in os.walk(cache))
    finally:
        shutil.rmtree(cache, ignore_errors=True)
    return {"cold_wall_s": cold_wall, "cold": cold, "warm_wall_s": warm_wall, "warm": warm,
            "cache_files": files}


def help_start(repeats: int = 5) -> dict:
    """Whole-process wall seconds of ``tinyconv --help`` (median, min, max after one warm run)."""
    exe = shutil.which("tinyconv")
    cmd = [exe, "--help"] if exe else [sys.executable, "-m", "tinyconv", "--help"]
    env = _timing.thread_env(1)
    subprocess.run(cmd, env=env, capture_output=True, check=True)
    secs = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        subprocess.run(cmd, env=env, capture_output=True, check=True)
        secs.append(time.perf_counter() - t0)
    s = _timing.spread(secs)
    return {"command": " ".join(Path(cmd[0]).name if i == 0 else c for i, c in enumerate(cmd)),
            "median_s": s.median, "min_s": s.low, "max_s": s.high}


def epoch_start(repeats: int = 3) -> dict:
    """Whole-process wall seconds of one epoch of N2 on 256 random images (warm cache)."""
    env = _timing.thread_env(1)
    args = [str(HERE)]
    _child(_ONE_EPOCH, args, env)  # fills the normal kernel cache if needed
    walls, inner = [], []
    for _ in range(repeats):
        wall, out = _child(_ONE_EPOCH, args, env)
        walls.append(wall)
        inner.append(out)
    fit_s = statistics.median(o["fit_s"] for o in inner)
    ready_s = statistics.median(o["ready_s"] for o in inner)
    s = _timing.spread(walls)
    return {"median_s": s.median, "min_s": s.low, "max_s": s.high, "fit_s": fit_s,
            "ready_s": ready_s, "status": inner[0]["status"]}


def measure(nets: tuple[str, ...], log=print) -> dict:
    """All start-up figures; a part that fails is reported as its error text."""
    out: dict = {}
    for key, fn in (("compile", lambda: cold_compile(nets)), ("help", help_start),
                    ("epoch", epoch_start)):
        log(f"  start-up: {key} ...")
        try:
            out[key] = fn()
        except Exception as exc:  # report, do not hide: the table prints the reason
            out[key] = {"error": f"{type(exc).__name__}: {str(exc)[-600:]}"}
    return out
