"""Sections for chosen channels: ``channels: [k, ...]`` and ``channels: mid`` / ``side``.

Outputs are checked against scipy.signal.sosfilt applied by hand to the chosen channels (and to
M = (L + R) / 2, S = (L - R) / 2, decoded as L = M + S, R = M - S); the mid/side worst-case
bound against a brute-force worst-case input built from the impulse responses.
"""
from __future__ import annotations

import json

import numpy as np
import pytest
import soundfile as sf
from scipy import signal

from chainrun.design import design, design_section
from chainrun.errors import AudioError
from chainrun.guard import assess
from chainrun.recipe import RecipeError, loads
from chainrun.render.filter import _Filter

TRACKS = """\
format: 1
chain:
  - {type: highpass, freq: 90, order: 2}
  - {type: peak, freq: 2500, gain_db: 7, q: 1.5, channels: [2]}
  - {type: low_shelf, freq: 200, gain_db: -5, channels: [3, 1]}
  - {type: lowpass, freq: 12000, order: 4}
output: {subtype: same, dither: none}
"""

MIDSIDE = """\
format: 1
chain:
  - {type: highpass, freq: 60, order: 2}
  - {type: lowpass, freq: 900, order: 2, channels: mid}
  - {type: highpass, freq: 1500, order: 3, channels: side}
  - {type: peak, freq: 4000, gain_db: 6, q: 2, channels: side}
output: {subtype: same, dither: none}
"""


def _sos_of(recipe, indices, rate):
    """The cascade of the sections ``indices``, in order, each designed on its own."""
    return np.vstack([design_section(recipe.sections[i], rate) for i in indices])


def _impulse(sos, n):
    x = np.zeros(n)
    x[0] = 1.0
    return signal.sosfilt(sos, x)      # scipy.signal (reference library)


# --------------------------------------------------------------------------- recipe

@pytest.mark.parametrize("text, where, words", [
    ("[]", "3:41", "found an empty list"),
    ("[0]", "3:42", "track 0 is out of range"),
    ("[65]", "3:42", "track 65 is out of range"),
    ("[1, 1]", "3:45", "names track 1 twice"),
    ("[1.5]", "3:42", "must be a track number"),
    ("[true]", "3:42", "must be a track number"),
    ("left", "3:41", "'left' is not known"),
    ("2", "3:41", "must name channels"),
])
def test_malformed_channels_are_located(text, where, words):
    with pytest.raises(RecipeError) as err:
        loads(f"format: 1\nchain:\n  - {{type: gain, gain_db: -3, channels: {text}}}\n")
    # common practice, no published source: path:line:col: error: what; what is allowed
    assert str(err.value).startswith(f"<text>:{where}: error: chain[0].channels"), err.value
    assert words in str(err.value) and "allowed:" in str(err.value)


def test_tracks_and_mid_side_cannot_meet_in_one_chain():
    with pytest.raises(RecipeError) as err:
        loads("format: 1\nchain:\n  - {type: gain, gain_db: -3, channels: [1]}\n"
              "  - {type: gain, gain_db: 1, channels: side}\n")
    assert str(err.value).startswith("<text>:4:40: error: chain[1].channels side mixes with [1] set in <text>:3:41")


def test_channels_change_the_digest_only_where_written():
    plain = loads("format: 1\nchain:\n  - {type: gain, gain_db: -3}\n")
    same = loads("format: 1\nchain:\n  - {type: gain, gain_db: -3}\n  \n")
    a = loads("format: 1\nchain:\n  - {type: gain, gain_db: -3, channels: [3, 1]}\n")
    b = loads("format: 1\nchain:\n  - {type: gain, gain_db: -3, channels: [1, 3]}\n")
    assert plain.digest == same.digest and "channels" not in plain.to_dict()["chain"][0]
    assert a.digest == b.digest != plain.digest           # the same tracks in any order filter alike
    assert a.sections[0].channels == (1, 3) and a.to_dict()["chain"][0]["channels"] == [1, 3]


# --------------------------------------------------------------------------- design and guard

def test_each_track_path_runs_the_sections_for_it_in_order():
    recipe = loads(TRACKS)
    chain = design(recipe, 48000)
    # analytic: a track runs every section without channels plus those naming it, top to bottom
    expected = {1: [0, 2, 3], 2: [0, 1, 3], 3: [0, 2, 3], 4: [0, 3], 9: [0, 3]}
    for track, indices in expected.items():
        np.testing.assert_array_equal(chain.path_of_track(track).sos, _sos_of(recipe, indices, 48000))
    assert [p.title for p in chain.paths] == ["tracks 1, 3", "track 2", "other tracks"]


