"""A cold kernel cache is compiled once, by the search process, before the workers start.

Numba reports each real compilation as a ``numba:compile`` event (numba.core.event);
loading a kernel from its on-disk cache reports none (checked below: a warm cache
gives no event).
"""

import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

COUNT = """
import sys
from numba.core import event
with event.install_recorder("numba:compile") as rec:
    {body}
sys.stdout.write(str(len(rec.buffer)))
"""


def _compiles(body: str, cache: Path) -> int:
    """Compilations while ``body`` runs in a fresh process with Numba's cache in ``cache``."""
    env = {**os.environ, "NUMBA_CACHE_DIR": str(cache)}
    done = subprocess.run([sys.executable, "-c", COUNT.format(body=body)], cwd=ROOT, env=env,
                          capture_output=True, text=True, check=True, timeout=600)
    return int(done.stdout.strip().splitlines()[-1])


# what a worker runs: its warm-up, then units of networks unlike the priming ones
WORKER = ("from search.unit import warm_up; warm_up()\n"
          "    import numpy as np\n"
          "    from tinyconv.network import Network\n"
          "    from tinyconv.train import TrainConfig, evaluate, fit\n"
          "    for text in ('32x32rgb/c8k3-p2-c16k3-p2-c32k3-p2-gap-d16',\n"
          "                 '12x12gray/c32k3-dw3s2-bn-a2-[c16k1-dw3-c32k1]-gap'):\n"
          "        net = Network.from_arch(text, 3, seed=1)\n"
          "        h, w, c = net.arch.input.shape\n"
          "        x = np.random.default_rng(1).random((6, h, w, c), dtype=np.float32)\n"
          "        y = np.arange(6) % 3\n"
          "        fit(net, x, y, TrainConfig(epochs=1, batch_size=3), x, y)\n"
          "        evaluate(net, x, y)")


@pytest.mark.slow  # compiles the engine's kernels into an empty cache: ~15-30 s CPU
def test_after_priming_a_worker_compiles_nothing(tmp_path):
    """Priming a cold cache compiles the kernels; a worker process afterwards compiles none,
    and a second priming finds them all cached."""
    cache = tmp_path / "numba-cache"
    assert _compiles("from search.unit import prime_kernels; prime_kernels()", cache) > 20
    assert _compiles(WORKER, cache) == 0
    assert _compiles("from search.unit import prime_kernels; prime_kernels()", cache) == 0


def test_a_search_primes_before_starting_workers_only_when_the_cache_is_cold(monkeypatch,
                                                                             tmp_path):
    """With a cold cache the search process primes, then starts the workers; warm, it
    starts them at once; with one worker (nothing to duplicate) it never primes."""
    import search.session as session
    import search.unit as unit
    import tinyconv.kernel_stamp as kernel_stamp
    from search.executors import LocalWorkers
    from helpers import tiny_request

    calls = []
    monkeypatch.setattr(unit, "prime_kernels", lambda: calls.append("prime"))
    monkeypatch.setattr(LocalWorkers, "start", lambda self: calls.append("start"))
    for cold, workers, want in ((True, 2, ["prime", "start"]), (False, 2, ["start"]),
                                (True, 1, ["start"])):
        calls.clear()
        monkeypatch.setattr(kernel_stamp, "cold", lambda cold=cold: cold)
        request = tiny_request(tmp_path / f"run{len(want)}{workers}", workers=workers)
        assert session._local_workers(request, None) is not None
        assert calls == want, (cold, workers)
