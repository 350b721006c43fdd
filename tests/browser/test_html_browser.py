"""The HTML report in a real browser: Debian's chromium, headless, renders it and its DOM holds every file.

Skipped only when chromium is not installed (``.ci/run`` installs it). The page is
opened from a file:// URL with networking features switched off; the report
loads nothing, so nothing is missing.
"""
from __future__ import annotations

import json
import os
import shutil
import subprocess
from html.parser import HTMLParser

import numpy as np
import pytest
import soundfile as sf
from matplotlib import image as mpimg

from chainrun.cli import main

RATE = 48000
RECIPE = """\
format: 1
name: Saltings browser check
chain:
  - {type: highpass, freq: 45, order: 4, label: wind rumble}
  - {type: peak, freq: 1000, gain_db: 4, q: 1, label: "lift <a> & b"}
  - {type: high_shelf, freq: 5000, gain_db: 1, slope: 1, label: air}
guard:
  max_gain_db: 12
  ceiling_dbfs: 0.0
"""
STATUSES = ("failed", "rejected", "clipped", "ok", "skipped")
HANG_GUARD_S = 180            # a hung browser fails the test instead of blocking CI; not a timing check


def _chromium() -> str | None:
    for cand in ("/usr/bin/chromium", shutil.which("chromium")):
        if cand and os.access(cand, os.X_OK):
            return cand
    return None


CHROMIUM = _chromium()
pytestmark = pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed (apt-get install chromium)")


def sine(seconds, rate, amplitude, freq=1000.0):
    t = np.arange(int(seconds * rate)) / rate
    return amplitude * np.sin(2 * np.pi * freq * t)


@pytest.fixture
def report(tmp_path, capsys):
    src = tmp_path / "in"
    (src / "boathouse").mkdir(parents=True)
    sf.write(src / "boathouse" / "host stem.wav", sine(0.3, RATE, 0.1), RATE, subtype="PCM_24")          # ok
    sf.write(src / "boathouse" / "hot <take 2> & 'b'.wav", sine(0.3, RATE, 0.9), RATE, subtype="PCM_16")  # clipped
    sf.write(src / "phone line.wav", sine(0.3, 8000, 0.1, 300.0), 8000, subtype="PCM_16")  # rejected: 5 kHz >= Nyquist
    (src / "x.wav").write_text("a text file named like audio\n")                          # failed
    (src / "notes.txt").write_text("tide times\n")                                        # skipped
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text(RECIPE, encoding="utf-8")
    out = tmp_path / "out"
    assert main(["run", str(recipe), str(src), "-o", str(out), "--on-over", "clip", "--workers", "1"]) == 1
    capsys.readouterr()
    data = json.loads((out / "chainrun-report.json").read_text(encoding="utf-8"))
    assert sorted(f["status"] for f in data["files"]) == sorted(STATUSES)   # one of each
    return out / "chainrun-report.html", data


def chromium(html_path, tmp_path, *extra: str) -> subprocess.CompletedProcess:
    profile = tmp_path / "chromium-profile"
    profile.mkdir(exist_ok=True)
    cmd = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
           "--disable-background-networking", "--disable-component-update", "--disable-sync",
           f"--user-data-dir={profile}", "--hide-scrollbars", "--window-size=1280,2000", *extra,
           html_path.as_uri()]
    return subprocess.run(cmd, capture_output=True, timeout=HANG_GUARD_S, cwd=tmp_path)


class Text(HTMLParser):
    """Visible text of the DOM and the (file, status) pairs of the file table."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.chunks: list[str] = []
        self.rows: list[list[str]] = []
        self._table = self._cell = False
        self._buf: list[str] = []

    def handle_starttag(self, tag, attrs):
        if tag == "table" and ("id", "file-table") in attrs:
            self._table = True
        elif self._table and tag == "tr":
            self.rows.append([])
        elif self._table and tag == "td":
            self._cell, self._buf = True, []

    def handle_endtag(self, tag):
        if tag == "td" and self._cell:
            self.rows[-1].append("".join(self._buf).strip())
            self._cell = False
        elif tag == "table":
            self._table = False

    def handle_data(self, data):
        self.chunks.append(data)
        if self._cell:
            self._buf.append(data)


def test_screenshot_is_not_blank(report, tmp_path):
    html_path, _ = report
    png = tmp_path / "report.png"
    proc = chromium(html_path, tmp_path, f"--screenshot={png}")
    assert proc.returncode == 0, proc.stderr.decode(errors="replace")[-2000:]
    img = mpimg.imread(str(png))                     # matplotlib.image decodes the PNG (reference reader)
    assert img.shape[0] >= 1000 and img.shape[1] >= 1000
    rgb = np.round(img[..., :3] * 255).astype(np.uint8).reshape(-1, 3)
    colours, counts = np.unique(rgb, axis=0, return_counts=True)
    # chainrun's own thresholds for "a real page", no published source: more than 50 distinct
    # colours; "ink" = pixels more than 24 of 255 from the commonest colour in some channel, more
    # than 3 % (not empty) and less than 90 % (not one big block) of the screenshot
    assert len(colours) > 50                          # text, status colours and the plot, not a flat page
    background = colours[np.argmax(counts)]
    ink = np.mean(np.any(np.abs(rgb.astype(int) - background.astype(int)) > 24, axis=1))
    assert 0.03 < ink < 0.9, ink                      # a real page: neither empty nor one big block


def test_dom_holds_every_file_and_status(report, tmp_path):
    html_path, data = report
    proc = chromium(html_path, tmp_path, "--dump-dom")
    assert proc.returncode == 0, proc.stderr.decode(errors="replace")[-2000:]
    dom = proc.stdout.decode("utf-8")
    assert "<svg" in dom and "</svg>" in dom          # the inline picture was parsed as SVG, not text
    t = Text()
    t.feed(dom)
    text = "".join(t.chunks)
    pairs = {(r[1], r[2]) for r in t.rows if len(r) > 2}
    for f in data["files"]:
        assert f["relpath"] in text, f["relpath"]
        assert (f["relpath"], f["status"]) in pairs, (f["relpath"], f["status"], pairs)
    for status in STATUSES:
        assert status in text
    assert "48000 Hz: accepted by the guard" in text
    assert "8000 Hz: no chain" in text
    # the picture's own words, parsed by the browser as SVG text: its title, verdict and the guard's figures
    assert "<title>Response of Saltings browser check at 48000 Hz (accepted by the guard)</title>" in dom
    assert "Saltings browser check at 48000 Hz" in text and "largest pole radius" in text
    assert "guard limit (max_gain_db) +12 dB" in text and "max gain +" in text
    assert "2  peak 1 kHz +4 dB Q 1 (lift <a> & b)" in text          # the key names each section, escaped
