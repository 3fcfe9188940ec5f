"""The printed table of the engine benchmark: ratios first, then figures.

Pure formatting of the children's results (plain dicts); imports no NumPy.
"""

from __future__ import annotations

import datetime as dt

MODE_TITLE = {"train": "training, batch 64", "infer": "inference, batch 256"}


def _n(v, digits: int = 0) -> str:
    """A number with thousands separators, or '-' for None."""
    return "-" if v is None else f"{v:,.{digits}f}"


def _find(records: list[dict], net: str, mode: str, threads: int) -> dict | None:
    for r in records:
        if (r["net"], r["mode"], r["threads"]) == (net, mode, threads):
            return r
    return None


def _plan(results: list[dict]) -> str:
    """'5 repeats of at least 20 steps' from the records."""
    recs = [r for res in results for r in res["records"]]
    if not recs:
        return "no repeats"
    reps, least = recs[0]["repeats"], min(r["steps"] for r in recs)
    return f"{reps} repeat{'s' if reps != 1 else ''} of at least {least} steps"


def _header(results: list[dict], started: dt.datetime, cpu: str, quick: bool,
            revision: str) -> list[str]:
    meta = results[0]["meta"]
    v = meta["versions"]
    blas = next((p for p in meta["pools"] if p.get("user_api") == "blas"), {})
    hints = ", ".join(f"{k}={val if val is not None else '(unset)'}"
                      for k, val in meta["blas_hints"].items())
    kernels = sorted({str(r["meta"]["blas_kernel"]) for r in results})
    lines = [f"tinyconv engine speed, {started:%Y-%m-%d %H:%M} UTC, engine at {revision}",
             f"machine: {cpu}; Python {v['python']}, numpy {v['numpy']}, numba {v['numba']}, "
             f"torch {v['torch'] or 'not installed'}",
             f"BLAS: {blas.get('internal_api', '?')} {blas.get('version', '')}, kernel "
             f"{'/'.join(kernels)} (threadpoolctl); {hints}"
             + (" (removed by --unset-openblas-hints)"
                if any(r.get("hints_unset") for res in results for r in res["records"])
                else " (as the machine sets them)"),
             f"protocol: warm-up, then the median of {_plan(results)} [min-max]; ours and "
             "peer interleaved A B A B in one process per thread count"]
    loads = [(r["meta"]["threads"], r["meta"].get("load_before"), r["meta"].get("load_after"))
             for r in results]
    cpus = meta.get("cpus") or 0
    if any(b is not None for _, b, _ in loads):
        lines.append("load average (1 min) around each child: " + "; ".join(
            f"{t} thr {_n(b, 1)} -> {_n(a, 1)}" for t, b, a in loads) + f" on {cpus} CPUs")
        if any(v is not None and v > cpus + 0.5 for _, b, a in loads for v in (b, a)):
            lines.append("WARNING: other work shared the CPUs during the run; absolute figures "
                         "are low (2-thread ones most); ratios within one child hold better")
    if quick:
        lines.append("QUICK RUN: 1 repeat of 2 steps; these figures check the machinery, "
                     "they measure nothing")
    if not any(r["meta"]["peer"] for r in results):
        lines.append("peer: torch is not importable (or --no-peer); peer columns are empty")
    else:
        lines.append(f"peer: torch {v['torch']}, torch.set_num_threads equal to ours")
    return lines


def _ratios(records: list[dict], nets: list[str], modes: list[str],
            threads: list[int]) -> list[str]:
    cols = [(m, t) for m in modes for t in threads]
    head = "  net   " + "".join(f"{m + ' ' + str(t) + 't':>12}" for m, t in cols)
    lines = ["", "1. ours / peer, images per second (median / median; above 1 = ours faster)",
             head]
    for net in nets:
        cells = []
        for m, t in cols:
            r = _find(records, net, m, t)
            cells.append(f"{_n(r and r['ratio'], 2):>12}")
        lines.append(f"  {net:<6}" + "".join(cells))
    return lines


def _rates(records: list[dict]) -> list[str]:
    lines = ["", "2. images per second, median [min-max]",
             f"  {'net':<5}{'mode':<7}{'thr':>4}  {'ours':<30}{'peer':<30}"]
    for r in records:
        ours = f"{_n(r['ours_ips'])} [{_n(r['ours_ips_min'])}-{_n(r['ours_ips_max'])}]"
        peer = ("-" if r["peer_ips"] is None else
                f"{_n(r['peer_ips'])} [{_n(r['peer_ips_min'])}-{_n(r['peer_ips_max'])}]")
        lines.append(f"  {r['net']:<5}{r['mode']:<7}{r['threads']:>4}  {ours:<30}{peer:<30}")
    return lines


