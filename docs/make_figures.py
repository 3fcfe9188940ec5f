"""Make the README's figures, screenshots and demo figures from a real demo run.

Usage (from the repository's root)::

    python docs/make_figures.py                 # run `tinyconv demo` afresh, then make everything
    python docs/make_figures.py --run DIR       # use a finished demo run folder instead
    python docs/make_figures.py --check         # only say whether README's block is current

What it writes, so that the README never drifts from what the tool does:

* ``docs/terminal.png``: what ``tinyconv demo`` printed (stdout and stderr as
  one stream, as in a log), drawn by headless Chromium from the transcript;
* ``docs/report.png``: the top of the demo's ``report.html`` in headless
  Chromium, 1280 pixels wide;
* ``docs/folds.png``, ``docs/pareto.png``, ``docs/gallery.png``: the report's
  own figures (``folds.png``, ``pareto_params.png``, ``mistakes.png``);
* the README's block between ``<!-- demo-figures:start -->`` and
  ``<!-- demo-figures:end -->``: the run's facts, the pick, the best, the
  pixels baseline, the int8 agreement and the device table, all read from the
  run folder (``run.sqlite``, ``ranking.csv``, ``export/summary.json``,
  ``export/device.json``).

Chromium is found as ``chromium`` on the PATH or ``/usr/bin/chromium`` (Debian's
package). Nothing here is imported by the tests.
"""

from __future__ import annotations

import argparse
import datetime as dt
import html
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
import textwrap
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
DOCS = ROOT / "docs"
README = ROOT / "README.md"
START, END = "<!-- demo-figures:start -->", "<!-- demo-figures:end -->"
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync")
COPIES = {"folds.png": "folds.png", "pareto_params.png": "pareto.png",
          "mistakes.png": "gallery.png"}


def chromium() -> str:
    found = shutil.which("chromium") or ("/usr/bin/chromium" if Path("/usr/bin/chromium").exists()
                                         else None)
    if found is None:
        sys.exit("error: headless Chromium not found; install Debian's 'chromium' package")
    return found


def screenshot(page: Path, out: Path, width: int, height: int) -> None:
    """A headless Chromium screenshot of ``page`` at ``width`` x ``height`` pixels."""
    with tempfile.TemporaryDirectory() as profile:
        subprocess.run([chromium(), *FLAGS, f"--user-data-dir={profile}",
                        f"--screenshot={out}", f"--window-size={width},{height}",
                        "--hide-scrollbars", page.as_uri()],
                       check=True, capture_output=True, timeout=180)


def run_demo(folder: Path) -> tuple[str, float]:
    """Run ``tinyconv demo --out folder``; its transcript and wall seconds."""
    start = dt.datetime.now()
    done = subprocess.run([sys.executable, "-m", "tinyconv", "demo", "--out", str(folder)],
                          cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
                          text=True, env={**os.environ, "COLUMNS": "100"})
    if done.returncode != 0:
        sys.exit(f"error: tinyconv demo exited {done.returncode}:\n{done.stdout}")
    return done.stdout, (dt.datetime.now() - start).total_seconds()


def terminal_page(transcript: str, run_dir: Path) -> Path:
    """The transcript as a dark terminal-like page (run folder paths shortened)."""
    text = transcript.replace(str(run_dir), "tinyconv-demo")
    page = run_dir / "terminal.html"
    page.write_text(
        "<!DOCTYPE html><html><head><meta charset='utf-8'><style>"
        "body{margin:0;background:#1d2330;color:#e8e4da;}"
        "pre{margin:0;padding:18px 22px;font:13px/1.45 'DejaVu Sans Mono',monospace;"
        "white-space:pre-wrap;}</style></head><body><pre>$ tinyconv demo\n"
        + html.escape(text) + "</pre></body></html>", encoding="utf-8")
    return page


def facts(run_dir: Path, wall_s: float | None) -> dict:
    """Everything the README block quotes, read from the run folder."""
    import pandas as pd

    from search.store import RunStore

    with RunStore(run_dir) as store:
        config, outcome = store.config(), store.outcome() or {}
        candidates, units = store.candidates(), store.units()
    ranking = pd.read_csv(run_dir / "ranking.csv")
    export = json.loads((run_dir / "export" / "summary.json").read_text())
    device_path = run_dir / "export" / "device.json"
    device = json.loads(device_path.read_text()) if device_path.exists() else None
    fin = ranking[ranking["finalist"]]
    best = fin.sort_values(["acc_mean", "params"], ascending=[False, True]).iloc[0]
    pixels = ranking[~ranking["candidate"].str.contains("/")]
    return {"config": config, "outcome": outcome, "candidates": candidates, "units": units,
            "ranking": ranking, "pick": ranking.iloc[0], "best": best,
            "pixels": pixels.iloc[0] if len(pixels) else None, "export": export,
            "device": device, "wall_s": wall_s}


