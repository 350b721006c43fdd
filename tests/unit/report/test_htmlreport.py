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
from support import REPO

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
RANK = {"failed": 0, "rejected": 1, "clipped": 2, "ok": 4, "skipped": 5}     # 3: not rendered (no such file here)
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
    # analytic: time = start frame / sample rate, as h:mm:ss.mmm cut to the millisecond, beside the frame number
    for start, length in regions:
        at = f"0:00:00.{start * 1000 // RATE:03d}"           # the file lasts 0.2 s
        assert f'<td class="num">{at}</td><td class="num">{start}</td><td class="num">{length}</td>' in section
    assert hot["output_meters"]["channels"][0]["clipped_regions_at"] == [f"0:00:00.{s * 1000 // RATE:03d}"
                                                                         for s, _ in regions]
    assert regions[-1][0] * 1000 // RATE > 0                 # some region starts past 1 ms: not all 0:00:00.000
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


# --- the response pictures: hand-made SVG from numpy, drawn when the report is written -------------

ROOT = str(REPO)
SMOOTH = """\
format: 1
name: Saltings smooth chain
chain:
  - {type: highpass, freq: 80, order: 2, label: rumble}
  - {type: peak, freq: 1000, gain_db: 4, q: 1, label: lift}
  - {type: high_shelf, freq: 6000, gain_db: -3, slope: 1, label: hiss}
guard: {max_gain_db: 12}
"""


def _designed(rates, path=None):
    """A recipe and a design with its assessment per rate, as prepare() makes them."""
    from types import SimpleNamespace

    from chainrun import assess, design, load

    recipe = load(path or os.path.join(ROOT, "recipes", "marsh-cleanup.yaml"))
    designs = {}
    for rate in rates:
        chain = design(recipe, rate)
        designs[rate] = SimpleNamespace(chain=chain, assessment=assess(chain, recipe.guard, recipe))
    return recipe, designs


def _svg_of(tmp_path, text, rate=RATE):
    from chainrun.report.svgchart import response_svg

    path = tmp_path / "recipe.yaml"
    path.write_text(text, encoding="utf-8")
    recipe, designs = _designed([rate], str(path))
    d = designs[rate]
    return recipe, d.chain, d.assessment, response_svg(recipe, d.chain, d.assessment)


def _xml(svg):
    import xml.etree.ElementTree as ET

    return ET.fromstring(svg)                     # xml.etree (reference parser): well-formed XML or it raises


def _axes(root):
    """(Hz -> x, x -> Hz, y -> dB) read back from the labelled ticks, as a reader of the picture would."""
    def number(text):
        text = text.replace("\u2212", "-")
        return float(text[:-1]) * 1000 if text.endswith("k") else float(text)

    xt = sorted((number(t.text), float(t.get("x"))) for t in root.iter("text") if t.get("class") == "x-tick")
    yt = sorted((number(t.text), float(t.get("y"))) for t in root.iter("text") if t.get("class") == "y-tick")
    assert len(xt) >= 5 and len(yt) >= 4
    (f0, x0), (f1, x1) = xt[0], xt[-1]
    (d0, y0), (d1, y1) = yt[0], yt[-1]
    per_x = (np.log10(f1) - np.log10(f0)) / (x1 - x0)
    return (lambda x: 10 ** (np.log10(f0) + (np.asarray(x) - x0) * per_x),
            lambda y: d0 + (np.asarray(y) - y0) * (d1 - d0) / (y1 - y0),
            (min(y0, y1), max(y0, y1)))


def _points(d):
    return np.array([[float(v) for v in p.split(",")] for p in re.findall(r"-?[\d.]+,-?[\d.]+", d)])


def test_pictures_are_drawn_here_and_the_same_every_time():
    from types import SimpleNamespace

    from chainrun.report import pictures
    from chainrun.report.svgchart import response_svg

    recipe, designs = _designed([44100, 48000])
    designs[8000] = SimpleNamespace(chain=None, assessment=None)           # a rate without a chain: no picture
    for rate in (44100, 48000):
        d = designs[rate]
        svg = pictures.picture_of(recipe, d)
        assert svg.startswith("<svg") and svg.endswith("</svg>")
        assert svg == response_svg(recipe, d.chain, d.assessment)          # deterministic: the same bytes
        assert svg == pictures.picture_of(recipe, d)
        assert f'id="chainrun-plot-{rate}"' in svg                       # ids differ between rates on one page


