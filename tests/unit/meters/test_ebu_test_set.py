"""The meters against the EBU loudness test set's own files, when a folder holding them is named.

EBU Tech 3341 (2016) Table 1 and EBU Tech 3342 (2016) Table 1 give, for each file of the EBU loudness
test set, the reading a conforming meter must show. The expected values below are those of the two
tables as transcribed in public test tables (the published text is not at hand here; verify); the
tolerances are the standards': +-0.1 LU for M, S and I, +-1 LU for the range, +0.2 / -0.4 dB for the
true peak. Tech 3341 cases 7 and 8 and Tech 3342 cases 5 and 6 (authentic programme) exist only as
these files; the other cases are also synthesised from their descriptions in test_loudness.py, so
they run everywhere.

The files are the EBU's and are not part of this repository. To run these checks, download the test
set from the EBU and name its folder:

    CHAINRUN_EBU_TEST_SET=/path/to/ebu-loudness-test-setv05 python -m pytest tests/unit/meters/test_ebu_test_set.py

Without it the one test here skips, saying so. A file of the list that is missing from the named
folder fails the test: a check that was asked for is never dropped in silence.
"""
from __future__ import annotations

import os
from pathlib import Path

import pytest

from chainrun.audio.reader import probe
from chainrun.render.file import scan_file

ENV = "CHAINRUN_EBU_TEST_SET"

# (file name stem as in the EBU test set, figure, expected, tolerance below, tolerance above)
INTEGRATED = [(stem, "integrated_lufs", v, 0.1, 0.1) for stem, v in [
    ("seq-3341-1-16bit", -23.0), ("seq-3341-2-16bit", -33.0), ("seq-3341-3-16bit-v02", -23.0),
    ("seq-3341-4-16bit-v02", -23.0), ("seq-3341-5-16bit-v02", -23.0), ("seq-3341-6-5channels-16bit", -23.0),
    ("seq-3341-6-6channels-WAVEEX-16bit", -23.0), ("seq-3341-7_seq-3342-5-24bit", -23.0),
    ("seq-3341-2011-8_seq-3342-6-24bit-v02", -23.0)]]
MAXIMA = ([("seq-3341-9-24bit", "max_short_term_lufs", -23.0, 0.1, 0.1),
           ("seq-3341-12-24bit", "max_momentary_lufs", -23.0, 0.1, 0.1)]
          + [(f"seq-3341-10-{k}-24bit", "max_short_term_lufs", -23.0, 0.1, 0.1) for k in range(1, 21)]
          + [(f"seq-3341-13-{k}-24bit", "max_momentary_lufs", -23.0, 0.1, 0.1) for k in range(1, 21)])
RANGE = [(stem, "loudness_range_lu", v, 1.0, 1.0) for stem, v in [
    ("seq-3342-1-16bit", 10.0), ("seq-3342-2-16bit", 5.0), ("seq-3342-3-16bit", 20.0),
    ("seq-3342-4-16bit", 15.0), ("seq-3341-7_seq-3342-5-24bit", 5.0),
    ("seq-3341-2011-8_seq-3342-6-24bit-v02", 15.0)]]
TRUE_PEAK = [(f"seq-3341-{k}-24bit", "true_peak_dbtp", v, 0.4, 0.2)
             for k, v in [(15, -6.0), (16, -6.0), (17, -6.0), (18, -6.0), (19, 3.0),
                          (20, 0.0), (21, 0.0), (22, 0.0), (23, 0.0)]]
CASES = INTEGRATED + MAXIMA + RANGE + TRUE_PEAK


def _find(folder: Path, stem: str) -> Path | None:
    """The test set's file for ``stem`` (some of its files are named ``*.wav.wav``)."""
    for name in (f"{stem}.wav", f"{stem}.wav.wav"):
        if (folder / name).is_file():
            return folder / name
    return None


def _figure(path: Path, key: str) -> float | None:
    reading = scan_file(probe(str(path)), true_peak=True, loudness=True).input_meters
    if key == "true_peak_dbtp":
        return max(c.true_peak_dbtp for c in reading.channels)
    return getattr(reading.loudness, key)


def test_the_ebu_test_set_files_read_as_tech_3341_and_3342_ask():
    folder = os.environ.get(ENV)
    if not folder:
        pytest.skip(f"{ENV} does not name a folder holding the EBU loudness test set (see this file's notes)")
    folder = Path(folder)
    wrong = []
    for stem, key, expect, below, above in CASES:
        path = _find(folder, stem)
        if path is None:
            wrong.append(f"{stem}: not found in {folder}")
            continue
        got = _figure(path, key)
        if got is None or not expect - below <= got <= expect + above:
            wrong.append(f"{stem}: {key} {got} (expected {expect} -{below}/+{above})")
    assert not wrong, "\n".join(wrong)


def test_the_harness_reads_files_named_as_in_the_test_set(tmp_path):
    # the harness itself, on two files made here from their published descriptions (EBU Tech 3341
    # cases 1 and 15, as in test_loudness.py): stereo 1 kHz at -23 dBFS for 20 s, 16-bit, and a
    # rate/4 sine at -6 dBFS (0.5 of full scale), phase 0, 24-bit, named as the test set names them
    import numpy as np
    import soundfile as sf
    n = np.arange(48000 * 20)
    x = 10 ** (-23 / 20) * np.sin(2 * np.pi * 1000 * n / 48000)
    sf.write(tmp_path / "seq-3341-1-16bit.wav", np.stack([x, x], axis=1), 48000, subtype="PCM_16")
    y = 0.5 * np.sin(np.pi / 2 * n[:48000 * 5])
    sf.write(tmp_path / "seq-3341-15-24bit.wav.wav", np.stack([y, y], axis=1), 48000, subtype="PCM_24")
    assert _find(tmp_path, "seq-3341-2-16bit") is None
    got = _figure(_find(tmp_path, "seq-3341-1-16bit"), "integrated_lufs")
    assert abs(got + 23.0) <= 0.1                                     # EBU Tech 3341 case 1
    got = _figure(_find(tmp_path, "seq-3341-15-24bit"), "true_peak_dbtp")
    assert -0.4 <= got + 6.0 <= 0.2                                   # EBU Tech 3341 case 15
