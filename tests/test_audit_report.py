"""report.html: parsed with the standard library's html.parser, and opened once in headless
Chromium (Debian package chromium) when it is installed."""

from __future__ import annotations

import base64
import io
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from audit_builds import make_build
from bivocab.audit import run_audit

PLOTS = ("rank-frequency", "growth", "bands", "homograph-scatter", "conditions")
CHROMIUM = shutil.which("chromium") or ("/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None)


class PageParts(HTMLParser):
    """Collects figures with their images, tables with captions, and every URL attribute."""

    def __init__(self) -> None:
        super().__init__()
        self.figures: dict[str, dict[str, str]] = {}
        self.urls: list[str] = []
        self.tags: list[str] = []
        self.captions: list[str] = []
        self._figure: str | None = None
        self._in_caption = False

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.tags.append(tag)
        if tag == "figure":
            self._figure = attrs.get("id")
        if tag == "img" and self._figure:
            self.figures[self._figure] = {"src": attrs.get("src", ""), "alt": attrs.get("alt", "")}
        for name in ("src", "href"):
            if name in attrs:
                self.urls.append(attrs[name])
        if tag == "caption":
            self._in_caption = True
            self.captions.append("")

    def handle_endtag(self, tag):
        if tag == "figure":
            self._figure = None
        if tag == "caption":
            self._in_caption = False

    def handle_data(self, data):
        if self._in_caption:
            self.captions[-1] += data


@pytest.fixture(scope="module")
def report(tmp_path_factory) -> Path:
    out = make_build(tmp_path_factory.mktemp("report"), lines=300)
    run_audit(out)
    return out / "audit" / "report.html"


@pytest.fixture(scope="module")
def parts(report) -> PageParts:
    parser = PageParts()
    parser.feed(report.read_text(encoding="utf-8"))
    return parser


def test_every_plot_is_present(parts):
    assert set(parts.figures) == set(PLOTS)


@pytest.mark.parametrize("plot", PLOTS)
def test_plot_is_an_embedded_png(parts, plot):
    src = parts.figures[plot]["src"]
    prefix = "data:image/png;base64,"
    assert src.startswith(prefix)
    image = Image.open(io.BytesIO(base64.b64decode(src[len(prefix):], validate=True)))
    assert image.format == "PNG" and image.width >= 600 and image.height >= 300


@pytest.mark.parametrize("plot", PLOTS)
def test_plot_has_alt_text_with_its_numbers(parts, plot):
    alt = parts.figures[plot]["alt"]
    assert len(alt) > 60 and any(ch.isdigit() for ch in alt)


def test_page_loads_nothing_from_outside(parts):
    assert all(url.startswith("data:") for url in parts.urls)
    assert "script" not in parts.tags and "link" not in parts.tags and "iframe" not in parts.tags


def test_statistics_are_also_in_tables(parts):
    captions = " | ".join(parts.captions)
    for title in ("Training text per language", "Shared spellings by class", "Overlap by frequency band",
                  "Uncapped vocabulary size per policy", "Share of tokens out of vocabulary", "Homographs"):
        assert title in captions


@pytest.mark.skipif(CHROMIUM is None, reason="headless Chromium not installed: apt-get install chromium "
                                             "(CI must install it)")
def test_report_renders_in_headless_chromium(report, tmp_path):
    shot = tmp_path / "report.png"
    command = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
               "--disable-background-networking", "--disable-component-update", "--disable-sync",
               f"--user-data-dir={tmp_path / 'profile'}", "--hide-scrollbars", "--window-size=1280,2400",
               f"--screenshot={shot}", report.as_uri()]
    subprocess.run(command, check=True, capture_output=True, timeout=120)
    pixels = np.asarray(Image.open(shot).convert("RGB")).astype(int)
    assert pixels.shape[:2] == (2400, 1280)
    # The orange of the second language's curves (#D55E00) appears only inside the plots, so
    # finding it shows that Chromium decoded and drew the embedded images.
    orange = (abs(pixels[..., 0] - 0xD5) < 12) & (abs(pixels[..., 1] - 0x5E) < 12) & (pixels[..., 2] < 16)
    assert orange.sum() > 200
