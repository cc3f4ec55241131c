"""The HTML report: self-contained, tables agree with the result files, and it opens in headless Chromium."""

from __future__ import annotations

import base64
import html
import io
import json
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
import tomllib
import xarray as xr
from PIL import Image

from regimes import figures, finished

CHROMIUM = shutil.which("chromium") or ("/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None)


class Page(HTMLParser):
    """Collects what a page refers to, its images, its tables (as rows of cell texts) and its <pre> blocks."""

    def __init__(self, text: str):
        super().__init__()
        self.references, self.images, self.tags, self.tables, self.pre = [], [], [], [], []
        self._cell = self._pre = None
        self.feed(text)

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.tags.append(tag)
        for key in ("src", "href"):
            if key in attrs:
                self.references.append(attrs[key])
        if tag == "img":
            self.images.append(attrs["src"])
        elif tag == "table":
            self.tables.append([])
        elif tag == "tr":
            self.tables[-1].append([])
        elif tag in ("td", "th"):
            self._cell = ""
        elif tag == "pre":
            self._pre = ""

    def handle_endtag(self, tag):
        if tag in ("td", "th"):
            self.tables[-1][-1].append(self._cell)
            self._cell = None
        elif tag == "pre":
            self.pre.append(self._pre)
            self._pre = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell += data
        if self._pre is not None:
            self._pre += data


@pytest.fixture(scope="module")
def page(finished_run):
    return Page((finished_run / "report.html").read_text(encoding="utf-8"))


def test_report_needs_nothing_from_outside(finished_run, page):
    found = finished.open_folder(finished_run)
    assert len(page.images) == len(figures.available(found))  # every figure, the scan's included
    for src in page.images:
        assert src.startswith("data:image/png;base64,")  # data URI (RFC 2397)
        with Image.open(io.BytesIO(base64.b64decode(src.split(",", 1)[1]))) as image:
            image.verify()
    for ref in page.references:
        assert ref.startswith(("data:", "#")), ref  # nothing fetched: no files, no network
    assert "script" not in page.tags and "iframe" not in page.tags


def test_tables_agree_with_the_result_files(finished_run, page):
    stats = xr.open_dataset(finished_run / "statistics.nc")
    regimes = next(t for t in page.tables if t[0][:4] == ["regime", "name", "days", "frequency %"])
    for row, r in zip(regimes[1:], stats["regime"].values):
        assert float(row[3]) == pytest.approx(100 * float(stats["frequency"].sel(regime=r)), abs=0.05)
        assert int(row[4]) == int(stats["episode_count"].sel(regime=r))
        p = float(stats["transition_probability"].sel(regime_from=r, regime_to=r))
        # mean time per visit of a first-order Markov chain, 1 / (1 - p) (textbook; Wilks, Markov-chain chapter)
        assert float(row[9]) == pytest.approx(1 / (1 - p), abs=0.05)
    day_to_day = next(t for t in page.tables if t[1][0] == "from 1")
    table = np.array([[float(v) for v in row[1:]] for row in day_to_day[1:]])
    np.testing.assert_allclose(table, stats["transition_probability"].values, atol=5e-4)
    np.testing.assert_allclose(table.sum(1), 1.0, atol=3e-3)  # rows of a transition matrix sum to one


def test_report_states_the_config_and_the_data_used(finished_run, page):
    labels = xr.open_dataset(finished_run / "labels.nc")
    config_text = next(p for p in page.pre if "[regimes]" in p)
    assert tomllib.loads(config_text)["regimes"]["names"] == ["zonal", "blocked", "ridge"]
    text = html.unescape((finished_run / "report.html").read_text(encoding="utf-8"))
    assert f"{labels.sizes['time']} in {int(labels['segment_start'].sum())} runs of consecutive days" in text
    assert "35 used, 0 missing" in text  # the 5 x 7 test grid has no missing points


PROBE = """<script>
window.probe = {errors: []};
addEventListener("error", e => probe.errors.push(String(e.message || (e.target && (e.target.src || e.target.href)) || "error")), true);
addEventListener("unhandledrejection", e => probe.errors.push(String(e.reason)));
for (const level of ["error", "warn"]) {
  const original = console[level];
  console[level] = (...args) => { probe.errors.push(level + ": " + args.join(" ")); original.apply(console, args); };
}
addEventListener("load", () => {
  const images = Array.from(document.images);
  const out = document.createElement("pre");
  out.id = "probe";
  out.textContent = JSON.stringify({images: images.length,
    broken: images.filter(i => !i.complete || i.naturalWidth === 0).map(i => i.alt), errors: probe.errors});
  document.body.appendChild(out);
});
</script>"""


def chromium_probe(text: str, folder: Path) -> tuple[dict, list[str]]:
    """Open ``text`` (with the probe added) in headless Chromium; the probe's findings and the console lines Chromium logged."""
    page = folder / "page.html"
    page.write_text(text.replace("<head>", "<head>" + PROBE, 1), encoding="utf-8")
    flags = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking",
             "--disable-component-update", "--disable-sync", f"--user-data-dir={folder / 'profile'}", "--enable-logging=stderr",
             "--v=0", "--virtual-time-budget=10000", "--dump-dom"]
    result = subprocess.run([CHROMIUM, *flags, page.as_uri()], capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stderr[-2000:]
    found = re.search(r'<pre id="probe">(.*?)</pre>', result.stdout, re.S)
    assert found, result.stdout[-2000:]
    return json.loads(html.unescape(found.group(1))), [line for line in result.stderr.splitlines() if ":CONSOLE" in line]


needs_chromium = pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed (Debian package 'chromium'; .ci/run installs it)")


@needs_chromium
def test_report_opens_in_headless_chromium_with_no_broken_image_and_no_console_error(finished_run, tmp_path):
    """A probe script (added to a copy of the page) records image sizes and errors into the DOM, which Chromium dumps."""
    text = (finished_run / "report.html").read_text(encoding="utf-8")
    probe, console = chromium_probe(text, tmp_path)
    assert probe["images"] == text.count("<img ") and probe["images"] >= 7
    assert probe["broken"] == []
    assert probe["errors"] == []
    assert console == []  # Chromium logs every console message of the page here


@needs_chromium
def test_the_chromium_probe_sees_broken_images_and_errors(tmp_path):
    broken = '<!DOCTYPE html><html><head></head><body><img alt="bad" src="data:image/png;base64,AAAA"><script>undefined_call()</script></body></html>'
    probe, console = chromium_probe(broken, tmp_path)
    assert probe["broken"] == ["bad"]
    assert any("undefined_call" in e for e in probe["errors"])
    assert console
