"""report.html in a real headless Chromium: it renders, and every embedded figure decodes.

The page carries an inline script that, on ``load``, sets ``data-figures="ok"`` on
``<body>`` when every ``<img>`` is complete with a natural width above 0; the DOM dump
shows the result. No network is needed: figures are data: URIs, CSS is inline.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import matplotlib.image as mpimg
import pytest

from harness.reporting import write_report

CHROMIUM = "/usr/bin/chromium"
FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]

pytestmark = pytest.mark.slow


def _chromium() -> str:
    path = CHROMIUM if Path(CHROMIUM).exists() else shutil.which("chromium")
    if not path:
        pytest.fail(
            "headless Chromium is required for this test and was not found at "
            f"{CHROMIUM}: install it with `apt-get update && apt-get install -y "
            "chromium` (CI installs it in .ci/run)."
        )
    return path


def _run(args, profile, timeout=120) -> subprocess.CompletedProcess:
    cmd = [_chromium(), *FLAGS, f"--user-data-dir={profile}", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, check=False)


@pytest.fixture(scope="module")
def page(sweep_dir, tmp_path_factory):
    out = tmp_path_factory.mktemp("browser") / "run"
    shutil.copytree(sweep_dir, out)
    return write_report(out)


def test_screenshot_is_not_blank(page, tmp_path):
    shot = tmp_path / "shot.png"
    res = _run([f"--screenshot={shot}", "--window-size=1280,4000", page.as_uri()], tmp_path / "profile")
    assert shot.exists(), res.stderr[-2000:]
    img = mpimg.imread(shot)
    assert img.shape[:2] == (4000, 1280)
    assert img[..., :3].std() > 0.05  # text and figures, not a blank page


def test_every_figure_renders(page, tmp_path):
    res = _run(["--dump-dom", "--virtual-time-budget=10000", page.as_uri()], tmp_path / "profile")
    dom = res.stdout
    assert "<body" in dom, res.stderr[-2000:]
    imgs = re.findall(r"<img\b[^>]*>", dom)
    assert len(imgs) >= 5
    assert all(re.search(r'src="data:image/png;base64,', tag) for tag in imgs)
    body = re.search(r"<body\b[^>]*>", dom).group(0)
    assert 'data-figures="ok"' in body
    assert f'data-figures-rendered="{len(imgs)}"' in body
    assert f'data-figures-total="{len(imgs)}"' in body
    assert f"Figures rendered: {len(imgs)} of {len(imgs)}." in dom
