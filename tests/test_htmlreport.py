"""The HTML report: self-contained, escaped, worst first, one picture per designed rate, valid HTML5."""
from __future__ import annotations

import json
import os
import re
import textwrap
from html.parser import HTMLParser

import numpy as np
import pytest
import soundfile as sf

from chainrun.cli import main

RATE = 48000
HOSTILE = ['hot <take 2> & "b".wav', "<img src=x onerror=alert(1)>.wav"]
RECIPE = """\
format: 1
name: Marsh <test> & "mix" <script>alert(1)</script>
chain:
  - {type: peak, freq: 1000, gain_db: 4, q: 1, label: lift <a> & b}
  - {type: high_shelf, freq: 5000, gain_db: 1, slope: 1}
guard:
  max_gain_db: 12
  ceiling_dbfs: 0.0
"""
# issue #6: the order a report lists files in
RANK = {"failed": 0, "rejected": 1, "clipped": 2, "ok": 3, "skipped": 4}
VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}


def sine(seconds: float, rate: int, amplitude: float, freq: float = 1000.0) -> np.ndarray:
    t = np.arange(int(seconds * rate)) / rate
    return amplitude * np.sin(2 * np.pi * freq * t)


def make_mix(tmp_path, extra_names=()):
    """Inputs with every status: ok (two levels), clipped, rejected (8 kHz: a section above Nyquist), failed, skipped."""
    src = tmp_path / "in"
    src.mkdir()
    sf.write(src / "quiet take.wav", sine(0.2, RATE, 0.1), RATE, subtype="PCM_24")
    sf.write(src / "louder take.wav", sine(0.2, RATE, 0.3), RATE, subtype="PCM_24")
    sf.write(src / HOSTILE[0], sine(0.2, RATE, 0.9), RATE, subtype="PCM_16")          # +4 dB lift: clips
    sf.write(src / HOSTILE[1], sine(0.1, RATE, 0.05), RATE, subtype="PCM_16")
    sf.write(src / "phone line.wav", sine(0.2, 8000, 0.1, 300.0), 8000, subtype="PCM_16")
    (src / "notes.wav").write_text("a text file with an audio name\n")
    (src / "readme.txt").write_text("not audio\n")
    for name in extra_names:
        with open(os.path.join(os.fsencode(src), name), "wb") as fh:
            fh.write((src / "quiet take.wav").read_bytes())
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text(RECIPE, encoding="utf-8")
    return recipe, src, tmp_path / "out"


def run_batch(tmp_path, extra_names=(), capsys=None):
    recipe, src, out = make_mix(tmp_path, extra_names)
    status = main(["run", str(recipe), str(src), "-o", str(out), "--on-over", "clip", "--workers", "1"])
    if capsys is not None:
        capsys.readouterr()
    assert status == 1                                  # not every file is ok
    page = (out / "chainrun-report.html").read_text(encoding="utf-8")
    data = json.loads((out / "chainrun-report.json").read_text(encoding="utf-8"))
    return page, data


@pytest.fixture
def report(tmp_path, capsys):
    return run_batch(tmp_path, extra_names=[b"bad\xff name.wav"], capsys=capsys)


