"""The command line's own notes: warnings as one line, a closed pipe, a cold kernel cache."""

from __future__ import annotations

import os
import subprocess
import sys
import warnings

import pytest

from tinyconv.cli import OUTPUT_CLOSED, main
from tinyconv.notices import warning_line
from tinyconv.data.dataset import DataNote, DataWarning, LeakageWarning


def test_warning_lines_are_one_line_without_paths():
    """Data notes print as 'note: ...', other warnings as 'warning: ...', first line only."""
    assert warning_line(DataNote("note: ignored 1 hidden entry: .DS_Store"), DataNote) == \
        "note: ignored 1 hidden entry: .DS_Store"
    assert warning_line(DataWarning("image sizes lie far apart"), DataWarning) == \
        "warning: image sizes lie far apart"
    assert warning_line(LeakageWarning("serious: 1 group"), LeakageWarning) == \
        "warning: serious: 1 group"
    assert warning_line(RuntimeWarning("overflow\n  x = a * b"), RuntimeWarning) == \
        "warning: overflow"


def test_a_warning_during_a_command_prints_as_a_note(tmp_path, capsys, monkeypatch):
    """A warning raised while a command runs reaches stderr as the tool's note, no path."""
    import tinyconv.commands.cost as cost

    real = cost.run

    def noisy(args):
        warnings.warn("note: something ignored on purpose", DataNote)
        return real(args)

    monkeypatch.setattr(cost, "run", noisy)
    with warnings.catch_warnings():
        warnings.simplefilter("always")
        assert main(["cost", "8x8gray/c2k3-gap"]) == 0
    err = capsys.readouterr().err
    assert err == "note: something ignored on purpose\n"
    assert warnings.showwarning is not None and "notices" not in warnings.showwarning.__module__


def test_output_closed_early_ends_quietly():
    """`cost --json | head`: the reader closes the pipe; exit 141 and no traceback."""
    proc = subprocess.Popen([sys.executable, "-m", "tinyconv", "cost",
                             "32x32rgb/c8k3-p2-c16k3-p2-gap", "--json"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=os.getcwd())
    proc.stdout.close()                 # the reader is gone before anything is written
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=60) == OUTPUT_CLOSED
    assert "Traceback" not in err and "BrokenPipeError" not in err, err


_SHARE = """
import sys
from tinyconv.layers import kernel_cache
before = kernel_cache.cached_share()
import numpy as np
from tinyconv.layers.kernels_act import _relu_kernel
_relu_kernel(np.ones(6, np.float32), np.empty(6, np.float32))
print(before, kernel_cache.cached_share(), kernel_cache.cold(), len(kernel_cache.kernels()))
"""


def test_a_cold_kernel_cache_is_told_from_a_warm_one(tmp_path):
    """With an empty cache folder no kernel is cached; compiling one makes it count."""
    env = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path / "cache")}
    done = subprocess.run([sys.executable, "-c", _SHARE], env=env, capture_output=True,
                          text=True, cwd=os.getcwd(), timeout=300)
    assert done.returncode == 0, done.stderr
    before, after, cold, n = done.stdout.split()
    assert float(before) == 0.0 and cold == "True"
    assert float(after) == 1 / int(n)       # exactly the one kernel just compiled


def test_a_warning_in_a_local_worker_prints_as_a_note(tmp_path):
    """A warning raised inside a search's worker process reaches stderr as one line."""
    script = tmp_path / "worker_warns.py"       # spawned workers import it by its path
    script.write_text(_WORKER_WARNS)
    env = {**os.environ, "PYTHONPATH": os.getcwd()}
    done = subprocess.run([sys.executable, str(script), str(tmp_path)], env=env,
                          capture_output=True, text=True, cwd=os.getcwd(), timeout=300)
    assert done.returncode == 0, done.stderr
    assert "warning: a unit's own remark\n" in done.stderr
    assert "UserWarning" not in done.stderr and ".py:" not in done.stderr, done.stderr


_WORKER_WARNS = """
import sys, warnings
from pathlib import Path
import numpy as np
from search.executors import LocalWorkers
from search.unit import UnitData

def remark(task, data):
    warnings.warn("a unit's own remark")
    return task

if __name__ == "__main__":
    folder = Path(sys.argv[1])
    UnitData(np.zeros((4, 2, 2, 1), np.uint8), np.array([0, 1, 0, 1]),
             np.array([0, 0, 1, 1])).save(folder)
    workers = LocalWorkers(folder, 1, remark)
    workers.start()
    workers.submit("unit").result()
    workers.shutdown()
"""


_RUN = """
import gc, sys
from tinyconv.cli import run
sys.argv = ["tinyconv", *sys.argv[1:]]
try:
    run()
except SystemExit as end:
    print(end.code, gc.get_freeze_count() > 0)
"""


@pytest.mark.parametrize("argv, code", [(["--version"], 0), (["cost", "8x8gray/c4k3z"], 2)])
def test_the_program_ends_with_main_s_code_and_a_frozen_collector(argv, code):
    """run() ends the process with main()'s exit code, after freezing the collector (gc)."""
    done = subprocess.run([sys.executable, "-c", _RUN, *argv], capture_output=True, text=True,
                          cwd=os.getcwd(), env={**os.environ, "PYTHONPATH": os.getcwd()},
                          timeout=120)
    assert done.stdout.split()[-2:] == [str(code), "True"], done.stdout + done.stderr