def block(f: dict) -> str:
    """The README's demo-figures block (Markdown)."""
    from tinyconv import fmt

    cfg, pick, best, o = f["config"], f["pick"], f["best"], f["outcome"]
    within = int(f["candidates"]["within_budget"].sum())
    searched = int(f["candidates"]["scheduled"].sum())
    epochs = sorted(set(int(e) for e in f["units"]["epochs"]))
    wall = f"{f['wall_s']:.0f} s wall, " if f["wall_s"] else ""
    lines = [
        f"A run of `tinyconv demo` ({dt.date.today():%Y-%m-%d}, on a shared 2-core machine; "
        f"{wall}{o.get('cpu_s', 0):.0f} s of training CPU) searched {searched} of the "
        f"{within} candidates within budget with {cfg['folds']}-fold cross-validation and "
        f"successive halving (rungs of {' and '.join(map(str, epochs))} epochs, "
        f"{len(f['units'])} units), and picked `{pick['candidate']}`: "
        f"{fmt.accuracy(pick['acc_mean'], pick['acc_se'])} held-out accuracy (chance is "
        f"{fmt.percent(1 / len(cfg['classes']))}), {fmt.count(pick['params'])} parameters, "
        f"{pick['flash_kb']:.1f} KB of flash and {pick['peak_kb']:.1f} KB of SRAM for "
        f"activations, training accuracy {fmt.percent(pick['train_acc_mean'])}."]
    if best["candidate"] != pick["candidate"]:
        lines.append(
            f"The best, `{best['candidate']}`, scored "
            f"{fmt.accuracy(best['acc_mean'], best['acc_se'])} with training accuracy "
            f"{fmt.percent(best['train_acc_mean'])} and {fmt.count(best['params'])} "
            f"parameters; the pick is within one standard error of it (corrected t-test "
            f"p = {pick['p_vs_best']:.2f}).")
    if f["pixels"] is not None:
        px = f["pixels"]
        lines.append(
            f"Softmax regression on the pixels (`{px['candidate']}`) fitted "
            f"{fmt.percent(px['train_acc_mean'])} of its training folds and "
            f"{fmt.accuracy(px['acc_mean'], px['acc_se'])} of its held-out folds: the mark "
            "moves, and a dense layer cannot follow it.")
    e = f["export"]
    lines.append(f"The int8 export agrees with the float network on "
                 f"{fmt.percent(e['agreement'])} of the {e['n_eval']:,} images it was "
                 "retrained on.")
    out = textwrap.fill(" ".join(lines), width=79, break_on_hyphens=False,
                        break_long_words=False)
    d = f["device"]
    if d:
        est = d["estimate"]
        out += (
            "\n\n" + textwrap.fill(
                f"Measured by the demo on an emulated {d['core']} (as `tinyconv export "
                f"tinyconv-demo --core {d['core']} --clock-mhz {d['clock_mhz']:g}` does), on "
                f"{d['images']} images held out of its calibration:", width=79,
                break_on_hyphens=False, break_long_words=False) + "\n\n"
            "| figure | measured | cost model |\n| --- | ---: | ---: |\n"
            f"| instructions per image | {d['instructions']:,} | {est['instructions']:,} |\n"
            f"| instructions per MAC | {d['instructions_per_mac']:.2f} | "
            f"{est['instructions'] / max(d['macs'], 1):.2f} |\n"
            f"| ms at {d['clock_mhz']:g} MHz (assuming {d['cpi']:g} cycles per instruction) "
            f"| {d['ms_at_clock']:.1f} | {est['ms_at_clock']:.1f} |\n"
            f"| flash bytes (code {d['flash_code_bytes']:,} + constants "
            f"{d['flash_data_bytes']:,}) | {d['flash_bytes']:,} | {est['flash_bytes']:,} |\n"
            f"| RAM bytes (activations {d['ram_static_bytes']:,} + stack {d['stack_bytes']:,}) "
            f"| {d['ram_bytes']:,} | {est['ram_bytes']:,} |\n"
            f"| logits equal to the NumPy integer reference | "
            f"{d['images'] - d['mismatched_images']} of {d['images']} images | |")
    return out


def replace_block(readme: str, text: str) -> str:
    """The README with its demo-figures block replaced by ``text``."""
    pattern = re.compile(re.escape(START) + r".*?" + re.escape(END), re.S)
    if not pattern.search(readme):
        sys.exit(f"error: README.md has no {START} ... {END} block; add the two markers "
                 "where the demo's figures belong")
    return pattern.sub(lambda _: f"{START}\n{text}\n{END}", readme)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--run", type=Path, default=None,
                        help="a finished demo run folder (default: run the demo afresh)")
    parser.add_argument("--check", action="store_true",
                        help="with --run: exit 1 when README's block differs from the run's")
    args = parser.parse_args()
    sys.path.insert(0, str(ROOT))
    with tempfile.TemporaryDirectory() as tmp:
        run_dir, transcript, wall = args.run, None, None
        if run_dir is None:
            run_dir = Path(tmp) / "tinyconv-demo"
            print(f"running tinyconv demo into {run_dir} ...", file=sys.stderr)
            transcript, wall = run_demo(run_dir)
        text = block(facts(run_dir, wall))
        readme = README.read_text(encoding="utf-8")
        if args.check:
            current = re.search(re.escape(START) + r"\n(.*?)\n" + re.escape(END), readme, re.S)
            same = current is not None and re.sub(r"\(\d{4}-\d\d-\d\d[^)]*\)", "",
                                                  current.group(1)) == re.sub(
                r"\(\d{4}-\d\d-\d\d[^)]*\)", "", text)
            print("README's demo figures are current" if same else
                  "README's demo figures differ from the run's")
            return 0 if same else 1
        README.write_text(replace_block(readme, text), encoding="utf-8")
        for name, target in COPIES.items():
            shutil.copyfile(run_dir / name, DOCS / target)
        screenshot(run_dir / "report.html", DOCS / "report.png", 1280, 1500)
        if transcript is not None:
            lines = transcript.count("\n") + 2
            screenshot(terminal_page(transcript, run_dir), DOCS / "terminal.png", 1320,
                       min(2400, 40 + 19 * lines))
    print("wrote " + ", ".join(f"docs/{n}" for n in
                               ("report.png", *COPIES.values(), "terminal.png"))
          + " and README.md's demo figures")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