class Page(HTMLParser):
    """Tag balance, ids, attributes and the rows of the file table."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.ids: list[str] = []
        self.attrs: list[tuple[str, str, str | None]] = []
        self.rows: list[list[str]] = []
        self.text: list[str] = []
        self._in_table = False
        self._cell: list[str] | None = None

    def handle_starttag(self, tag, attrs):
        self._attrs(tag, attrs)
        if tag not in VOID:
            self.stack.append(tag)
        if tag == "table" and ("id", "file-table") in attrs:
            self._in_table = True
        if self._in_table and tag == "tr" and "tbody" in self.stack:
            self.rows.append([])
        if self._in_table and tag == "td":
            self._cell = []

    def handle_startendtag(self, tag, attrs):
        self._attrs(tag, attrs)

    def _attrs(self, tag, attrs):
        for k, v in attrs:
            self.attrs.append((tag, k, v))
            if k == "id":
                self.ids.append(v)

    def handle_endtag(self, tag):
        if tag in VOID:
            return
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes <{self.stack[-1] if self.stack else None}>")
            return
        self.stack.pop()
        if tag == "td" and self._cell is not None and self.rows:
            self.rows[-1].append("".join(self._cell).strip())
            self._cell = None
        if tag == "table":
            self._in_table = False

    def handle_data(self, data):
        self.text.append(data)
        if self._cell is not None:
            self._cell.append(data)


def parse(page: str) -> Page:
    p = Page()
    p.feed(page)
    p.close()
    return p


# --------------------------------------------------------------------------- self-contained

def test_nothing_is_fetched_from_a_network(report):
    page, _ = report
    assert "http://" not in page and "https://" not in page
    p = parse(page)
    assert not [a for a in p.attrs if a[1] == "src"]
    assert all(v.startswith("#") for tag, k, v in p.attrs if k in ("href", "xlink:href")), \
        [a for a in p.attrs if a[1] in ("href", "xlink:href") and not a[2].startswith("#")]
    assert all(u.startswith("#") for u in re.findall(r"url\(\s*['\"]?([^)'\"]*)", page))
    assert not {tag for tag, _, _ in p.attrs} & {"script", "link", "img", "iframe", "object", "embed"}
    assert "<script" not in page and "@import" not in page


def test_valid_html5_structure(report):
    page, _ = report
    assert page.startswith("<!DOCTYPE html>\n<html lang=\"en\">")
    assert '<meta charset="utf-8">' in page
    p = parse(page)
    assert p.errors == [] and p.stack == [], (p.errors[:5], p.stack)
    dupes = {i for i in p.ids if p.ids.count(i) > 1}
    assert not dupes, dupes


# --------------------------------------------------------------------------- escaping

def test_hostile_names_are_escaped(report):
    page, data = report
    for name in HOSTILE:
        assert name not in page                              # never raw
        assert name.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;").replace('"', "&quot;") in page
    assert "<img" not in page and "<script>" not in page and "<a>" not in page
    assert "Marsh &lt;test&gt; &amp; &quot;mix&quot; &lt;script&gt;" in page
    texts = "".join(parse(page).text)
    assert "lift <a> & b" in texts                           # the label reads as it was written
    assert all(name in texts for name in HOSTILE)


def test_undecodable_bytes_show_as_escapes(report):
    page, data = report
    assert r"bad\xff name.wav" in page                       # the report's \xNN form of byte 0xFF
    assert any(f["relpath"] == r"bad\xff name.wav" for f in data["files"])
    page.encode("utf-8")                                     # and the page itself is clean UTF-8


# --------------------------------------------------------------------------- content

def test_every_file_listed_worst_first(report):
    page, data = report
    rows = parse(page).rows
    assert len(rows) == len(data["files"]) == 8
    by_name = {f["relpath"]: f for f in data["files"]}
    listed = [(r[1], r[2]) for r in rows]
    assert sorted(listed) == sorted((f["relpath"], f["status"]) for f in data["files"])
    ranks = [RANK[s] for _, s in listed]
    assert ranks == sorted(ranks), listed
    ok = [n for n, s in listed if s == "ok"]
    peaks = [max(c["peak"] for c in by_name[n]["output_meters"]["channels"]) for n in ok]
    assert peaks == sorted(peaks, reverse=True)              # ok files: loudest output first
    assert ok.index("louder take.wav") < ok.index("quiet take.wav")
    assert {s for _, s in listed} == set(RANK)               # the mix really has every status


def test_table_cells_show_the_meters(report):
    page, data = report
    rows = {r[1]: r for r in parse(page).rows}
    quiet = rows["quiet take.wav"]
    assert quiet[2] == "ok"
    assert quiet[3] == "\u221220.00"                         # analytic: 0.1 full-scale sine peaks at -20 dBFS
    assert quiet[4] == "\u221216.00"                         # W3C Audio EQ Cookbook: +4 dB peaking gain at f0
    assert float(quiet[5].replace("\u2212", "-")) >= -16.0   # ITU-R BS.1770-4: true peak never below sample peak
    assert "input peak <span class=\"unit\">dBFS</span>" in page
    assert "output true peak <span class=\"unit\">dBTP</span>" in page
    assert rows["notes.wav"][2] == "failed" and rows["notes.wav"][3] == "\u2013"     # not measured: a dash
    assert rows["readme.txt"][2] == "skipped"
    assert "8000 Hz" in rows["phone line.wav"][-1]            # the message, the last cell


def test_summary_counts_by_status(report):
    page, data = report
    found = re.findall(r'<span class="n">(\d+)</span><span class="status st-(\w+)">', page)
    counts, words = [int(n) for n, _ in found], [w for _, w in found]
    assert words == list(RANK)
    assert counts == [data["summary"][s] for s in RANK]
    assert f"{data['summary']['failed'] + data['summary']['rejected'] + data['summary']['clipped']} of 8 file(s) " \
           "need attention" in page


def test_one_picture_per_rate_with_a_chain(report):
    page, data = report
    rates = {r["rate_hz"]: r for r in data["rates"]}
    assert set(rates) == {8000, RATE}
    assert rates[8000]["chain"] is None
    assert page.count("<svg") == 1                           # 48000 Hz only; never one per file
    assert "8000 Hz: no chain" in page
    assert "48000 Hz: <span class=\"verdict-accepted\">accepted by the guard</span>" in page


def test_clipped_regions_in_seconds_and_samples(report):
    page, data = report
    hot = next(f for f in data["files"] if f["relpath"] == HOSTILE[0])
    assert hot["status"] == "clipped"
    regions = hot["output_meters"]["channels"][0]["clipped_regions"]
    assert regions
    start, length = regions[0]
    section = page[page.index('<h2 id="clipping">'):page.index('<h2 id="responses">')]
    # analytic: time = start frame / sample rate
    assert f'<td class="num">{start / RATE:.6f} s</td><td class="num">{start}</td><td class="num">{length}</td>' \
        in section
    assert section.count("<details") == 1                    # only the file whose output clipped


def test_recipe_as_resolved(report):
    page, data = report
    section = page[page.index('<h2 id="recipe">'):]
    assert "peak" in section and "high_shelf" in section
    assert "freq 1000 Hz, gain_db 4 dB, q 1" in section
    assert "lift &lt;a&gt; &amp; b" in section
    assert "recipe.yaml:4:5" in section                      # where each section was written
    assert "max_gain_db" in section and "ceiling_dbfs" in section
    assert "(this run used <code>clip</code>, from the command line)" in section   # --on-over clip


def test_status_in_words_not_only_colour(report):
    page, data = report
    for status in RANK:
        assert f'<span class="status st-{status}">{status}</span>' in page


def test_large_batch_stays_a_table(tmp_path, capsys):
    src = tmp_path / "in"
    src.mkdir()
    names = [f"take_{i:03d}.wav" for i in range(320)]
    for i, name in enumerate(names):
        sf.write(src / name, sine(0.01, RATE, 0.005 + 0.001 * i), RATE, subtype="PCM_16")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text(textwrap.dedent(RECIPE), encoding="utf-8")
    assert main(["run", str(recipe), str(src), "-o", str(tmp_path / "out"), "--workers", "1"]) == 0
    capsys.readouterr()
    page = (tmp_path / "out" / "chainrun-report.html").read_text(encoding="utf-8")
    rows = parse(page).rows
    assert len(rows) == 320
    assert page.count("<svg") == 1
    assert [r[1] for r in rows] == list(reversed(names))     # all ok: loudest output first
    assert "Nothing needs attention" in page


def test_clipped_below_full_scale_is_explained(tmp_path, capsys):
    src = tmp_path / "in"
    src.mkdir()
    sf.write(src / "hot.wav", sine(0.1, RATE, 0.9), RATE, subtype="FLOAT")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text(RECIPE.replace("ceiling_dbfs: 0.0", "ceiling_dbfs: -1.0"), encoding="utf-8")
    assert main(["run", str(recipe), str(src), "-o", str(tmp_path / "out"), "--on-over", "clip",
                 "--workers", "1"]) == 1
    capsys.readouterr()
    page = (tmp_path / "out" / "chainrun-report.html").read_text(encoding="utf-8")
    data = json.loads((tmp_path / "out" / "chainrun-report.json").read_text(encoding="utf-8"))
    (hot,) = data["files"]
    assert hot["status"] == "clipped" and hot["clipped_by_chainrun"] > 0
    section = page[page.index('<h2 id="clipping">'):page.index('<h2 id="responses">')]
    assert "hot.wav" in section                             # listed although no sample reached full scale
    at_full_scale = sum(c["clipped_samples"] for c in hot["output_meters"]["channels"])
    if at_full_scale == 0:                                  # the meter counts full scale only: say why no regions
        assert f"chainrun hard-clipped {hot['clipped_by_chainrun']} sample(s) at the ceiling" in section
    else:
        assert '<th class="num">start frame</th>' in section


# --- pictures drawn by a forked child process while this one renders ----------------------------

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def _designed(rates):
    """The marsh recipe and a design with its assessment per rate, as prepare() makes them."""
    from types import SimpleNamespace

    from chainrun import assess, design, load

    recipe = load(os.path.join(ROOT, "recipes", "marsh-cleanup.yaml"))
    designs = {}
    for rate in rates:
        chain = design(recipe, rate)
        designs[rate] = SimpleNamespace(chain=chain, assessment=assess(chain, recipe.guard, recipe))
    return recipe, designs


def _only_in_a_child(monkeypatch, action):
    """Patch plot.response_svg so that ``action()`` runs first in any process but this one."""
    from chainrun.report import plot

    parent, real = os.getpid(), plot.response_svg

    def patched(*args, **kwargs):
        if os.getpid() != parent:
            action()
        return real(*args, **kwargs)

    monkeypatch.setattr(plot, "response_svg", patched)
    return real


def test_pictures_drawn_aside_are_those_drawn_here():
    from types import SimpleNamespace

    from chainrun.report import pictures
    from chainrun.report.plot import response_svg

    recipe, designs = _designed([44100, 48000])
    designs[8000] = SimpleNamespace(chain=None, assessment=None)           # a rate without a chain: no picture
    got = pictures.draw_pictures_aside(recipe, designs)
    assert set(got) == {44100, 48000}
    for rate in (44100, 48000):
        d = designs[rate]
        assert got[rate].result() == response_svg(recipe, d.chain, d.assessment)
    with pytest.raises(ChildProcessError):                                 # the child was reaped: no zombie
        os.waitpid(got[48000].aside._pid, os.WNOHANG)


def test_a_failed_child_leaves_the_drawing_to_the_report(monkeypatch):
    from types import SimpleNamespace

    from chainrun.report import pictures

    def fail():
        raise RuntimeError("the drawing child fails")

    real = _only_in_a_child(monkeypatch, fail)
    recipe, designs = _designed([48000])
    got = pictures.draw_pictures_aside(recipe, designs)
    assert got[48000].result() is None
    batch = SimpleNamespace(pictures=got, recipe=recipe)
    d = designs[48000]
    assert pictures.picture_of(batch, 48000, d) == real(recipe, d.chain, d.assessment)


def test_a_ctrl_c_does_not_stop_the_drawing_child(monkeypatch, tmp_path):
    # a Ctrl-C reaches the whole process group; it stops the rendering, and the report still needs its pictures
    import signal
    import time

    from chainrun.report import pictures

    marker = tmp_path / "drawing"

    def slow():
        marker.write_text("started")        # SIGINT is already ignored by now
        time.sleep(0.5)

    real = _only_in_a_child(monkeypatch, slow)
    recipe, designs = _designed([48000])
    got = pictures.draw_pictures_aside(recipe, designs)
    deadline = time.monotonic() + 60
    while not marker.exists() and time.monotonic() < deadline:
        time.sleep(0.01)
    assert marker.exists()
    os.kill(got[48000].aside._pid, signal.SIGINT)
    d = designs[48000]
    assert got[48000].result() == real(recipe, d.chain, d.assessment)


@pytest.mark.parametrize("workers, files", [("1", 1), ("2", 1), ("2", 3)])
def test_the_report_gets_its_picture_from_a_child(tmp_path, monkeypatch, capsys, workers, files):
    # one worker: drawn after the audio; two: while it renders, in this process's threads (one file) or
    # in worker processes (several); never in this process, so matplotlib never adds to the renderer
    from chainrun.report import pictures

    calls = []
    real = pictures.draw_pictures_aside

    def spy(recipe, designs):
        calls.append(sorted(designs))
        return real(recipe, designs)

    monkeypatch.setattr(pictures, "draw_pictures_aside", spy)
    from chainrun.report import plot

    drawn_here, parent, draw = [], os.getpid(), plot.response_svg

    def record(*args, **kwargs):
        if os.getpid() == parent:
            drawn_here.append(1)
        return draw(*args, **kwargs)

    monkeypatch.setattr(plot, "response_svg", record)
    src = tmp_path / "in"
    src.mkdir()
    for i in range(files):
        sf.write(src / f"take {i}.wav", sine(0.5, RATE, 0.1), RATE, subtype="PCM_24")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text(RECIPE, encoding="utf-8")
    assert main(["run", str(recipe), str(src), "-o", str(tmp_path / "out"), "--workers", workers]) == 0
    capsys.readouterr()
    page = (tmp_path / "out" / "chainrun-report.html").read_text(encoding="utf-8")
    assert calls == [[RATE]]
    assert drawn_here == []                         # the child drew it; this process did not
    assert page.count("<svg") == 1


def test_a_rejected_file_is_not_listed_among_clipped_outputs():
    # a rejected file delivered nothing: its output meters describe no file, so it has no clipped regions
    from chainrun.report.html import _has_regions

    meters = {"channels": [{"clipped_samples": 13, "clipped_regions": [[100, 113]]}]}
    assert _has_regions({"status": "clipped", "output_meters": meters})
    assert _has_regions({"status": "ok", "output_meters": meters})
    assert not _has_regions({"status": "rejected", "output_meters": meters})
    assert not _has_regions({"status": "failed", "output_meters": meters})