def test_a_picture_that_cannot_be_drawn_is_explained_on_the_page(tmp_path, monkeypatch, capsys):
    from chainrun.report import svgchart

    def fail(*args, **kwargs):
        raise RuntimeError("no ink")

    monkeypatch.setattr(svgchart, "response_svg", fail)
    page, _ = run_batch(tmp_path, capsys=capsys)
    assert "<svg" not in page
    assert "The picture could not be drawn: RuntimeError: no ink" in page


def test_the_picture_is_xml_with_a_title_and_a_label(tmp_path):
    recipe, chain, a, svg = _svg_of(tmp_path, SMOOTH)
    root = _xml(svg)
    assert root.tag == "svg" and root.get("role") == "img" and root.get("class") == "response"
    label = "Response of Saltings smooth chain at 48000 Hz (accepted by the guard)"
    assert root.get("aria-label") == label and root.find("title").text == label
    assert root.get("viewBox").startswith("0 0 1000 ")
    words = " ".join(t.text or "" for t in root.iter("text"))
    assert "accepted by the guard" in words and "REJECTED" not in words
    assert "largest pole radius" in words and "limit 0.999999000 (1 - pole_margin 1e-06)" in words
    assert "guard limit (max_gain_db) +12 dB" in words and "worst-case peak gain" in words
    assert "1  highpass 80 Hz order 2 (rumble)" in words and "3  high_shelf 6 kHz -3 dB slope 1 (hiss)" in words
    assert len([p for p in root.iter("path") if p.get("class") == "section"]) == 3   # each section beneath


def test_a_rejected_chain_says_so_in_words():
    from chainrun.report.svgchart import response_svg

    recipe, designs = _designed([48000], os.path.join(ROOT, "recipes", "unstable-hand-typed.yaml"))
    d = designs[48000]
    root = _xml(response_svg(recipe, d.chain, d.assessment))
    words = " ".join(t.text or "" for t in root.iter("text"))
    assert "REJECTED by the guard: this chain is not applied to any audio" in words
    assert "OUTSIDE the limit: unstable" in words                            # the pole margin, in words
    assert "error: chain[1] iir is unstable" in words
    assert root.get("aria-label").endswith("(REJECTED by the guard)")


@pytest.mark.parametrize("rate", [44100, 48000, 96000])
def test_the_curves_are_the_response_scipy_computes(tmp_path, rate):
    from scipy import signal

    recipe, chain, a, svg = _svg_of(tmp_path, SMOOTH, rate)
    root = _xml(svg)
    to_hz, to_db, (y_top, y_bottom) = _axes(root)
    paths = {p.get("class"): [] for p in root.iter("path")}
    for p in root.iter("path"):
        paths[p.get("class")].append(p.get("d"))
    curves = [("chain", chain.sos, paths["chain"][0], 0.01)]
    rows = np.asarray(chain.rows)
    # the faint section curves are written to 0.1 unit: about 0.02 dB at this axis' scale
    curves += [(f"section {i}", chain.sos[rows == i], d, 0.03) for i, d in enumerate(paths["section"])]
    for what, sos, d, tol in curves:
        pts = _points(d)
        inside = (pts[:, 1] > y_top) & (pts[:, 1] < y_bottom)              # points held beyond the axis are hidden
        assert inside.sum() > 500, what
        f = to_hz(pts[inside, 0])
        assert f.min() < 12 and f.max() > rate / 2 * 0.99                    # 10 Hz to Nyquist
        _, h = signal.sosfreqz(sos, worN=f, fs=rate)                        # scipy.signal (reference library)
        np.testing.assert_allclose(to_db(pts[inside, 1]), 20 * np.log10(np.abs(h)), atol=tol, err_msg=what)


