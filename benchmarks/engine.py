"""Engine speed: training and inference images/s of the reference networks.

Usage::

    python benchmarks/engine.py                      # N1-N5, train + infer, 1 and 2 threads
    python benchmarks/engine.py --json out.json      # also write the records
    python benchmarks/engine.py --quick --no-startup # one repeat of two steps (smoke run)
    python benchmarks/engine.py --profile N2,N3      # time per layer of one training step

Each thread count runs in its own child process whose environment fixes the
thread pools before NumPy is imported; in it, our engine and (when torch is
importable) the same network in torch are timed in turn, A B A B, after a
warm-up, and the machine's float32 matrix-multiply rate is measured before and
after. The printed table gives ratios first, then figures. See
benchmarks/README.md for how to read it.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

import _report  # noqa: E402  (after the path fix; imports no NumPy)
import _timing  # noqa: E402

NETS = ("N1", "N2", "N3", "N4", "N5")
MODES = ("train", "infer")


def _names(text: str, allowed: tuple[str, ...], what: str) -> tuple[str, ...]:
    """Comma-separated names, each checked against ``allowed``."""
    items = tuple(s.strip() for s in text.split(",") if s.strip())
    bad = [s for s in items if s not in allowed]
    if bad or not items:
        raise argparse.ArgumentTypeError(f"{what} {text!r}: expected a comma-separated list of "
                                         f"{', '.join(allowed)}")
    return items


def _threads(text: str) -> tuple[int, ...]:
    try:
        vals = tuple(int(s) for s in text.split(","))
    except ValueError:
        vals = ()
    if not vals or min(vals) < 1:
        raise argparse.ArgumentTypeError(f"threads {text!r}: expected counts >= 1 such as 1,2")
    return vals


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="benchmarks/engine.py", description=__doc__.split("\n")[0])
    p.add_argument("--threads", type=_threads, default=(1, 2), help="thread counts (1,2)")
    p.add_argument("--nets", type=lambda s: _names(s, NETS, "nets"), default=NETS,
                   help="reference networks (N1,N2,N3,N4,N5)")
    p.add_argument("--modes", type=lambda s: _names(s, MODES, "modes"), default=MODES,
                   help="train, infer or both")
    p.add_argument("--repeats", type=int, default=5, help="timed repeats (>= 5 for figures)")
    p.add_argument("--steps", type=int, default=20, help="least steps a repeat (>= 20)")
    p.add_argument("--quick", action="store_true",
                   help="1 repeat of 2 steps, small GEMM: checks the machinery only")
    p.add_argument("--no-peer", action="store_true", help="skip torch even when importable")
    p.add_argument("--no-startup", action="store_true", help="skip the start-up figures")
    p.add_argument("--unset-openblas-hints", action="store_true",
                   help=f"unset {' and '.join(_timing.BLAS_HINTS)} in the children")
    p.add_argument("--json", metavar="PATH", help="write the records as a JSON list")
    p.add_argument("--profile", type=lambda s: _names(s, NETS, "profile"), metavar="NETS",
                   help="instead: time each layer of one training step (1 thread)")
    p.add_argument("--worker", type=int, metavar="THREADS", help=argparse.SUPPRESS)
    p.add_argument("--worker-out", help=argparse.SUPPRESS)
    return p


def _log(msg: str) -> None:
    print(msg, file=sys.stderr, flush=True)


def _child_args(args: argparse.Namespace, threads: int, out: str) -> list[str]:
    cmd = [sys.executable, str(Path(__file__).resolve()), "--worker", str(threads),
           "--worker-out", out, "--nets", ",".join(args.nets), "--modes", ",".join(args.modes),
           "--repeats", str(args.repeats), "--steps", str(args.steps)]
    for flag in ("quick", "no_peer", "unset_openblas_hints"):
        if getattr(args, flag):
            cmd.append("--" + flag.replace("_", "-"))
    return cmd


def run_children(args: argparse.Namespace) -> list[dict]:
    """One child process per thread count; their results in thread order."""
    results = []
    for threads in args.threads:
        env = _timing.thread_env(threads, unset_hints=args.unset_openblas_hints)
        fd, out = tempfile.mkstemp(prefix=f"tinyconv-bench-{threads}t-", suffix=".json")
        os.close(fd)
        try:
            _log(f"measuring at {threads} thread(s) in a child process ...")
            proc = subprocess.run(_child_args(args, threads, out), env=env, check=False)
            if proc.returncode != 0:
                raise SystemExit(f"error: the {threads}-thread child failed with exit code "
                                 f"{proc.returncode}; its messages are above")
            with open(out, encoding="utf-8") as fh:
                results.append(json.load(fh))
        finally:
            os.unlink(out)
    return results


def worker_main(args: argparse.Namespace) -> int:
    """The child's side: measure at ``args.worker`` threads, write JSON."""
    import _worker

    plan = _worker.Plan.quick() if args.quick else _worker.Plan(repeats=args.repeats,
                                                                min_steps=args.steps)
    result = _worker.run(args.worker, args.nets, args.modes, plan, not args.no_peer,
                         args.unset_openblas_hints, log=_log)
    with open(args.worker_out, "w", encoding="utf-8") as fh:
        json.dump(result, fh)
    return 0


