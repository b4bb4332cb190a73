"""The report in a real browser: headless Chromium (Debian's `chromium`) loads the
page from a file:// address, its DOM has every section and image, and a
screenshot of it is not blank. Skipped, saying so, where Chromium is absent.

Chromium's headless switches (--dump-dom prints the DOM after the page loaded,
--screenshot writes a PNG of the window): from memory, checked on Debian 12's
chromium package here."""

from __future__ import annotations

import base64
import re
import subprocess
from pathlib import Path

import numpy as np
import pytest

from slipless.report.page import collect, write
from slipless.run import open_run
from slipless.sim.scenario import ScenarioConfig, build

CHROMIUM = Path("/usr/bin/chromium")
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--hide-scrollbars"]
SECTIONS = ("summary", "completeness", "clock", "traces", "conditions", "noise", "safety")
# what Chromium shows instead of a page it could not load
BROWSER_ERRORS = ("ERR_FILE_NOT_FOUND", "ERR_ACCESS_DENIED", "ERR_", "can’t be reached",
                  "couldn’t be accessed", "Traceback")

pytestmark = pytest.mark.skipif(
    not CHROMIUM.exists(),
    reason="/usr/bin/chromium is absent (Debian package `chromium`; `make test` installs it "
           "where apt-get can): the browser test of the report is skipped")


@pytest.fixture(scope="module")
def page(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("browser")
    sc = build(folder, ScenarioConfig(seed=1, seconds=60))
    return write(collect(open_run([sc.capture], [sc.mirror])), folder / "report.html")


def _chromium(page: Path, profile: Path, *extra: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([str(CHROMIUM), *FLAGS, f"--user-data-dir={profile}", *extra,
                           page.resolve().as_uri()], capture_output=True, text=True, timeout=120)


def test_dom_has_every_section_and_image(page: Path, tmp_path: Path) -> None:
    r = _chromium(page, tmp_path / "profile", "--dump-dom")
    assert r.returncode == 0, r.stderr[-2000:]
    dom = r.stdout
    for sid in SECTIONS:
        assert f'id="{sid}"' in dom
    for text in BROWSER_ERRORS:
        assert text not in dom
    srcs = re.findall(r'<img[^>]*src="([^"]*)"', dom)
    assert len(srcs) == dom.count("<img") >= 4
    for src in srcs:
        head, _, data = src.partition(",")
        assert head == "data:image/png;base64" and len(data) > 1000
        assert base64.b64decode(data).startswith(b"\x89PNG\r\n\x1a\n")  # RFC 2083, 3.1


def test_screenshot_is_not_blank(page: Path, tmp_path: Path) -> None:
    import matplotlib.image

    shot = tmp_path / "shot.png"
    r = _chromium(page, tmp_path / "profile", f"--screenshot={shot}", "--window-size=1200,2400")
    assert r.returncode == 0 and shot.exists(), r.stderr[-2000:]
    px = matplotlib.image.imread(shot)[..., :3]
    assert px.shape[:2] == (2400, 1200)
    assert float(px.std()) > 0.05  # text, tables and plots, not one flat colour
    colours = np.unique((px.reshape(-1, 3) * 255).astype(np.uint8), axis=0)
    assert len(colours) > 50  # anti-aliased text and figures
    # the figures themselves: the lower half (plots) varies too
    assert float(px[1200:].std()) > 0.05