def test_track_bound_is_the_largest_path_l1():
    recipe = loads(TRACKS)
    chain = design(recipe, 48000)
    a = assess(chain, recipe.guard, recipe)
    # analytic: |y_k| <= ||h_k||_1 max|x| per output channel; sum |h| by brute force (scipy.signal.sosfilt)
    l1 = {p.key: float(np.abs(_impulse(p.sos, 1 << 16)).sum()) for p in chain.paths}
    for p in a.paths:
        assert l1[p.key] * (1 - 1e-9) <= p.peak_gain <= l1[p.key] * (1 + 1e-6)
    assert a.peak_gain == max(p.peak_gain for p in a.paths)
    assert a.accepted and len(a.to_dict()["paths"]) == 3


def test_mid_side_bound_against_a_brute_force_worst_case_input():
    recipe = loads(MIDSIDE)
    rate, n = 48000, 1 << 15
    chain = design(recipe, rate)
    a = assess(chain, recipe.guard, recipe)
    h_m = _impulse(_sos_of(recipe, [0, 1], rate), n)
    h_s = _impulse(_sos_of(recipe, [0, 2, 3], rate), n)
    g1, g2 = 0.5 * (h_m + h_s), 0.5 * (h_m - h_s)
    bound = np.abs(g1).sum() + np.abs(g2).sum()
    # analytic: L' = g1 * L + g2 * R, so L_in[N - k] = sign g1[k], R_in[N - k] = sign g2[k] reaches
    # ||g1||_1 + ||g2||_1 at sample N; built here, filtered by hand with scipy.signal.sosfilt
    big_n = n - 1
    left, right = np.sign(g1[::-1]), np.sign(g2[::-1])
    m, s = signal.sosfilt(chain.paths[0].sos, (left + right) / 2), signal.sosfilt(chain.paths[1].sos, (left - right) / 2)
    reached = (m + s)[big_n]
    assert reached == pytest.approx(bound, rel=1e-9)
    assert a.peak_gain >= reached * (1 - 1e-12) and a.peak_gain <= bound * (1 + 1e-6)
    # the larger of the two paths' own L1 norms does not bound that output
    larger = max(np.abs(h_m).sum(), np.abs(h_s).sum())
    assert reached > larger * 1.05
    assert max(p.peak_gain for p in a.paths) == pytest.approx(larger, rel=1e-6)
    # the renderer's runtime guard holds with the guard's bound, and trips with the larger path's
    x = np.stack([left, right])
    y = _Filter(chain.filters, 2, a.peak_gain)(x.copy(), 0, 1.0)
    assert y[0, big_n] == pytest.approx(reached, rel=1e-12)
    with pytest.raises(AudioError, match="passed the guard's worst-case bound"):
        _Filter(chain.filters, 2, larger)(x.copy(), 0, 1.0)


# --------------------------------------------------------------------------- end to end

def _at(text: str, needle: str) -> str:
    """``line:col`` (1-based) of the first ``needle`` in ``text``."""
    for n, line in enumerate(text.splitlines(), 1):
        if needle in line:
            return f"{n}:{line.index(needle) + 1}"
    raise AssertionError(needle)


def _noise(rng, n, ch):
    return 0.25 * rng.uniform(-1, 1, (n, ch))


@pytest.mark.parametrize("block", [None, "777"])
def test_track_outputs_equal_sosfilt_on_the_chosen_channels(tmp_path, write_recipe, write_audio, run_cli, block):
    recipe_path = write_recipe(TRACKS)
    x = _noise(np.random.default_rng(5), 30000, 4)
    write_audio("in/four.wav", x, 48000, "DOUBLE")
    extra = ["--block-size", block] if block else []
    status, _, err = run_cli("run", recipe_path, tmp_path / "in", "-o", tmp_path / "out", "--workers", "1", *extra)
    assert status == 0, err
    recipe = loads(TRACKS)
    y, _ = sf.read(str(tmp_path / "out" / "four.wav"), dtype="float64", always_2d=True)
    for track, indices in {1: [0, 2, 3], 2: [0, 1, 3], 3: [0, 2, 3], 4: [0, 3]}.items():
        # scipy.signal.sosfilt (reference library) over the whole channel at once
        expected = signal.sosfilt(_sos_of(recipe, indices, 48000), x[:, track - 1])
        np.testing.assert_array_equal(y[:, track - 1], expected)