def test_the_max_gain_marker_sits_where_the_guard_found_it(tmp_path):
    from scipy import signal

    recipe, chain, a, svg = _svg_of(tmp_path, SMOOTH)
    root = _xml(svg)
    to_hz, to_db, _ = _axes(root)
    (marker,) = [p for p in root.iter("path") if p.get("class") == "max-gain"]
    x, y = map(float, re.fullmatch(r"translate\(([-\d.]+),([-\d.]+)\)", marker.get("transform")).groups())
    assert float(to_hz(x)) == pytest.approx(a.max_gain_hz, rel=1e-4)
    assert float(to_db(y)) == pytest.approx(a.max_gain_db, abs=0.01)
    f = np.geomspace(10, RATE / 2, 20000)
    _, h = signal.sosfreqz(chain.sos, worN=f, fs=RATE)                       # scipy.signal (reference library)
    peak = int(np.argmax(np.abs(h)))
    assert float(to_hz(x)) == pytest.approx(f[peak], rel=2e-3)                 # the curve's highest point
    assert float(to_db(y)) == pytest.approx(20 * np.log10(np.abs(h[peak])), abs=0.01)
    words = " ".join(t.text or "" for t in root.iter("text"))
    assert f"max gain +{a.max_gain_db:.2f} dB at" in words


def test_text_in_the_picture_is_escaped(tmp_path):
    hostile = 'name: "Marsh <script>alert(1)</script> & \\a\\x1b[31m co \'q\'"'
    text = SMOOTH.replace("name: Saltings smooth chain", hostile).replace("label: lift", 'label: "<b>lift</b>"')
    recipe, chain, a, svg = _svg_of(tmp_path, text)
    assert "\x07" in recipe.name and "\x1b" in recipe.name                    # the recipe really holds them
    assert "<script" not in svg and "<b>" not in svg
    assert not re.search(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]", svg)            # XML 1.0 forbids them
    root = _xml(svg)
    shown = "Marsh <script>alert(1)</script> & \\x07\\x1b[31m co 'q'"
    assert root.find("title").text == f"Response of {shown} at 48000 Hz (accepted by the guard)"
    words = [t.text or "" for t in root.iter("text")]
    assert f"{shown} at 48000 Hz" in words
    assert any("<b>lift</b>" in w for w in words)


RUN_AND_LIST_MODULES = r"""
import sys
from chainrun.cli import main
status = main(sys.argv[1:])
print(sorted({m.split('.')[0] for m in sys.modules} & {'matplotlib', 'PIL', 'pyplot'}),
      'chainrun.report.svgchart' in sys.modules, 'chainrun.report.plot' in sys.modules, status)
"""


@pytest.mark.parametrize("workers", ["1", "2"])
def test_a_run_draws_its_pictures_without_matplotlib(tmp_path, workers):
    import subprocess
    import sys

    src = tmp_path / "in"
    src.mkdir()
    sf.write(src / "take.wav", sine(0.2, RATE, 0.1), RATE, subtype="PCM_24")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text(RECIPE, encoding="utf-8")
    out = tmp_path / "out"
    proc = subprocess.run([sys.executable, "-c", RUN_AND_LIST_MODULES, "run", str(recipe), str(src), "-o", str(out),
                           "--workers", workers], capture_output=True, text=True, cwd=ROOT,
                          env={**os.environ, "PYTHONPATH": ROOT}, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.splitlines()[-1] == "[] True False 0"
    assert (out / "chainrun-report.html").read_text(encoding="utf-8").count("<svg") == 1


def test_drawing_a_picture_imports_nothing_but_the_standard_library(tmp_path):
    import subprocess
    import sys

    path = os.path.join(ROOT, "recipes", "boathouse-stems.yaml")
    code = ("import sys\n"
            "from chainrun import assess, design, load\n"
            f"r = load({path!r}); c = design(r, 48000); a = assess(c, r.guard, r)\n"
            "before = set(sys.modules)\n"
            "from chainrun.report.svgchart import response_svg\n"
            "response_svg(r, c, a)\n"
            "new = {m.split('.')[0] for m in set(sys.modules) - before} - {'chainrun'}\n"
            "print(sorted(new - set(sys.stdlib_module_names)))\n")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT,
                          env={**os.environ, "PYTHONPATH": ROOT}, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == "[]"


def test_a_rejected_file_is_not_listed_among_clipped_outputs():
    # a rejected file delivered nothing: its output meters describe no file, so it has no clipped regions
    from chainrun.report.html import _has_regions

    meters = {"channels": [{"clipped_samples": 13, "clipped_regions": [[100, 113]]}]}
    assert _has_regions({"status": "clipped", "output_meters": meters})
    assert _has_regions({"status": "ok", "output_meters": meters})
    assert not _has_regions({"status": "rejected", "output_meters": meters})
    assert not _has_regions({"status": "failed", "output_meters": meters})
