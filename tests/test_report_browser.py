"""The report page in a real headless Chromium: it renders, and every image loads."""

from __future__ import annotations

import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from report_fixture import shared_report

CHROMIUM = shutil.which("chromium") or ("/usr/bin/chromium" if os.path.exists("/usr/bin/chromium")
                                        else None)
pytestmark = [
    pytest.mark.browser,
    pytest.mark.slow,
    pytest.mark.skipif(CHROMIUM is None, reason="headless Chromium not installed (Debian "
                       "package 'chromium'; .ci/run installs it when it can): browser test "
                       "skipped"),
]
WIDTH, HEIGHT = 1280, 4000
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync")
# Appended to a test copy of the page only (the report itself has no scripts):
# after the load event, count images that did not decode.
PROBE = ("<script>window.addEventListener('load',function(){var im=document.images,bad=0;"
         "for(var i=0;i<im.length;i++){if(!(im[i].complete&&im[i].naturalWidth>0))bad++;}"
         "var p=document.createElement('pre');p.id='probe';"
         "p.textContent='images='+im.length+' broken='+bad;document.body.appendChild(p);});"
         "</script>")


def _chromium(tmp: Path, *args: str) -> subprocess.CompletedProcess:
    profile = tmp / "profile"
    return subprocess.run([CHROMIUM, *FLAGS, f"--user-data-dir={profile}", *args],
                          capture_output=True, text=True, timeout=120)


@pytest.fixture(scope="module")
def page(tmp_path_factory) -> Path:
    return shared_report(tmp_path_factory)[0] / "report.html"


def test_screenshot_has_the_window_size_and_is_not_blank(page, tmp_path):
    """A headless screenshot has the window's size and shows varied content, not a blank page."""
    shot = tmp_path / "report.png"
    _chromium(tmp_path, f"--screenshot={shot}", f"--window-size={WIDTH},{HEIGHT}",
              page.as_uri())
    assert shot.is_file(), "chromium wrote no screenshot"
    with Image.open(shot) as im:
        assert im.size == (WIDTH, HEIGHT)
        px = np.asarray(im.convert("RGB"), dtype=np.int16)
    background = np.array([0xfb, 0xf8, 0xf2])            # the page colour (palette paper)
    differs = np.abs(px - background).sum(axis=-1) > 30
    assert differs.mean() > 0.06                          # figures and tables cover the page
    assert px.reshape(-1, 3).std(axis=0).min() > 20       # not a single flat colour
    # the figures' dark held-out ink appears (drawn images, not empty frames)
    ink = np.abs(px - np.array([0x26, 0x3d, 0x78])).sum(axis=-1) < 40
    assert ink.sum() > 8000


def test_every_image_loads_in_the_browser(page, tmp_path):
    """After load, Chromium reports every image of the page decoded (none broken)."""
    text = page.read_text(encoding="utf-8")
    n_img = text.count("<img ")
    probe = tmp_path / "probe.html"
    probe.write_text(text.replace("</body>", PROBE + "</body>"), encoding="utf-8")
    # a copy with one broken image shows the probe does catch failures
    broken = tmp_path / "broken.html"
    broken.write_text(text.replace("</body>", '<img src="data:image/png;base64,AAAA">'
                                   + PROBE + "</body>"), encoding="utf-8")
    seen = {}
    for name, path in (("page", probe), ("broken", broken)):
        out = _chromium(tmp_path, "--virtual-time-budget=5000", "--dump-dom", path.as_uri())
        line = next((ln for ln in out.stdout.splitlines() if 'id="probe"' in ln), "")
        seen[name] = line[line.find(">") + 1:line.find("</pre>")]
    assert seen["page"] == f"images={n_img} broken=0"
    assert seen["broken"] == f"images={n_img + 1} broken=1"
