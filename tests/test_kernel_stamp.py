"""A warm kernel cache told without importing Numba (tinyconv.kernel_stamp)."""

import json
import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

ASK = ("import sys\n"
       "from tinyconv.kernel_stamp import cold\n"
       "print(cold(), 'numba' in sys.modules)")


def _ask(cache_home: Path) -> tuple[str, str]:
    """(cold, Numba imported) from a fresh process whose stamps live in ``cache_home``."""
    env = {**os.environ, "XDG_CACHE_HOME": str(cache_home)}
    done = subprocess.run([sys.executable, "-c", ASK], cwd=ROOT, env=env, capture_output=True,
                          text=True, check=True, timeout=300)
    cold, imported = done.stdout.split()
    return cold, imported


def test_the_stamp_finds_every_kernel_module_source():
    """The stamp's source paths (found without importing) are the files of the modules the
    kernel cache imports for its dispatchers."""
    from tinyconv import kernel_stamp
    from tinyconv.layers import kernel_cache
    imported = {str(Path(k.py_func.__code__.co_filename).resolve())
                for k in kernel_cache.kernels()}
    assert imported == {str(Path(p).resolve()) for p in kernel_stamp._module_sources()}


def test_a_warm_cache_is_stamped_then_told_without_numba(tmp_path):
    """Warm: the first check asks Numba and writes the stamp; the next process answers from
    the stamp alone (no Numba import); a stamp that no longer matches a file sends the
    check back to Numba, which stamps again."""
    from search.unit import prime_kernels
    prime_kernels()  # the cache is warm from here on (compiles only where it is cold)
    assert _ask(tmp_path) == ("False", "True")
    stamp = tmp_path / "tinyconv" / "kernel-cache.json"
    table = json.loads(stamp.read_text())
    (entry,) = table.values()
    assert any(path.endswith(".nbi") for path in entry["files"])
    assert _ask(tmp_path) == ("False", "False")
    path = next(p for p in entry["files"] if p.endswith(".nbi"))
    entry["files"][path] = [0, 0]  # as if that kernel had been compiled again since
    stamp.write_text(json.dumps(table))
    assert _ask(tmp_path) == ("False", "True")
    assert _ask(tmp_path) == ("False", "False")


def test_a_stamp_that_cannot_be_replaced_leaves_no_temporary_file(tmp_path):
    """Where the stamp cannot be written (here a folder stands at its path) the check still
    answers, and the temporary file it wrote first is removed, not left one a process."""
    from search.unit import prime_kernels
    prime_kernels()
    (tmp_path / "tinyconv" / "kernel-cache.json").mkdir(parents=True)
    assert _ask(tmp_path) == ("False", "True")
    assert _ask(tmp_path) == ("False", "True")
    assert sorted(p.name for p in (tmp_path / "tinyconv").iterdir()) == ["kernel-cache.json"]
