"""`chainrun plot` and chainrun.plot: valid PNG and SVG, exit status 2 for bad input, what the picture shows."""
from __future__ import annotations

import math
import os
import subprocess
import sys
import warnings
import xml.etree.ElementTree as ET

import numpy as np
import pytest
from matplotlib import image as mpimg
from matplotlib.figure import Figure

from chainrun import assess, design, load
from chainrun.cli import main
from chainrun.report.plot import response_figure, response_svg, save_response

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"      # PNG specification (ISO/IEC 15948), section 5.2


def run_main(argv, capsys):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        status = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    assert not caught, [str(w.message) for w in caught]
    assert "Traceback" not in err and "internal error" not in err, err
    return status, out, err


def chain_of(path, rate=48000):
    recipe = load(str(path))
    chain = design(recipe, rate)
    return recipe, chain, assess(chain, recipe.guard, recipe)


def lines_of(fig: Figure):
    """(magnitude axes, phase axes) and the magnitude lines that hold a curve (more than 2 points)."""
    mag, phase = fig.axes[0], fig.axes[1]
    return mag, phase, [ln for ln in mag.get_lines() if len(ln.get_xdata()) > 2]


# --------------------------------------------------------------------------- the command

def test_plot_writes_a_valid_png(repo_root, tmp_path, capsys):
    out = tmp_path / "x.png"
    status, stdout, err = run_main(["plot", repo_root / "recipes" / "boathouse-stems.yaml", "-o", out], capsys)
    assert status == 0, err
    assert stdout.strip() == str(out)
    data = out.read_bytes()
    assert data[:8] == PNG_SIGNATURE
    img = mpimg.imread(str(out))                       # matplotlib.image decodes it (reference reader)
    assert img.ndim == 3 and img.shape[0] > 400 and img.shape[1] > 600
    flat = img[..., :3].reshape(-1, 3)
    # chainrun's own thresholds for "not blank", no published source: more than 50 distinct colours
    # (antialiased curves and text), and more than 2 % of the pixels darker than 0.9 in some channel
    assert len(np.unique(flat, axis=0)) > 50           # a drawing, not a blank sheet
    assert np.mean(np.any(flat < 0.9, axis=1)) > 0.02  # some ink on the white page
    assert not list(tmp_path.glob(".*part"))           # no temporary file left behind


def test_plot_writes_a_valid_svg(repo_root, tmp_path, capsys):
    out = tmp_path / "x.svg"
    status, _, err = run_main(["plot", repo_root / "recipes" / "marsh-cleanup.yaml", "--rate", "44100", "-o", out],
                              capsys)
    assert status == 0, err
    root = ET.fromstring(out.read_bytes())             # well-formed XML (xml.etree, reference parser)
    assert root.tag == "{http://www.w3.org/2000/svg}svg"
    assert len(root.findall(".//{http://www.w3.org/2000/svg}path")) > 20


@pytest.mark.parametrize("name", ["x.jpg", "x.pdf", "x", "x.png.txt"])
def test_plot_bad_extension_exit_2(repo_root, tmp_path, capsys, name):
    out = tmp_path / name
    status, stdout, err = run_main(["plot", repo_root / "recipes" / "boathouse-stems.yaml", "-o", out], capsys)
    assert status == 2
    assert stdout == ""
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and ".png or .svg" in lines[0], lines
    assert not out.exists()


def test_plot_bad_recipe_exit_2(write_recipe, tmp_path, capsys):
    bad = write_recipe("""
        format: 1
        chain:
          - {type: peak, freq: 1000, gain_db: three, q: 1}
        """)
    status, _, err = run_main(["plot", bad, "-o", tmp_path / "x.png"], capsys)
    assert status == 2
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith(f"{bad}:3:") and ": error: " in lines[0], lines
    assert not (tmp_path / "x.png").exists()


def test_plot_missing_recipe_exit_2(tmp_path, capsys):
    status, _, err = run_main(["plot", tmp_path / "nowhere.yaml", "-o", tmp_path / "x.png"], capsys)
    assert status == 2
    assert len(err.strip().splitlines()) == 1 and "error" in err


