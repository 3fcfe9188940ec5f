"""The measuring half of the engine benchmark: one process, one thread count.

The parent (``engine.py``) starts this in a child process whose environment
already fixes every thread pool (see ``_timing.thread_env``), so NumPy,
OpenBLAS and Numba start with that many threads; here we only check that they
did and set torch's count to match.
"""

from __future__ import annotations

import math
import os
import sys
import time
from dataclasses import dataclass

import numpy as np

import _nets
import _timing


@dataclass(frozen=True)
class Plan:
    """How much to measure: repeats of blocks of at least ``min_steps`` steps."""

    repeats: int = 5
    min_steps: int = 20
    block_seconds: float = 0.25   # blocks are lengthened to last at least this
    warm_steps: int = 3
    gemm_n: int = 2048
    gemm_repeats: int = 5

    @staticmethod
    def quick() -> "Plan":
        """One repeat of two steps: proves the machinery runs, measures nothing."""
        return Plan(repeats=1, min_steps=2, block_seconds=0.0, warm_steps=1, gemm_n=256,
                    gemm_repeats=1)


def check_threads(threads: int, peer: bool) -> dict:
    """Set torch's threads and confirm every pool runs ``threads`` threads.

    Raises
    ------
    RuntimeError
        When a pool does not hold the count (the environment was set too late).
    """
    import numba

    seen = {"numba_threads": int(numba.get_num_threads())}
    pools = _timing.blas_pools()
    blas = [p for p in pools if p.get("user_api") == "blas"]
    seen["blas_threads"] = blas[0]["num_threads"] if blas else None
    seen["blas_kernel"] = blas[0].get("architecture") if blas else None
    if peer:
        import torch
        torch.set_num_threads(threads)
        seen["torch_threads"] = int(torch.get_num_threads())
    else:
        seen["torch_threads"] = None
    wrong = {k: v for k, v in seen.items()
             if k.endswith("_threads") and v is not None and v != threads}
    if wrong:
        raise RuntimeError(f"asked for {threads} threads but the pools hold {wrong}; set "
                           f"{', '.join(_timing.THREAD_VARS)} before NumPy is imported")
    seen["pools"] = pools
    return seen


def _steps_for(step, plan: Plan) -> int:
    """Steps a block needs to last ``plan.block_seconds`` (at least ``plan.min_steps``)."""
    t = _timing.time_block(step, 2) / 2
    return max(plan.min_steps, min(5000, math.ceil(plan.block_seconds / max(t, 1e-7))))


