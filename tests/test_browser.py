"""The report as a reader sees it: rendered by a real browser (headless chromium) and the PDF
rasterised by pdftoppm (poppler). Every figure must show (non-blank pixels) and the page must
make no network request (checked in chromium's own network log).

Skipped when chromium or poppler is missing, unless PERFCHECK_REQUIRE_BROWSER=1 (as in CI).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from PIL import Image
from report_fixtures import rendered_example

from perfcheck import figures

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
PDFTOPPM = shutil.which("pdftoppm")
PDFIMAGES = shutil.which("pdfimages")
REQUIRED = os.environ.get("PERFCHECK_REQUIRE_BROWSER") == "1"
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--hide-scrollbars", "--host-resolver-rules=MAP * ~NOTFOUND"]
FIG_H = 520  # px per figure in the figures-only layout


def need(tool: str | None, name: str) -> str:
    if tool is None:
        if REQUIRED:
            pytest.fail(f"{name} not installed but PERFCHECK_REQUIRE_BROWSER=1")
        pytest.skip(f"{name} not installed")
    return tool


def chromium(page: Path, shot: Path, tmp: Path, width: int, height: int) -> list[str]:
    """Screenshot ``page``; returns the URLs the page itself requested (from the net log)."""
    exe = need(CHROMIUM, "chromium")
    log = tmp / f"{shot.stem}.netlog.json"
    subprocess.run([exe, *FLAGS, f"--user-data-dir={tmp / ('profile-' + shot.stem)}",
                    f"--log-net-log={log}", f"--window-size={width},{height}",
                    f"--screenshot={shot}", page.as_uri()],
                   check=True, capture_output=True, timeout=180)
    return page_requests(json.loads(log.read_text()))


def page_requests(netlog: dict) -> list[str]:
    """URLs of requests started by a page (initiator set): the browser's own background
    requests carry the initiator 'not an origin' and are not the page's doing."""
    start = netlog["constants"]["logEventTypes"]["URL_REQUEST_START_JOB"]
    urls = []
    for e in netlog["events"]:
        p = e.get("params", {})
        url = p.get("url")
        if e["type"] == start and url and p.get("initiator") != "not an origin":
            if not url.startswith(("data:", "file:")):
                urls.append(url)
    return urls


def ink_share(img: np.ndarray) -> float:
    """Share of pixels that are neither white nor the report's paper colour."""
    rgb = img[..., :3].astype(int)
    paper = np.array([int(figures.PAPER[i:i + 2], 16) for i in (1, 3, 5)])
    blank = (np.abs(rgb - 255).max(axis=-1) < 8) | (np.abs(rgb - paper).max(axis=-1) < 8)
    return float(1 - blank.mean())


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("browser")
    _, paths = rendered_example(tmp)
    return tmp, paths


def test_page_renders_without_network(written):
    tmp, paths = written
    shot = tmp / "page.png"
    requests = chromium(paths["html"], shot, tmp, 1100, 9800)
    assert requests == []
    img = np.asarray(Image.open(shot))
    assert img.shape[:2] == (9800, 1100)
    assert ink_share(img[:80]) > 0.9  # the dark header band
    assert ink_share(img) > 0.05


def test_network_check_catches_a_remote_image(tmp_path):
    # control: the same check on a page that loads a remote image must report it
    page = tmp_path / "remote.html"
    page.write_text('<html><body><img src="http://example.invalid/x.png"></body></html>')
    assert chromium(page, tmp_path / "remote.png", tmp_path, 300, 200) == [
        "http://example.invalid/x.png"]


def test_every_figure_shows_in_the_browser(written):
    tmp, paths = written
    # The same page with everything but the figures hidden and each figure at a known place.
    css = ["header, footer, main > :not(#figures), #figures h2, figcaption {display:none}",
           "body {margin:0} figure {position:absolute; left:0; width:1000px; margin:0; "
           f"padding:0; border:0; height:{FIG_H - 20}px; overflow:hidden}}"]
    for k in range(len(figures.FIGURES)):
        css.append(f"#figures figure:nth-of-type({k + 1}) {{top:{k * FIG_H}px}}")
    html = paths["html"].read_text(encoding="utf-8")
    page = tmp / "figures_only.html"
    page.write_text(html.replace("</head>", f"<style>{' '.join(css)}</style></head>"))
    shot = tmp / "figures_only.png"
    assert chromium(page, shot, tmp, 1000, FIG_H * len(figures.FIGURES)) == []
    img = np.asarray(Image.open(shot))
    for k, (stem, _, _) in enumerate(figures.FIGURES):
        part = img[k * FIG_H + 40:(k + 1) * FIG_H - 60]
        assert ink_share(part) > 0.03, f"figure {stem} looks blank in the browser"


def test_pdf_pages_and_figures(written):
    tmp, paths = written
    exe = need(PDFTOPPM, "pdftoppm (poppler-utils)")
    subprocess.run([exe, "-r", "50", "-png", str(paths["pdf"]), str(tmp / "page")], check=True,
                   timeout=120)
    pages = sorted(tmp.glob("page-*.png"))
    assert len(pages) >= 4
    for p in pages:
        assert ink_share(np.asarray(Image.open(p).convert("RGB"))) > 0.005, p.name
    images = subprocess.run([need(PDFIMAGES, "pdfimages"), "-list", str(paths["pdf"])],
                            check=True, capture_output=True, text=True).stdout.splitlines()[2:]
    assert len([line for line in images if " image " in line]) == len(figures.FIGURES)