def test_plot_section_above_nyquist_exit_2(repo_root, tmp_path, capsys):
    # the boathouse house EQ has an "air" shelf at 9000 Hz, at or above Nyquist for 16000 Hz files
    status, _, err = run_main(["plot", repo_root / "recipes" / "boathouse-stems.yaml", "--rate", "16000",
                               "-o", tmp_path / "x.png"], capsys)
    assert status == 2
    assert "Nyquist" in err and len(err.strip().splitlines()) == 1


def test_plot_unwritable_folder_exit_2(repo_root, tmp_path, capsys):
    status, _, err = run_main(["plot", repo_root / "recipes" / "boathouse-stems.yaml",
                               "-o", tmp_path / "no" / "such" / "x.png"], capsys)
    assert status == 2
    assert "cannot write" in err and len(err.strip().splitlines()) == 1


def test_plot_of_rejected_recipe_says_rejected(repo_root, tmp_path, capsys):
    path = repo_root / "recipes" / "unstable-hand-typed.yaml"
    status, _, err = run_main(["plot", path, "-o", tmp_path / "x.png"], capsys)
    assert status == 1                                  # rejected, as `check` says; the picture is still drawn
    assert "unstable" in err
    assert err.splitlines()[-1] == (f"{path}: rejected: the guard rejects this chain at 48000 Hz (the picture "
                                    "shows why); it would not be applied to any file")
    assert (tmp_path / "x.png").read_bytes()[:8] == PNG_SIGNATURE
    svg = response_svg(*chain_of(path))
    assert "REJECTED by the guard" in svg
    assert "OUTSIDE the limit" in svg                  # the pole margin, stated in words


# --------------------------------------------------------------------------- the picture

def test_whole_chain_curve_matches_published_gains(write_recipe):
    path = write_recipe("""
        format: 1
        name: two peaks
        chain:
          - {type: peak, freq: 1000, gain_db: 6, q: 2}
          - {type: peak, freq: 8000, gain_db: -4, q: 2}
        guard: {max_gain_db: 12}
        """)
    recipe, chain, a = chain_of(path)
    fig = response_figure(recipe, chain, a)
    mag, _, curves = lines_of(fig)
    whole = max(curves, key=lambda ln: ln.get_linewidth())
    f, db = np.asarray(whole.get_xdata()), np.asarray(whole.get_ydata())
    i1, i8 = np.argmin(abs(f - 1000)), np.argmin(abs(f - 8000))
    assert f[i1] == pytest.approx(1000) and f[i8] == pytest.approx(8000)
    # W3C Audio EQ Cookbook: peaking gain at f0 equals dBgain (the other peak, 3 octaves away, adds a little)
    assert db[i1] == pytest.approx(6.0, abs=0.15)
    assert db[i8] == pytest.approx(-4.0, abs=0.15)
    # analytic: H(z) = prod (b0 + b1 z^-1 + b2 z^-2) / (1 + a1 z^-1 + a2 z^-2) on the unit circle, by numpy
    zi = np.exp(-2j * np.pi * f / 48000)
    h = np.prod([(r[0] + r[1] * zi + r[2] * zi ** 2) / (r[3] + r[4] * zi + r[5] * zi ** 2) for r in chain.sos], axis=0)
    np.testing.assert_allclose(db, 20 * np.log10(abs(h)), atol=1e-9)


def test_axes_span_10_hz_to_nyquist_with_units(repo_root):
    recipe, chain, a = chain_of(repo_root / "recipes" / "boathouse-stems.yaml", 44100)
    fig = response_figure(recipe, chain, a)
    mag, phase, _ = lines_of(fig)
    assert mag.get_xscale() == "log"
    assert mag.get_xlim() == pytest.approx((10.0, 22050.0))
    assert "(dB)" in mag.get_ylabel()
    assert "(Hz)" in phase.get_xlabel()
    assert "degrees" in phase.get_ylabel()


def test_one_faint_curve_per_recipe_section(write_recipe):
    # a 6th-order Butterworth high-pass is three biquad rows but one recipe section
    path = write_recipe("""
        format: 1
        name: grouped
        chain:
          - {type: highpass, freq: 40, order: 6, label: rumble}
          - {type: notch, freq: 60, q: 10}
          - {type: gain, gain_db: -2}
        """)
    recipe, chain, a = chain_of(path)
    assert len(chain.sos) == 5
    _, _, curves = lines_of(response_figure(recipe, chain, a))
    assert len(curves) == 1 + 3                         # the whole chain and one per section
    legend = [t.get_text() for t in response_figure(recipe, chain, a).legends[0].get_texts()]
    assert legend[0] == "whole chain"
    assert legend[1].startswith("1  highpass 40 Hz") and "rumble" in legend[1]
    assert legend[3].startswith("3  gain -2 dB")