def measure_net(name: str, threads: int, modes: tuple[str, ...], plan: Plan, peer: bool,
                log=print) -> list[dict]:
    """Time one reference network, ours and (when ``peer``) torch's, in each mode.

    Returns
    -------
    list of dict
        One record per mode, without the GEMM fields (the caller adds them).
    """
    text, table_params, table_macs = _nets.REFERENCE[name]
    cnt = _nets.counts(text)
    net = _nets.ours_network(text)
    model = _nets.peer_model(text) if peer else None
    out = []
    for mode in modes:
        batch = _nets.TRAIN_BATCH if mode == "train" else _nets.INFER_BATCH
        x, y = _nets.random_batch(text, batch, seed=1)
        runs = {}
        if mode == "train":
            runs["ours"] = _nets.ours_train_step(net, x, y)
            if peer:
                runs["peer"] = _nets.peer_train_step(model, x, y)
        else:
            runs["ours"] = _nets.ours_infer_step(net, x)
            if peer:
                runs["peer"] = _nets.peer_infer_step(model, x)
        t0 = time.perf_counter()
        for step in runs.values():
            _timing.warm_up(step, plan.warm_steps, 0.2 if plan.block_seconds else 0.0)
        steps = _steps_for(runs["ours"], plan) if plan.block_seconds else plan.min_steps
        times = _timing.interleaved(runs, steps, plan.repeats)
        ours = _timing.rates(times["ours"], steps * batch)
        flops = (6 if mode == "train" else 2) * cnt.macs
        rec = {
            "net": name, "arch": text, "threads": threads, "mode": mode, "batch": batch,
            "steps": steps, "repeats": plan.repeats,
            "ours_ips": ours.median, "ours_ips_min": ours.low, "ours_ips_max": ours.high,
            "peer_ips": None, "peer_ips_min": None, "peer_ips_max": None,
            "ratio": None, "ratio_paired_median": None,
            "params": cnt.params, "params_source": cnt.source,
            "params_expand": cnt.expand_params, "params_table": table_params,
            "params_ours_net": _nets.ours_param_count(net),
            "params_peer_net": _nets.peer_param_count(model) if peer else None,
            "macs": cnt.macs, "macs_table": table_macs, "macs_source": cnt.source,
            "flops_per_image": flops,
            "ours_gflops": ours.median * flops / 1e9,
            "peer_gflops": None,
            "note": _nets.relu_note(text),
            "ours_skips_input_grad": _nets.skips_input_grad(net) if mode == "train" else None,
            "final_loss": float(runs["ours"]()) if mode == "train" else None,
        }
        if peer:
            theirs = _timing.rates(times["peer"], steps * batch)
            paired = sorted(p / o for o, p in zip(times["ours"], times["peer"]))
            rec.update(peer_ips=theirs.median, peer_ips_min=theirs.low,
                       peer_ips_max=theirs.high, ratio=ours.median / theirs.median,
                       ratio_paired_median=float(np.median(paired)),
                       peer_gflops=theirs.median * flops / 1e9)
        log(f"  [{threads} thr] {name} {mode}: ours {ours.median:,.0f} img/s"
            + (f", peer {rec['peer_ips']:,.0f} img/s, ratio {rec['ratio']:.2f}" if peer else "")
            + f" ({steps} steps x {plan.repeats}, {time.perf_counter() - t0:.1f} s)")
        out.append(rec)
    return out


def run(threads: int, nets: tuple[str, ...], modes: tuple[str, ...], plan: Plan,
        peer: bool, hints_unset: bool, log=print) -> dict:
    """Measure every net and mode at ``threads`` threads, GEMM before and after.

    Returns
    -------
    dict
        ``{"meta": {...}, "records": [...]}``; each record has the keys the
        JSON output promises, with ``fraction_of_gemm`` against the GEMM rate
        measured here at the same thread count.
    """
    peer = peer and _nets.peer_available()
    load_before = _timing.load_average()
    seen = check_threads(threads, peer)
    before = _timing.gemm_rate(plan.gemm_n, plan.gemm_repeats)
    log(f"  [{threads} thr] matrix multiply {plan.gemm_n}^2 float32: "
        f"{before.median:.1f} GFLOP/s (BLAS kernel {seen['blas_kernel']})")
    records = []
    for name in nets:
        records += measure_net(name, threads, modes, plan, peer, log)
    after = _timing.gemm_rate(plan.gemm_n, plan.gemm_repeats)
    gemm = _timing.spread(before.values + after.values)
    for rec in records:
        rec["gemm_gflops"] = gemm.median
        rec["fraction_of_gemm"] = rec["ours_gflops"] / gemm.median
        rec["peer_fraction_of_gemm"] = (None if rec["peer_gflops"] is None
                                        else rec["peer_gflops"] / gemm.median)
        rec["blas_kernel"] = seen["blas_kernel"]
        rec["hints_unset"] = hints_unset
        rec["load_before"] = load_before
        for key in ("numba_threads", "blas_threads", "torch_threads"):
            rec[key] = seen[key]
    hints = {k: os.environ.get(k) for k in _timing.BLAS_HINTS}
    meta = {"threads": threads, "gemm": {"median": gemm.median, "min": gemm.low,
                                         "max": gemm.high, "before": before.median,
                                         "after": after.median, "n": plan.gemm_n},
            "peer": peer, "blas_hints": hints, "cpus": os.cpu_count(),
            "load_before": load_before, "load_after": _timing.load_average(), **seen, "versions": _timing.versions()}
    return {"meta": meta, "records": records}


if __name__ == "__main__":  # pragma: no cover - started by engine.py only
    sys.exit("run benchmarks/engine.py; this module is its measuring child")