@pytest.mark.parametrize("block", [None, "1000"])
def test_mid_side_output_equals_sosfilt_on_mid_and_side(tmp_path, write_recipe, write_audio, run_cli, block):
    recipe_path = write_recipe(MIDSIDE)
    x = _noise(np.random.default_rng(6), 30000, 2)
    write_audio("in/st.wav", x, 44100, "DOUBLE")
    extra = ["--block-size", block] if block else []
    status, _, err = run_cli("run", recipe_path, tmp_path / "in", "-o", tmp_path / "out", "--workers", "1", *extra)
    assert status == 0, err
    recipe = loads(MIDSIDE)
    m = signal.sosfilt(_sos_of(recipe, [0, 1], 44100), (x[:, 0] + x[:, 1]) * 0.5)     # scipy.signal
    s = signal.sosfilt(_sos_of(recipe, [0, 2, 3], 44100), (x[:, 0] - x[:, 1]) * 0.5)
    y, _ = sf.read(str(tmp_path / "out" / "st.wav"), dtype="float64", always_2d=True)
    np.testing.assert_array_equal(y[:, 0], m + s)
    np.testing.assert_array_equal(y[:, 1], m - s)


def test_mid_side_round_trip_is_exact(tmp_path, write_recipe, write_audio, read_codes, run_cli):
    # analytic: (L + R) / 2 + (L - R) / 2 = L and (L + R) / 2 - (L - R) / 2 = R, exact in float64
    # for integer PCM (every sum and half is representable); 0 dB on mid leaves both paths as they are
    recipe = write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: 0, channels: mid}\n"
                          "output: {dither: none}\n")
    rng = np.random.default_rng(8)
    codes = rng.integers(-2 ** 23, 2 ** 23, (20000, 2))
    codes[:50] = [[2 ** 23 - 1, -2 ** 23]] * 50                 # full scale, opposite signs
    path = write_audio("in/st.wav", codes, 48000, "PCM_24")
    status, _, err = run_cli("run", recipe, path, "-o", tmp_path / "out", "--workers", "1")
    assert status == 0, err
    got, _ = read_codes(tmp_path / "out" / "st.wav")
    np.testing.assert_array_equal(got, codes)


@pytest.mark.parametrize("text", [TRACKS, MIDSIDE])
def test_block_sizes_and_reruns_give_identical_files(tmp_path, write_recipe, write_audio, run_cli, text):
    recipe = write_recipe(text.replace("dither: none", "dither: tpdf").replace("subtype: same", "subtype: PCM_16"))
    x = _noise(np.random.default_rng(9), 70000, 4 if "[2]" in text else 2)     # past a 65536-frame flush point
    write_audio("in/a.wav", x, 48000, "PCM_24")
    outputs = []
    for k, size in enumerate(["65536", "4096", "777", "65536"]):
        out = tmp_path / f"out{k}"
        status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", out, "--workers", "1", "--block-size", size)
        assert status == 0, err
        outputs.append((out / "a.wav").read_bytes())
    # contract (DEVELOPERS.md): bit-identical output whatever the block size, and run after run
    assert all(o == outputs[0] for o in outputs[1:])


def test_files_the_channels_do_not_fit_are_rejected_with_a_located_reason(tmp_path, write_recipe, write_audio,
                                                                          run_cli):
    recipe = write_recipe(MIDSIDE)
    rng = np.random.default_rng(10)
    write_audio("in/mono.wav", _noise(rng, 4800, 1)[:, 0], 48000)
    write_audio("in/three.wav", _noise(rng, 4800, 3), 48000)
    write_audio("in/st.wav", _noise(rng, 4800, 2), 48000)
    status, _, err = run_cli("run", recipe, tmp_path / "in", "-o", tmp_path / "out", "--workers", "1")
    assert status == 1
    files = {f["relpath"]: f for f in json.loads((tmp_path / "out" / "chainrun-report.json").read_text())["files"]}
    assert files["st.wav"]["status"] == "ok"
    for name, n in (("mono.wav", 1), ("three.wav", 3)):
        assert files[name]["status"] == "rejected"
        assert f"{recipe}:{_at(MIDSIDE, 'mid}')}: error: chain[1].channels mid needs a two-channel file; this one has {n}" \
            in files[name]["message"]
        assert not (tmp_path / "out" / name).exists()
    # track numbers beyond the file's channels: every file refused, so no audio is touched (exit 2)
    tracks = write_recipe(TRACKS, "tracks.yaml")
    status, _, err = run_cli("run", tracks, tmp_path / "in" / "mono.wav", "-o", tmp_path / "out2")
    assert status == 2
    assert f"{tracks}:{_at(TRACKS, '[2]')}: error: chain[1].channels names track 2; this file has 1 channel(s); " \
           "allowed: tracks 1 to 1" in err
    assert not (tmp_path / "out2" / "mono.wav").exists()


def test_check_shows_one_row_per_path(write_recipe, run_cli):
    recipe = write_recipe(MIDSIDE)
    status, out, err = run_cli("check", recipe, "--rate", "48000")
    assert status == 0, err
    rows = out.splitlines()
    at = next(i for i, line in enumerate(rows) if "48000 Hz" in line)
    assert rows[at + 1].endswith("  mid") and rows[at + 2].endswith("  side")