def _shares(results: list[dict], records: list[dict]) -> list[str]:
    lines = ["", "3. achieved GFLOP/s and share of the matrix-multiply rate "
             "(training 6 x MACs, inference 2 x MACs FLOPs per image)",
             "  MACs are those of the direct convolution. Our 3x3 stride-1 layers with 16+ input "
             "channels run Winograd: in training",
             "  F(4x4, 3x3) on maps of 8x8 or more (4x fewer multiply-adds), else and in "
             "inference F(2x2, 3x3) (2.25x fewer);",
             "  so for N3 ours is an effective rate, not the FLOPs executed."]
    for res in results:
        g = res["meta"]["gemm"]
        lines.append(f"  matrix multiply {g['n']}^2 float32, {res['meta']['threads']} thread(s): "
                     f"{g['median']:.1f} GFLOP/s [{g['min']:.1f}-{g['max']:.1f}] "
                     f"(before {g['before']:.1f}, after {g['after']:.1f})")
    lines.append(f"  {'net':<5}{'mode':<7}{'thr':>4}{'ours GFLOP/s':>14}{'share':>8}"
                 f"{'peer GFLOP/s':>14}{'share':>8}")
    for r in records:
        pf = r["peer_fraction_of_gemm"]
        lines.append(f"  {r['net']:<5}{r['mode']:<7}{r['threads']:>4}"
                     f"{r['ours_gflops']:>14.2f}{r['fraction_of_gemm']:>8.1%}"
                     f"{_n(r['peer_gflops'], 2):>14}{'-' if pf is None else f'{pf:.1%}':>8}")
    return lines


def _counts(records: list[dict], nets: list[str], notes: dict[str, str]) -> list[str]:
    lines = ["", "4. parameters and forward MACs per image "
             f"(source: {records[0]['params_source'] if records else '?'}; table = the "
             "protocol's reference table)",
             f"  {'net':<4}{'architecture':<37}{'params':>9}{'table':>9}{'ours':>9}{'peer':>9}"
             f"{'MACs':>11}{'table':>11}"]
    for net in nets:
        r = next((x for x in records if x["net"] == net), None)
        if r is None:
            continue
        same = (r["params"] == r["params_table"] == r["params_ours_net"] == r["params_expand"]
                and r["params_peer_net"] in (None, r["params"]) and r["macs"] == r["macs_table"])
        lines.append(f"  {net:<4}{r['arch']:<37}{_n(r['params']):>9}{_n(r['params_table']):>9}"
                     f"{_n(r['params_ours_net']):>9}{_n(r['params_peer_net']):>9}"
                     f"{_n(r['macs']):>11}{_n(r['macs_table']):>11}  "
                     + ("all agree" if same else "DIFFER")
                     + (f"; {notes[net]}" if notes.get(net) else ""))
    return lines


def _startup(s: dict | None) -> list[str]:
    lines = ["", "5. start-up (fresh child processes, 1 thread)"]
    if s is None:
        return lines + ["  skipped (--no-startup)"]
    c = s.get("compile", {})
    if "error" in c:
        lines.append(f"  compile: failed: {c['error']}")
    else:
        for label, key in (("empty Numba cache (compiles)", "cold"),
                           ("same cache, now filled (loads)", "warm")):
            d = c[key]
            parts = [f"{n} train {v['train_first_s']:.2f} s + infer {v['infer_first_s']:.2f} s"
                     for n, v in d["nets"].items()]
            lines.append(f"  first step, {label}: " + "; ".join(parts))
            lines.append(f"      whole child {c[key + '_wall_s']:.2f} s (imports "
                         f"{d['import_s']:.2f} s)")
        cold, warm = c["cold"]["nets"], c["warm"]["nets"]
        comp = sum(cold[n]["train_first_s"] + cold[n]["infer_first_s"]
                   - warm[n]["train_first_s"] - warm[n]["infer_first_s"] for n in cold)
        steady = "; ".join(f"{n} {v['train_second_s'] * 1000:.1f} ms" for n, v in warm.items())
        lines.append(f"  cold first-run compile time (cold - warm first steps, all nets): "
                     f"{comp:.2f} s; {c['cache_files']} cache files written")
        lines.append(f"  second training step, for scale: {steady}")
    h = s.get("help", {})
    lines.append("  " + (f"{h['command']}: {h['median_s']:.3f} s [{h['min_s']:.3f}-{h['max_s']:.3f}]"
                         " whole process" if "error" not in h else f"--help: failed: {h['error']}"))
    e = s.get("epoch", {})
    if "error" in e:
        lines.append(f"  one epoch: failed: {e['error']}")
    else:
        lines.append(f"  one epoch of N2 on 256 random images (fit, sgd, batch 64): "
                     f"{e['median_s']:.2f} s [{e['min_s']:.2f}-{e['max_s']:.2f}] whole process; "
                     f"imports + set-up {e['ready_s']:.2f} s, fit {e['fit_s']:.3f} s "
                     f"(status {e['status']})")
    return lines


def render(results: list[dict], startup: dict | None, started: dt.datetime, cpu: str,
           quick: bool, notes: dict[str, str] | None = None, revision: str = "") -> str:
    """The whole printed report."""
    records = [r for res in results for r in res["records"]]
    nets = list(dict.fromkeys(r["net"] for r in records))
    modes = list(dict.fromkeys(r["mode"] for r in records))
    threads = [res["meta"]["threads"] for res in results]
    notes = notes if notes is not None else {r["net"]: r.get("note", "") for r in records}
    lines = _header(results, started, cpu, quick, revision or "unknown revision")
    lines += _ratios(records, nets, modes, threads)
    lines += _rates(records)
    lines += _shares(results, records)
    lines += _counts(records, nets, notes)
    lines += _startup(startup)
    return "\n".join(lines)