def test_guard_figures_are_written_out(repo_root):
    recipe, chain, a = chain_of(repo_root / "recipes" / "boathouse-stems.yaml")
    svg = response_svg(recipe, chain, a)
    assert "accepted by the guard" in svg
    assert f"max gain {a.max_gain_db:+.2f} dB" in svg
    assert f"worst-case peak gain {a.peak_gain_db:+.2f} dB" in svg
    assert f"largest pole radius {a.max_pole_radius:.9f}" in svg
    assert f"limit {1 - recipe.guard.pole_margin:.9f}" in svg


def test_literal_dollar_signs_and_markup_in_labels(write_recipe):
    path = write_recipe("""
        format: 1
        name: "costs $5 <b>&</b>"
        chain:
          - {type: peak, freq: 500, gain_db: 1, q: 1, label: "$x$ and $y"}
        """)
    svg = response_svg(*chain_of(path))
    assert "costs $5 &lt;b&gt;&amp;&lt;/b&gt;" in svg   # matplotlib's SVG writer escapes the markup
    assert "<b>" not in svg
    assert "$x$ and $y" in svg                          # drawn literally, never as mathematics


def test_inline_svg_refers_to_nothing_outside(repo_root):
    svg = response_svg(*chain_of(repo_root / "recipes" / "marsh-cleanup.yaml"))
    assert svg.startswith("<svg") and svg.endswith("</svg>")
    assert "<?xml" not in svg and "<!DOCTYPE" not in svg
    assert "http://" not in svg and "https://" not in svg


def test_save_response_refuses_other_extensions(repo_root, tmp_path):
    with pytest.raises(ValueError):
        save_response(*chain_of(repo_root / "recipes" / "marsh-cleanup.yaml"), str(tmp_path / "x.gif"))


def test_plot_module_never_touches_pyplot(repo_root):
    code = ("import sys, chainrun, chainrun.report.plot as p\n"
            "r = chainrun.load(sys.argv[1]); c = chainrun.design(r, 48000); a = chainrun.assess(c, r.guard, r)\n"
            "fig = p.response_figure(r, c, a); p.response_svg(r, c, a)\n"
            "print('matplotlib.pyplot' in sys.modules, type(fig.canvas).__name__)")
    out = subprocess.run([sys.executable, "-c", code, str(repo_root / "recipes" / "marsh-cleanup.yaml")],
                         capture_output=True, text=True, check=True, env={**os.environ, "DISPLAY": ""}).stdout.split()
    assert out == ["False", "FigureCanvasAgg"]


def test_unstable_chain_has_no_finite_worst_case_line(repo_root):
    recipe, chain, a = chain_of(repo_root / "recipes" / "unstable-hand-typed.yaml")
    assert not math.isfinite(a.peak_gain_db)
    svg = response_svg(recipe, chain, a)
    assert "worst-case peak gain: unbounded" in svg


def test_a_chain_far_below_0_db_is_on_the_axis(tmp_path):
    # a plain -60 dB gain (analytic: flat at -60 dB) lies below the usual -48 dB floor of the axis; the
    # axis must reach it, and the worst-case peak line is drawn there, not described as off the axis
    path = tmp_path / "quiet.yaml"
    path.write_text("format: 1\nname: quiet\nchain:\n  - {type: gain, gain_db: -60}\n")
    recipe = load(path)
    chain = design(recipe, 48000)
    fig = response_figure(recipe, chain, assess(chain, recipe.guard, recipe))
    ax = fig.axes[0]
    bottom, top = ax.get_ylim()
    assert bottom < -60.0 < top
    texts = [t.get_text() for t in ax.texts]
    assert any(t.startswith("worst-case peak gain -60.00 dB (L1 norm") for t in texts), texts
    assert not any("of this axis" in t for t in texts), texts