def profile_main(args: argparse.Namespace) -> int:
    """Per-layer profile in a 1-thread child (so the pools really hold one thread)."""
    if args.worker is None:
        load = _timing.load_average()
        print(f"tinyconv engine profile, {dt.datetime.now(dt.timezone.utc):%Y-%m-%d %H:%M} UTC, "
              f"engine at {engine_revision()}; {_timing.cpu_model()}; load average "
              f"{'-' if load is None else f'{load:.1f}'} on {os.cpu_count()} CPUs\n", flush=True)
        cmd = [sys.executable, str(Path(__file__).resolve()), "--worker", "1",
               "--profile", ",".join(args.profile)] + (["--quick"] if args.quick else [])
        return subprocess.run(cmd, env=_timing.thread_env(1), check=False).returncode
    import _layer_profile

    for name in args.profile:
        print(_layer_profile.report(name, steps=3 if args.quick else 20))
    return 0


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    if args.profile:
        return profile_main(args)
    if args.worker is not None:
        return worker_main(args)
    if not args.quick and (args.repeats < 5 or args.steps < 20):
        _log("note: fewer than 5 repeats or 20 steps is below the protocol; figures are rough")
    started = dt.datetime.now(dt.timezone.utc)
    results = run_children(args)
    startup = None if args.no_startup else _startup_figures(args)
    revision = engine_revision()
    print(_report.render(results, startup, started, _timing.cpu_model(), args.quick,
                         revision=revision))
    if args.json:
        records = [dict(rec, date=started.isoformat(timespec="seconds"),
                        cpu=_timing.cpu_model(), quick=args.quick, revision=revision,
                        **{f"{k}_version": v for k, v in r["meta"]["versions"].items()
                           if k in ("numpy", "numba", "torch")})
                   for r in results for rec in r["records"]]
        Path(args.json).write_text(json.dumps(records, indent=1) + "\n", encoding="utf-8")
        _log(f"wrote {len(records)} records to {args.json}")
    return 0


def engine_revision() -> str:
    """The repository's commit, with '+ local changes' when tracked files differ from it."""
    def git(*cmd: str) -> str:
        proc = subprocess.run(["git", *cmd], cwd=HERE.parent, capture_output=True, text=True,
                              check=False)
        return proc.stdout.strip() if proc.returncode == 0 else ""

    rev = git("rev-parse", "--short", "HEAD")
    if not rev:
        return "unknown (not a git checkout)"
    return rev + (" + local changes" if git("status", "--porcelain", "--untracked-files=no")
                  else "")


def _startup_figures(args: argparse.Namespace) -> dict:
    import _startup

    _log("start-up figures in fresh child processes ...")
    return _startup.measure(args.nets, log=_log)


if __name__ == "__main__":
    sys.exit(main())
