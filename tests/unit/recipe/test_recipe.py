"""Recipe loading: validation with exact locations, includes, defaults, robustness.

Expected locations are worked out from the recipe text in the test itself (line
number and the column of a marker substring), never from what the loader printed.
"""
from __future__ import annotations

import json
import math
import os
import re
import time

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from chainrun.recipe import Guard, Output, RecipeError, load
from support import REPO


# One error, one line: `path:line:col: error: what is wrong; what is allowed` (CONVENTIONS.md)
ERROR_RE = re.compile(r"^(?P<path>[^\n]+):(?P<line>\d+):(?P<col>\d+): error: (?P<msg>[^\n]+; [^\n]+)$")

GAIN = "  - {type: gain, gain_db: 1}\n"


def _laughs() -> str:
    lines = ["format: 1", "a0: &a0 [1, 1, 1, 1, 1, 1, 1, 1, 1, 1]"]
    lines += [f"a{i}: &a{i} [" + ", ".join([f"*a{i - 1}"] * 10) + "]" for i in range(1, 10)]
    return "\n".join(lines + ["chain: *a9", ""])


# (id, {file name: text or bytes}, loaded file, error file, line, marker in that line or column, message part)
# The marker is a substring of the line whose first character is the expected column.
MALFORMED = [
    ("unknown top key", {"r.yaml": "format: 1\nchian:\n" + GAIN}, "r.yaml", "r.yaml", 2, "chian",
     "unknown key 'chian' in the recipe (did you mean 'chain'?); allowed: format, name"),
    ("unknown section key", {"r.yaml": "format: 1\nchain:\n  - {type: peak, frequency: 1000, gain_db: 2, q: 1}\n"},
     "r.yaml", "r.yaml", 3, "frequency", "unknown key 'frequency' in chain[0] (peak) (did you mean 'freq'?)"),
    ("unknown guard key", {"r.yaml": "format: 1\nchain:\n" + GAIN + "guard:\n  max_gain: 6\n"}, "r.yaml", "r.yaml",
     5, "max_gain", "unknown key 'max_gain' in guard (did you mean 'max_gain_db'?)"),
    ("unknown type", {"r.yaml": "format: 1\nchain:\n  - {type: peek, freq: 1000, gain_db: 2, q: 1}\n"},
     "r.yaml", "r.yaml", 3, "peek", "chain[0].type 'peek' is not known (did you mean 'peak'?); allowed: highpass"),
    ("missing key", {"r.yaml": "format: 1\nchain:\n  - {type: peak, freq: 1000, q: 1}\n"}, "r.yaml", "r.yaml",
     3, "{", "chain[0] (peak) needs 'gain_db'; required keys: freq, gain_db"),
    ("missing type", {"r.yaml": "format: 1\nchain:\n" + GAIN + "  - {freq: 1000}\n"}, "r.yaml", "r.yaml",
     4, "{", "chain[1] has no 'type'; allowed types: highpass, lowpass"),
    ("text for number", {"r.yaml": "format: 1\nchain:\n  - {type: lowpass, freq: high}\n"}, "r.yaml", "r.yaml",
     3, "high", "chain[0].freq must be a number; found text 'high'"),
    ("quoted number", {"r.yaml": 'format: 1\nchain:\n  - {type: gain, gain_db: "3"}\n'}, "r.yaml", "r.yaml",
     3, '"3"', "chain[0].gain_db must be a number; found text '3'"),
    ("bool for number", {"r.yaml": "format: 1\nchain:\n  - {type: gain, gain_db: yes}\n"}, "r.yaml", "r.yaml",
     3, "yes", "chain[0].gain_db must be a number; found 'true'"),
    ("empty tagged number", {"r.yaml": "format: 1\nchain:\n  - {type: gain, gain_db: !!int }\n"}, "r.yaml",
     "r.yaml", 3, "!!int", "cannot read value '': the tag names a type but the value is empty"),
    # YAML 1.1 (yaml.org spec, from memory) reads 050 as octal 40, 1:30 as base 60 (90) and 0x32 as hex 50;
    # a hum notch typed 050 would cut 40 Hz, so only decimal numbers are taken
    ("leading zero", {"r.yaml": "format: 1\nchain:\n  - {type: notch, freq: 050, q: 25}\n"}, "r.yaml", "r.yaml",
     3, "050", "'050' is not a decimal number (YAML would read it in another base); write it in decimal"),
    ("base 60", {"r.yaml": "format: 1\nchain:\n  - {type: notch, freq: 1:30, q: 25}\n"}, "r.yaml", "r.yaml",
     3, "1:30", "'1:30' is not a decimal number"),
    ("hex", {"r.yaml": "format: 1\nchain:\n  - {type: notch, freq: 0x32, q: 25}\n"}, "r.yaml", "r.yaml",
     3, "0x32", "'0x32' is not a decimal number"),
    ("tagged as text", {"r.yaml": "format: 1\nchain:\n  - {type: gain, gain_db: !!str -1}\n"}, "r.yaml", "r.yaml",
     3, "!!str", "chain[0].gain_db must be a number; found text '-1'"),
    ("chain is a mapping", {"r.yaml": "format: 1\nchain: {type: gain, gain_db: 1}\n"}, "r.yaml", "r.yaml",
     2, "{", "chain must be a list of sections; found a mapping"),
    ("section is text", {"r.yaml": "format: 1\nchain:\n  - peak\n"}, "r.yaml", "r.yaml", 3, "peak",
     "chain[0] must be a mapping of keys to values; found text 'peak'"),
    ("fractional order", {"r.yaml": "format: 1\nchain:\n  - {type: highpass, freq: 80, order: 2.5}\n"},
     "r.yaml", "r.yaml", 3, "2.5", "chain[0].order must be a whole number from 1 to 8; found '2.5'"),
    ("inf", {"r.yaml": "format: 1\nchain:\n  - {type: gain, gain_db: .inf}\n"}, "r.yaml", "r.yaml", 3, ".inf",
     "chain[0].gain_db must be a finite number; found .inf"),
    ("nan", {"r.yaml": "format: 1\nchain:\n  - {type: notch, freq: .nan, q: 10}\n"}, "r.yaml", "r.yaml", 3, ".nan",
     "chain[0].freq must be a finite number; found .nan"),
    ("-inf coefficient", {"r.yaml": "format: 1\nchain:\n  - {type: iir, b: [1], a: [1, -.inf]}\n"}, "r.yaml",
     "r.yaml", 3, "-.inf", "chain[0].a[1] must be a finite number; found -.inf"),
    ("overflowing number", {"r.yaml": "format: 1\nchain:\n  - {type: gain, gain_db: 1e999}\n"}, "r.yaml",
     "r.yaml", 3, "1e999", "chain[0].gain_db must be a finite number; found 1e999"),
    ("q zero", {"r.yaml": "format: 1\nchain:\n  - {type: notch, freq: 50, q: 0}\n"}, "r.yaml", "r.yaml", 3, "0}",
     "chain[0].q 0 is out of range; it must be above 0"),
    ("q negative", {"r.yaml": "format: 1\nchain:\n  - {type: peak, freq: 50, gain_db: 1, q: -1}\n"}, "r.yaml",
     "r.yaml", 3, "-1}", "chain[0].q -1 is out of range; it must be above 0"),
    ("order 9", {"r.yaml": "format: 1\nchain:\n  - {type: lowpass, freq: 8000, order: 9}\n"}, "r.yaml", "r.yaml",
     3, "9}", "chain[0].order 9 is out of range; allowed: 1 to 8"),
    ("order 0", {"r.yaml": "format: 1\nchain:\n  - {type: highpass, freq: 80, order: 0}\n"}, "r.yaml", "r.yaml",
     3, "0}", "chain[0].order 0 is out of range; allowed: 1 to 8"),
    ("shelf order 3", {"r.yaml": "format: 1\nchain:\n  - {type: low_shelf, freq: 100, gain_db: 3, order: 3}\n"},
     "r.yaml", "r.yaml", 3, "3}", "chain[0].order 3 is out of range; allowed: 1 to 2"),
    ("freq zero", {"r.yaml": "format: 1\nchain:\n  - {type: highpass, freq: 0}\n"}, "r.yaml", "r.yaml", 3, "0}",
     "chain[0].freq 0 Hz is out of range; it must be above 0 Hz"),
    ("freq negative", {"r.yaml": "format: 1\nchain:\n  - {type: notch, freq: -50, q: 3}\n"}, "r.yaml", "r.yaml",
     3, "-50", "chain[0].freq -50 Hz is out of range; it must be above 0 Hz"),
    ("q with order 4", {"r.yaml": "format: 1\nchain:\n  - {type: highpass, freq: 80, order: 4, q: 0.7}\n"},
     "r.yaml", "r.yaml", 3, "0.7", "chain[0].q is only allowed with order 2 (cookbook form); Butterworth order 4"),
    ("q and bw", {"r.yaml": "format: 1\nchain:\n  - {type: peak, freq: 1000, gain_db: 2, q: 1, bw: 1}\n"},
     "r.yaml", "r.yaml", 3, "1}", "chain[0] gives both q and bw; give one of them"),
    ("neither q nor bw", {"r.yaml": "format: 1\nchain:\n  - {type: peak, freq: 1000, gain_db: 2}\n"}, "r.yaml",
     "r.yaml", 3, "peak", "chain[0] needs q or bw; give one of them"),
    ("slope and q", {"r.yaml": "format: 1\nchain:\n  - {type: low_shelf, freq: 100, gain_db: 2, slope: 1, q: 1}\n"},
     "r.yaml", "r.yaml", 3, "1}", "chain[0] gives both slope and q; give one of them"),
    ("slope too steep", {"r.yaml": "format: 1\nchain:\n  - {type: high_shelf, freq: 8000, gain_db: 12, slope: 6}\n"},
     "r.yaml", "r.yaml", 3, "6}",
     # W3C Audio EQ Cookbook: (A + 1/A)(1/S - 1) + 2 >= 0  =>  S <= 1/(1 - 2/(A + 1/A)), A = 10^(12/40),
     # = 5.0286...; offered rounded down to four digits, so that the value offered is accepted
     "chain[0].slope 6 is too steep for 12 dB; allowed: up to "
     f"{math.floor(1000 / (1 - 2 / (10 ** 0.3 + 10 ** -0.3))) / 1000:.4g} at this gain"),
    ("slope on first-order shelf",
     {"r.yaml": "format: 1\nchain:\n  - {type: low_shelf, freq: 100, gain_db: 2, order: 1, slope: 1}\n"},
     "r.yaml", "r.yaml", 3, "1}", "chain[0].slope is not used by a first-order shelf"),
    ("bw too wide", {"r.yaml": "format: 1\nchain:\n  - {type: notch, freq: 100, bw: 11}\n"}, "r.yaml", "r.yaml",
     3, "11", "chain[0].bw 11 octaves is out of range; it must be at most 10 octaves"),
    ("gain too large", {"r.yaml": "format: 1\nchain:\n  - {type: gain, gain_db: 150}\n"}, "r.yaml", "r.yaml",
     3, "150", "chain[0].gain_db 150 dB is out of range; it must be at most 120 dB"),
    ("iir a0 zero", {"r.yaml": "format: 1\nchain:\n  - {type: iir, b: [1], a: [0, 1]}\n"}, "r.yaml", "r.yaml",
     3, "[0, 1]", "chain[0].a[0] is 0; the leading denominator coefficient must be non-zero"),
    ("iir order 9", {"r.yaml": "format: 1\nchain:\n  - {type: iir, b: [1], a: [1, 0, 0, 0, 0, 0, 0, 0, 0, 0.1]}\n"},
     "r.yaml", "r.yaml", 3, "[1, 0", "chain[0].a has 10 coefficients; allowed: 1 to 9 (order up to 8)"),
    ("iir empty b", {"r.yaml": "format: 1\nchain:\n  - {type: iir, b: [], a: [1]}\n"}, "r.yaml", "r.yaml",
     3, "[]", "chain[0].b has 0 coefficients; allowed: 1 to 9"),
    ("iir zero b", {"r.yaml": "format: 1\nchain:\n  - {type: iir, b: [0, 0], a: [1]}\n"}, "r.yaml", "r.yaml",
     3, "[0, 0]", "chain[0].b is all zeros; the section would output silence"),
    ("include cycle", {"a.yaml": "format: 1\ninclude: b.yaml\nchain:\n" + GAIN,
                       "b.yaml": "format: 1\ninclude: a.yaml\nchain:\n" + GAIN}, "a.yaml", "b.yaml", 2, "a.yaml",
     "include cycle: a.yaml -> b.yaml -> a.yaml; a recipe may not include itself"),
    ("self include", {"a.yaml": "format: 1\ninclude: ./a.yaml\nchain:\n" + GAIN}, "a.yaml", "a.yaml", 2, "./a",
     "include cycle: a.yaml -> a.yaml"),
    ("missing include", {"r.yaml": "format: 1\ninclude: nowhere.yaml\nchain:\n" + GAIN}, "r.yaml", "r.yaml",
     2, "nowhere", "included recipe 'nowhere.yaml' does not exist"),
    ("absolute include", {"r.yaml": "format: 1\ninclude: /srv/recipes/house.yaml\nchain:\n" + GAIN}, "r.yaml",
     "r.yaml", 2, "/srv", "include '/srv/recipes/house.yaml' is not a relative path"),
    ("bad file in include", {"r.yaml": "format: 1\ninclude: [inc.yaml]\n",
                             "inc.yaml": "format: 1\nchain:\n  - {type: notch, freq: 50}\n"}, "r.yaml", "inc.yaml",
     3, "notch", "chain[0] needs q or bw"),
    ("empty chain", {"r.yaml": "format: 1\nchain: []\n"}, "r.yaml", "r.yaml", 2, "[]",
     "the chain is empty; give at least"),
    ("no chain", {"r.yaml": "format: 1\nname: nothing\n"}, "r.yaml", "r.yaml", 1, 1, "the chain is empty"),
    ("no format", {"r.yaml": "name: Saltings\nchain:\n" + GAIN}, "r.yaml", "r.yaml", 1, 1,
     "the recipe has no 'format'; write 'format: 1' at the top"),
    ("format 2", {"r.yaml": "format: 2\nchain:\n" + GAIN}, "r.yaml", "r.yaml", 1, "2",
     "format '2' is not supported; allowed: 1"),
    ("format text", {"r.yaml": "format: one\nchain:\n" + GAIN}, "r.yaml", "r.yaml", 1, "one",
     "format text 'one' is not supported; allowed: 1"),
    ("65 sections", {"r.yaml": "format: 1\nchain:\n" + GAIN * 65}, "r.yaml", "r.yaml", 67, "{",
     "the chain has more than 64 sections (includes counted); split the recipe"),
    ("duplicate key", {"r.yaml": "format: 1\nchain:\n  - {type: gain, gain_db: 1, gain_db: 2}\n"}, "r.yaml",
     "r.yaml", 3, "gain_db: 2", "duplicate key 'gain_db' (first given at line 3); each key may appear once"),
    ("duplicate top key", {"r.yaml": "format: 1\nchain:\n" + GAIN + "format: 1\n"}, "r.yaml", "r.yaml", 4, 1,
     "duplicate key 'format' (first given at line 1)"),
    ("yaml syntax", {"r.yaml": "format: 1\nname: a: b\n"}, "r.yaml", "r.yaml", 2, ": b",
     "invalid YAML: mapping values are not allowed here; a recipe is a YAML mapping"),
    ("unclosed flow", {"r.yaml": "format: 1\nchain: [\n"}, "r.yaml", "r.yaml", 3, 1, "invalid YAML: while parsing"),
    ("tab indent", {"r.yaml": "format: 1\nchain:\n\t- {type: gain, gain_db: 1}\n"}, "r.yaml", "r.yaml", 3, 1,
     "found character '\\t' that cannot start any token; a recipe is a YAML mapping"),
    ("two documents", {"r.yaml": "format: 1\n---\nformat: 1\n"}, "r.yaml", "r.yaml", 2, 1,
     "expected a single document in the stream, but found another document"),
    ("non-UTF-8", {"r.yaml": b"format: 1\nname: Caf\xe9 session\nchain:\n" + GAIN.encode()}, "r.yaml", "r.yaml",
     2, 10, "byte 0xe9 is not UTF-8; save the recipe as UTF-8 text"),
    ("control character", {"r.yaml": b"format: 1\nname: bell\x07\nchain:\n" + GAIN.encode()}, "r.yaml", "r.yaml",
     2, 11, "invalid YAML: unacceptable character #x0007: special characters are not allowed"),
    ("empty file", {"r.yaml": ""}, "r.yaml", "r.yaml", 1, 1, "the recipe is empty; it needs at least 'format: 1'"),
    ("only comments", {"r.yaml": "# nothing here yet\n"}, "r.yaml", "r.yaml", 1, 1, "the recipe is empty"),
    ("top level list", {"r.yaml": "- format: 1\n- chain: []\n"}, "r.yaml", "r.yaml", 1, 1,
     "a recipe must be a mapping of keys to values; found a list"),
    ("top level text", {"r.yaml": "just some words\n"}, "r.yaml", "r.yaml", 1, 1,
     "a recipe must be a mapping of keys to values; found text 'just some words'"),
    ("non-text key", {"r.yaml": "format: 1\nchain:\n  - {type: gain, gain_db: 1, 3: 1}\n"}, "r.yaml", "r.yaml",
     3, "3: 1", "keys must be plain words; found a non-text key"),
    ("merge key", {"r.yaml": "format: 1\nchain:\n  - &p {type: peak, freq: 1000, gain_db: 2, q: 1}\n"
                             "  - {<<: *p, freq: 2000}\n"}, "r.yaml", "r.yaml", 4, "<<",
     "YAML merge keys (<<) are not supported; write the keys out"),
    ("unknown tag", {"r.yaml": "format: 1\nname: !shout hello\nchain:\n" + GAIN}, "r.yaml", "r.yaml", 2, "!shout",
     "cannot read value 'hello': could not determine a constructor for the tag '!shout'"),
    ("python tag", {"r.yaml": "format: 1\nname: !!python/object:os.system echo\nchain:\n" + GAIN}, "r.yaml",
     "r.yaml", 2, "!!python", "could not determine a constructor for the tag"),
    ("guard out of range", {"r.yaml": "format: 1\nchain:\n" + GAIN + "guard: {pole_margin: 0.9}\n"}, "r.yaml",
     "r.yaml", 4, "0.9", "guard.pole_margin 0.9 is out of range; it must be at most 0.5"),
    ("guard on_over", {"r.yaml": "format: 1\nchain:\n" + GAIN + "guard: {on_over: clamp}\n"}, "r.yaml", "r.yaml",
     4, "clamp", "guard.on_over 'clamp' is not known (did you mean 'clip'?); allowed: reject, clip, scale"),
    ("output subtype", {"r.yaml": "format: 1\nchain:\n" + GAIN + "output:\n  subtype: PCM_20\n"}, "r.yaml",
     "r.yaml", 5, "PCM_20", "output.subtype 'PCM_20' is not known (did you mean"),
    ("guard null", {"r.yaml": "format: 1\nchain:\n" + GAIN + "guard: {max_decay_s: null}\n"}, "r.yaml", "r.yaml",
     4, "null", "guard.max_decay_s must be a number; found nothing (null)"),
    ("billion laughs", {"r.yaml": _laughs()}, "r.yaml", "r.yaml", 2, 31,
     # depth-first count: 2 + 11 + 111 + 1111 + 11111 nodes, then 7654 into a4 -> 8th item of a0
     "the document expands to more than 20000 YAML nodes (aliases counted); a recipe is a small file"),
    # an anchored node starts at its anchor
    ("self alias", {"r.yaml": "format: 1\nnotes: &a [*a]\nchain:\n" + GAIN}, "r.yaml", "r.yaml", 2, "&a",
     "aliases nest lists and mappings more than 32 deep"),
    ("deep nesting", {"r.yaml": "format: 1\nnotes: " + "[" * 40 + "]" * 40 + "\nchain:\n" + GAIN}, "r.yaml",
     "r.yaml", 2, 8 + 31,    # the root mapping is level 1, so the 32nd '[' is level 33
     "lists and mappings are nested more than 32 deep"),
    ("name not text", {"r.yaml": "format: 1\nname: [a, b]\nchain:\n" + GAIN}, "r.yaml", "r.yaml", 2, "[",
     "name must be text; found a list"),
    ("newline in key", {"r.yaml": 'format: 1\nchain:\n  - {type: gain, gain_db: 1, "x\\ny": 2}\n'}, "r.yaml",
     "r.yaml", 3, '"x', "unknown key 'x\\ny' in chain[0] (gain)"),
    ("output metadata", {"r.yaml": "format: 1\nchain:\n" + GAIN + "output: {metadata: strip}\n"}, "r.yaml",
     "r.yaml", 4, "strip", "output.metadata 'strip' is not known; allowed: keep, drop"),
    # ITU-R BS.1770-4: the absolute gate is -70 LUFS, so a target below it cannot be measured
    ("loudness target low", {"r.yaml": "format: 1\nchain:\n" + GAIN + "loudness: {target_lufs: -75}\n"},
     "r.yaml", "r.yaml", 4, "-75", "loudness.target_lufs -75 LUFS is out of range; it must be at least -70 LUFS"),
    ("loudness target high", {"r.yaml": "format: 1\nchain:\n" + GAIN + "loudness:\n  target_lufs: 3\n"},
     "r.yaml", "r.yaml", 5, "3", "loudness.target_lufs 3 LUFS is out of range; it must be at most 0 LUFS"),
    ("loudness target text", {"r.yaml": "format: 1\nchain:\n" + GAIN + "loudness: {target_lufs: loud}\n"},
     "r.yaml", "r.yaml", 4, "loud}", "loudness.target_lufs must be a number; found text 'loud'"),
    ("loudness link", {"r.yaml": "format: 1\nchain:\n" + GAIN + "loudness: {target_lufs: -23, link: album}\n"},
     "r.yaml", "r.yaml", 4, "album", "loudness.link 'album' is not known; allowed: file, folder, batch"),
    ("loudness no target", {"r.yaml": "format: 1\nchain:\n" + GAIN + "loudness: {link: folder}\n"},
     "r.yaml", "r.yaml", 4, "folder", "the loudness block has no 'target_lufs'"),
    ("loudness unknown key", {"r.yaml": "format: 1\nchain:\n" + GAIN + "loudness: {target: -23}\n"},
     "r.yaml", "r.yaml", 4, "target", "unknown key 'target' in loudness (did you mean 'target_lufs'?)"),
    ("loudness not mapping", {"r.yaml": "format: 1\nchain:\n" + GAIN + "loudness: -23\n"},
     "r.yaml", "r.yaml", 4, "-23", "loudness must be a mapping"),
    ("loudness include conflict", {"house.yaml": "format: 1\nchain:\n" + GAIN + "loudness: {target_lufs: -16}\n",
                                   "r.yaml": "format: 1\ninclude: house.yaml\nloudness: {target_lufs: -23}\n"},
     "r.yaml", "r.yaml", 3, "-23", "loudness.target_lufs -23 conflicts with -16 set in "),
]


def _write_files(tmp_path, files: dict) -> None:
    for name, text in files.items():
        path = tmp_path / name
        path.parent.mkdir(parents=True, exist_ok=True)
        if isinstance(text, bytes):
            path.write_bytes(text)
        else:
            path.write_text(text, encoding="utf-8")


def _expected_col(files: dict, name: str, line: int, where) -> int:
    if isinstance(where, int):
        return where
    text = files[name]
    text = text.decode("utf-8", "replace") if isinstance(text, bytes) else text
    row = text.split("\n")[line - 1]
    assert row.count(where) >= 1, (row, where)
    return row.index(where) + 1


def test_malformed_table_is_large_enough():
    assert len(MALFORMED) >= 25
    assert len({case[0] for case in MALFORMED}) == len(MALFORMED)


@pytest.mark.parametrize("case", MALFORMED, ids=[c[0] for c in MALFORMED])
def test_malformed_recipe_gives_located_error(tmp_path, case):
    _, files, loaded, err_file, line, where, message = case
    _write_files(tmp_path, files)
    t0 = time.monotonic()
    with pytest.raises(RecipeError) as err:
        load(tmp_path / loaded)
    assert time.monotonic() - t0 < 5.0           # fails fast; never hangs (a hang guard, not a benchmark)
    e = err.value
    col = _expected_col(files, err_file, line, where)
    assert os.path.samefile(e.path, tmp_path / err_file), e.path
    assert (e.line, e.col) == (line, col), str(e)
    assert message in e.message, str(e)
    text = str(e)
    m = ERROR_RE.match(text)
    assert m, text
    assert (m["path"], int(m["line"]), int(m["col"])) == (e.path, line, col)
    assert "\n" not in text and "\r" not in text
    assert isinstance(e, ValueError)              # RecipeError is a ValueError (scipy-style validation)


def test_deep_include_nesting_is_limited(tmp_path):
    for i in range(12):
        (tmp_path / f"r{i}.yaml").write_text(f"format: 1\ninclude: r{i + 1}.yaml\nchain:\n{GAIN}")
    (tmp_path / "r12.yaml").write_text(f"format: 1\nchain:\n{GAIN}")
    with pytest.raises(RecipeError) as err:
        load(tmp_path / "r0.yaml")
    e = err.value
    assert "includes nested deeper than 8 levels" in e.message
    # r0 .. r8 are 9 files deep; r8's include line is where the 10th file would start
    assert (os.path.basename(e.path), e.line, e.col) == ("r8.yaml", 2, 10)
    # eight levels are fine
    assert len(load(tmp_path / "r4.yaml").sections) == 9


def test_includes_alone_cannot_exceed_64_sections(tmp_path):
    (tmp_path / "forty.yaml").write_text("format: 1\nchain:\n" + GAIN * 40)
    (tmp_path / "r.yaml").write_text("format: 1\ninclude: [forty.yaml, forty.yaml]\n")
    with pytest.raises(RecipeError) as err:
        load(tmp_path / "r.yaml")
    assert "more than 64 sections (includes counted)" in err.value.message
    assert (err.value.line, err.value.col) == (2, 23)        # the second include item


def test_missing_recipe_file(tmp_path):
    with pytest.raises(RecipeError) as err:
        load(tmp_path / "absent.yaml")
    assert (err.value.line, err.value.col) == (1, 1)
    assert "does not exist" in err.value.message and ERROR_RE.match(str(err.value))


def test_folder_is_not_a_recipe(tmp_path):
    with pytest.raises(RecipeError, match="is a folder; a recipe is a .yaml file"):
        load(tmp_path)


def test_oversized_file_rejected(tmp_path):
    path = tmp_path / "big.yaml"
    path.write_text("format: 1\n" + "# padding\n" * 110_000)
    with pytest.raises(RecipeError, match=r"allowed: up to 1048576 bytes"):
        load(path)


# --------------------------------------------------------------------------- mutations (hypothesis)

BASE = """\
format: 1
name: Saltings marsh take
include: house.yaml
chain:
  - {type: highpass, freq: 45, order: 4, label: wind}
  - {type: notch, freq: 50, q: 30}
  - {type: peak, freq: 3000, gain_db: 2.5, bw: 0.7}
  - {type: low_shelf, freq: 120, gain_db: -3, slope: 1}
  - {type: high_shelf, freq: 9000, gain_db: 1, order: 1}
  - {type: iir, b: [0.5], a: [1, -0.5]}
  - type: gain
    gain_db: -1.5
guard:
  max_gain_db: 24
  pole_margin: 1.0e-6
  max_decay_s: 5
  ceiling_dbfs: 0.0
  true_peak_ceiling_dbtp: null
  on_over: reject
output:
  subtype: same
  dither: auto
"""
HOUSE = "format: 1\nchain:\n  - {type: allpass, freq: 700, q: 0.7}\n  - {type: bandpass, freq: 500, bw: 9}\n"

TOKENS = [":", ": ", "-", "- ", "[", "]", "{", "}", ",", "&x", "*x", "!", "!!str", "#", "'", '"', "\n", "  ",
          "\t", "\x00", "\x1b", "é", "<<", "---", "...", "|", ">", "?", "%", "@", "`", "~", "null", "yes", "no",
          ".inf", "-.inf", ".nan", "0", "-1", "1e999", "1e-6", "0x1F", "2.5", "[]", "{}", "type", "freq", "q",
          "bw", "order", "gain_db", "slope", "include", "chain", "house.yaml", "r.yaml", "/abs.yaml", "99",
          "iir", "peak", "peek", "\ufeff", "\r\n", "\\"]


@st.composite
def mutated(draw) -> bytes:
    text = BASE
    for _ in range(draw(st.integers(1, 4))):
        kind = draw(st.sampled_from(["insert", "delete", "replace", "dup_line", "swap_lines", "bytes"]))
        pos = draw(st.integers(0, len(text)))
        if kind == "insert":
            text = text[:pos] + draw(st.sampled_from(TOKENS)) + text[pos:]
        elif kind == "delete":
            text = text[:pos] + text[pos + draw(st.integers(1, 12)):]
        elif kind == "replace":
            words = re.findall(r"[\w.\-]+", text)
            old = draw(st.sampled_from(words))
            text = text.replace(old, draw(st.sampled_from(TOKENS)), 1)
        else:
            lines = text.split("\n")
            i, j = draw(st.integers(0, len(lines) - 1)), draw(st.integers(0, len(lines) - 1))
            if kind == "dup_line":
                lines.insert(i, lines[j])
            elif kind == "swap_lines":
                lines[i], lines[j] = lines[j], lines[i]
            else:
                lines[i] = lines[i] + "\udcff"     # becomes a raw non-UTF-8 byte below
            text = "\n".join(lines)
    return text.encode("utf-8", "surrogateescape")


@pytest.fixture(scope="module")
def mutation_dir(tmp_path_factory):
    d = tmp_path_factory.mktemp("mutations")
    (d / "house.yaml").write_text(HOUSE)
    return d


def test_base_of_mutations_is_valid(mutation_dir):
    (mutation_dir / "r.yaml").write_text(BASE)
    recipe = load(mutation_dir / "r.yaml")
    assert [s.kind for s in recipe.sections][:3] == ["allpass", "bandpass", "highpass"]
    assert len(recipe.sections) == 9


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=mutated())
def test_mutations_raise_only_located_recipe_errors(mutation_dir, data):
    from chainrun.design import design

    path = mutation_dir / "r.yaml"
    path.write_bytes(data)
    try:
        recipe = load(path)
    except RecipeError as e:
        text = str(e)
        m = ERROR_RE.match(text)
        assert m, repr(text)
        assert e.line >= 1 and e.col >= 1
        if os.path.samefile(e.path, path):
            assert e.line <= data.count(b"\n") + 2, text
        return
    # loaded fine: it must design at a common rate or fail with a located Nyquist error only
    assert recipe.sections
    try:
        chain = design(recipe, 48000)
    except RecipeError as e:
        assert "at or above Nyquist" in e.message and re.match(r"^[^\n]+:\d+:\d+: error: [^\n]+$", str(e))
    else:
        assert chain.sos.shape == (len(chain.labels), 6)


# --------------------------------------------------------------------------- valid recipes

def test_defaults_follow_readme(write_recipe):
    recipe = load(write_recipe("""
        format: 1
        chain:
          - {type: highpass, freq: 70}
          - {type: low_shelf, freq: 120, gain_db: -3}
          - {type: high_shelf, freq: 8000, gain_db: 2, q: 0.7}
    """))
    hp, ls, hs = recipe.sections
    assert hp.params["order"] == 2                       # README.md 'Recipes': order 1..8 (default 2)
    # README.md 'Recipes': shelves are order 2 with slope or q, the slope defaulting to 1
    assert ls.params["order"] == 2 and ls.params["slope"] == 1.0
    assert "slope" not in hs.params and hs.params["q"] == 0.7
    # README.md 'Recipes': the defaults are the example's guard values 24 dB, 1e-6, 5 s, 0 dBFS, reject
    # and output same / auto
    assert recipe.guard == Guard(max_gain_db=24.0, pole_margin=1e-6, max_decay_s=5.0, ceiling_dbfs=0.0,
                                 true_peak_ceiling_dbtp=None, on_over="reject")
    assert recipe.output == Output(subtype="same", dither="auto")
    assert recipe.name == "recipe"                       # the file name stem when no name is given


def test_yaml11_exponent_without_dot_is_a_number(write_recipe):
    # YAML 1.1 (PyYAML) reads 1e-6 as text; the recipe reads it as the number it looks like
    recipe = load(write_recipe("""
        format: 1
        chain:
          - {type: gain, gain_db: -1e0}
        guard: {pole_margin: 1e-6, max_gain_db: 2E1}
    """))
    assert recipe.guard.pole_margin == 1e-6 and recipe.guard.max_gain_db == 20.0
    assert recipe.sections[0].params["gain_db"] == -1.0


def test_locations_and_titles(write_recipe):
    path = write_recipe("""
        format: 1
        name: Boathouse voice
        chain:
          - {type: notch, freq: 50, q: 20, label: winch hum}
          - type: peak
            freq: 280
            gain_db: -2.5
            bw: 0.8
    """)
    recipe = load(path)
    notch, peak = recipe.sections
    assert str(notch.where) == f"{path}:4:5"
    assert (notch.locate("q").line, notch.locate("q").col) == (4, 32)
    assert (peak.where.line, peak.where.col) == (5, 5)
    assert (peak.locate("gain_db").line, peak.locate("gain_db").col) == (7, 14)
    assert peak.locate("q") == peak.where                # not written: the section itself
    assert notch.title == "chain[0] notch 50 Hz (winch hum)"
    assert peak.title == "chain[1] peak 280 Hz"
    assert recipe.name == "Boathouse voice"


def test_to_dict_is_json_safe(write_recipe):
    recipe = load(write_recipe("""
        format: 1
        chain:
          - {type: iir, b: [0.5, 0.1], a: [1, -0.5]}
          - {type: notch, freq: 60, bw: 0.2, label: hum}
    """))
    d = json.loads(json.dumps(recipe.to_dict(), allow_nan=False))
    assert d["chain"][0]["b"] == [0.5, 0.1] and d["chain"][1]["label"] == "hum"
    assert d["guard"]["max_gain_db"] == 24.0 and d["format"] == 1


def test_bom_is_accepted(write_recipe):
    recipe = load(write_recipe(b"\xef\xbb\xbfformat: 1\nchain:\n" + GAIN.encode()))
    assert recipe.sections[0].kind == "gain"


def test_true_peak_ceiling_may_be_null_or_number(write_recipe):
    a = load(write_recipe("format: 1\nchain:\n" + GAIN + "guard: {true_peak_ceiling_dbtp: null}\n", "a.yaml"))
    b = load(write_recipe("format: 1\nchain:\n" + GAIN + "guard: {true_peak_ceiling_dbtp: -1}\n", "b.yaml"))
    assert a.guard.true_peak_ceiling_dbtp is None and b.guard.true_peak_ceiling_dbtp == -1.0


# --------------------------------------------------------------------------- includes

def test_included_chain_comes_first(write_recipe):
    write_recipe("format: 1\nchain:\n  - {type: highpass, freq: 80}\n  - {type: gain, gain_db: -2}\n", "house.yaml")
    top = write_recipe("format: 1\ninclude: house.yaml\nchain:\n  - {type: notch, freq: 50, q: 20}\n", "top.yaml")
    recipe = load(top)
    assert [s.kind for s in recipe.sections] == ["highpass", "gain", "notch"]
    assert [os.path.basename(s.where.path) for s in recipe.sections] == ["house.yaml", "house.yaml", "top.yaml"]
    assert [os.path.basename(p) for p in recipe.includes] == ["house.yaml"]


def test_include_list_keeps_order(write_recipe):
    write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: 1}\n", "one.yaml")
    write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: 2}\n", "two.yaml")
    recipe = load(write_recipe("format: 1\ninclude: [two.yaml, one.yaml]\nchain:\n  - {type: gain, gain_db: 3}\n"))
    assert [s.params["gain_db"] for s in recipe.sections] == [2.0, 1.0, 3.0]


def test_nested_includes_order_and_folders(write_recipe, tmp_path, monkeypatch):
    write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: 1}\n", "lib/shared/base.yaml")
    write_recipe("format: 1\ninclude: shared/base.yaml\nchain:\n  - {type: gain, gain_db: 2}\n", "lib/room.yaml")
    write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: 50}\n", "shared/base.yaml")   # decoy at top level
    top = write_recipe("format: 1\ninclude: lib/room.yaml\nchain:\n  - {type: gain, gain_db: 3}\n", "top.yaml")
    monkeypatch.chdir(tmp_path)     # from here "shared/base.yaml" would be the decoy
    recipe = load(top)
    # lib/room.yaml's include is relative to lib/, so lib/shared/base.yaml (1 dB), not shared/base.yaml
    assert [s.params["gain_db"] for s in recipe.sections] == [1.0, 2.0, 3.0]
    assert [os.path.relpath(p, tmp_path) for p in recipe.includes] == [
        os.path.join("lib", "room.yaml"), os.path.join("lib", "shared", "base.yaml")]


# ----------------------------------------------- guard and output along an include chain
# README.md "Recipes": the strictest limit of the include chain applies (lowest max_gain_db, largest
# pole_margin, shortest max_decay_s, lowest ceilings, on_over reject > scale > clip); a file that writes
# a looser value gets a warning naming both places; output keys written differently are an error.

def _at(path, text: str, key: str) -> str:
    """``path:line:col`` of the value of the first ``key: value`` in ``text`` (worked out here, not by the loader)."""
    for n, row in enumerate(text.split("\n"), 1):
        if f"{key}: " in row:
            return f"{path}:{n}:{row.index(f'{key}: ') + len(key) + 3}"
    raise AssertionError(key)


def _house_and_top(write_recipe, house_guard: str, top_guard: str, top_extra: str = ""):
    house = "# house limits\nformat: 1\nchain:\n  - {type: gain, gain_db: -1}\nguard:\n" + house_guard
    top = "format: 1\ninclude: house/limits.yaml\nchain:\n  - {type: gain, gain_db: -2}\n" + top_extra
    top += "guard:\n" + top_guard if top_guard else ""
    write_recipe(house, "house/limits.yaml")
    tpath = write_recipe(top, "top.yaml")
    # the loader names an included file by the path it was reached through: top's folder + the include text
    return os.path.join(os.path.dirname(str(tpath)), "house", "limits.yaml"), house, str(tpath), top


# (key, house value, top value, the value that applies, the file it comes from, values as a warning says them)
LOOSER_TOP = [
    ("max_gain_db", "1", "24", 1.0, ("24", "1")),
    ("pole_margin", "1.0e-3", "1.0e-6", 1e-3, ("1e-06", "0.001")),
    ("max_decay_s", "0.5", "5", 0.5, ("5", "0.5")),
    ("ceiling_dbfs", "-1", "0", -1.0, ("0", "-1")),
    ("true_peak_ceiling_dbtp", "-2", "-1", -2.0, ("-1", "-2")),
    ("on_over", "reject", "clip", "reject", ("clip", "reject")),
    ("on_over", "reject", "scale", "reject", ("scale", "reject")),
    ("on_over", "scale", "clip", "scale", ("clip", "scale")),
]
STRICTER_TOP = [
    ("max_gain_db", "6", "3", 3.0),
    ("pole_margin", "1.0e-6", "1.0e-4", 1e-4),
    ("max_decay_s", "5", "1", 1.0),
    ("ceiling_dbfs", "-0.5", "-3", -3.0),
    ("true_peak_ceiling_dbtp", "-1", "-1.5", -1.5),
    ("on_over", "clip", "scale", "scale"),
    ("on_over", "clip", "reject", "reject"),
    ("on_over", "scale", "reject", "reject"),
]


@pytest.mark.parametrize("key, house_value, top_value, applies, said", LOOSER_TOP,
                         ids=[f"{c[0]}-{c[2]}" for c in LOOSER_TOP])
def test_included_limit_cannot_be_loosened(write_recipe, key, house_value, top_value, applies, said):
    hpath, house, tpath, top = _house_and_top(write_recipe, f"  {key}: {house_value}   # house rule\n",
                                              f"  {key}: {top_value}\n")
    recipe = load(tpath)
    assert getattr(recipe.guard, key) == applies
    assert str(recipe.guard.where[key]) == _at(hpath, house, key)
    assert recipe.warnings == (f"{_at(tpath, top, key)}: warning: guard.{key} {said[0]} is looser than {said[1]} "
                               f"set in {_at(hpath, house, key)}; the stricter value applies",)


@pytest.mark.parametrize("key, house_value, top_value, applies", STRICTER_TOP,
                         ids=[f"{c[0]}-{c[2]}" for c in STRICTER_TOP])
def test_a_stricter_parent_value_applies_without_warning(write_recipe, key, house_value, top_value, applies):
    hpath, house, tpath, top = _house_and_top(write_recipe, f"  {key}: {house_value}\n", f"  {key}: {top_value}\n")
    recipe = load(tpath)
    assert getattr(recipe.guard, key) == applies
    assert str(recipe.guard.where[key]) == _at(tpath, top, key)
    assert recipe.warnings == ()


def test_the_marsh_case_included_max_gain_applies(write_recipe):
    # the issue: a house file keeps "max_gain_db: 1  # a cleanup pass must never boost"; a recipe that
    # includes it, adds a +12 dB peak and writes max_gain_db 24 is still held to 1 dB
    marsh = (REPO / "recipes" / "marsh-cleanup.yaml").read_text(encoding="utf-8")
    write_recipe(marsh, "house/marsh.yaml")
    top = write_recipe("format: 1\ninclude: house/marsh.yaml\nchain:\n  - {type: peak, freq: 1000, gain_db: 12, q: 1}\n"
                       "guard:\n  max_gain_db: 24\n")
    recipe = load(top)
    assert recipe.guard.max_gain_db == 1.0 and recipe.guard.on_over == "reject"
    house = os.path.join(os.path.dirname(str(top)), "house", "marsh.yaml")
    assert recipe.warnings == (f"{top}:6:16: warning: guard.max_gain_db 24 is looser than 1 set in "
                               f"{_at(house, marsh, 'max_gain_db')}; the stricter value applies",)


def test_an_include_chain_counts_written_values_not_defaults(write_recipe):
    hpath, house, tpath, top = _house_and_top(
        write_recipe, "  max_gain_db: 3\n  true_peak_ceiling_dbtp: null\n",
        "  max_decay_s: 30\n  true_peak_ceiling_dbtp: -1\n  on_over: clip\n")
    recipe = load(tpath)
    # max_decay_s 30 and on_over clip are looser than the defaults (5 s, reject), but nobody else wrote them
    assert (recipe.guard.max_gain_db, recipe.guard.max_decay_s, recipe.guard.on_over) == (3.0, 30.0, "clip")
    assert recipe.guard.true_peak_ceiling_dbtp == -1.0       # null is "not set", not a looser ceiling
    assert recipe.warnings == ()
    assert recipe.to_dict()["guard_from"] == {
        "max_gain_db": _at(hpath, house, "max_gain_db"), "pole_margin": "default",
        "max_decay_s": _at(tpath, top, "max_decay_s"), "ceiling_dbfs": "default",
        "true_peak_ceiling_dbtp": _at(tpath, top, "true_peak_ceiling_dbtp"), "on_over": _at(tpath, top, "on_over")}


def test_a_limit_deep_in_the_include_chain_applies(write_recipe, tmp_path):
    write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: -1}\nguard: {ceiling_dbfs: -2}\n", "lib/shared/base.yaml")
    write_recipe("format: 1\ninclude: shared/base.yaml\nchain:\n  - {type: gain, gain_db: -1}\n", "lib/room.yaml")
    top = write_recipe("format: 1\ninclude: lib/room.yaml\nchain:\n  - {type: gain, gain_db: -1}\n"
                       "guard: {ceiling_dbfs: -0.5}\n", "top.yaml")
    recipe = load(top)
    base = os.path.join(str(tmp_path), "lib", "shared", "base.yaml")
    assert recipe.guard.ceiling_dbfs == -2.0
    assert recipe.to_dict()["guard_from"]["ceiling_dbfs"] == f"{base}:4:23"
    assert recipe.warnings == (f"{top}:5:23: warning: guard.ceiling_dbfs -0.5 is looser than -2 set in "
                               f"{base}:4:23; the stricter value applies",)


def test_side_by_side_includes_merge_strictest_without_warning(write_recipe):
    a = write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: -1}\nguard: {max_gain_db: 6}\n", "a.yaml")
    b = write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: -1}\nguard: {max_gain_db: 3}\n", "b.yaml")
    recipe = load(write_recipe("format: 1\ninclude: [a.yaml, b.yaml]\n", "top.yaml"))
    assert recipe.guard.max_gain_db == 3.0 and str(recipe.guard.where["max_gain_db"]) == f"{b}:4:22"
    assert recipe.warnings == () and a


def test_included_output_applies_unless_the_parent_agrees_or_conflicts(write_recipe):
    house = write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: -1}\noutput:\n  subtype: PCM_24\n"
                         "  dither: tpdf\n", "house.yaml")
    recipe = load(write_recipe("format: 1\ninclude: house.yaml\n", "plain.yaml"))
    assert (recipe.output.subtype, recipe.output.dither) == ("PCM_24", "tpdf")
    assert str(recipe.output.where["subtype"]) == f"{house}:5:12"
    same = load(write_recipe("format: 1\ninclude: house.yaml\noutput: {subtype: PCM_24}\n", "same.yaml"))
    assert (same.output.subtype, same.output.dither) == ("PCM_24", "tpdf")


@pytest.mark.parametrize("key, value, col", [("subtype", "PCM_16", 19), ("dither", "none", 18)])
def test_output_conflict_with_an_include_is_a_located_error(write_recipe, key, value, col):
    house = write_recipe("format: 1\nchain:\n  - {type: gain, gain_db: -1}\noutput:\n  subtype: PCM_24\n"
                         "  dither: tpdf\n", "house.yaml")
    top = write_recipe(f"format: 1\ninclude: house.yaml\noutput: {{{key}: {value}}}\n", "top.yaml")
    with pytest.raises(RecipeError) as err:
        load(top)
    assert ERROR_RE.match(str(err.value)), str(err.value)
    assert (err.value.path, err.value.line, err.value.col) == (str(top), 3, col)
    theirs = {"subtype": ("PCM_24", 5), "dither": ("tpdf", 6)}[key]
    assert err.value.message.startswith(f"output.{key} {value} conflicts with {theirs[0]} set in "
                                        f"{house}:{theirs[1]}:")


def test_to_dict_says_where_each_guard_value_came_from(repo_root, monkeypatch):
    monkeypatch.chdir(repo_root)
    d = load(os.path.join("recipes", "boathouse-stems.yaml")).to_dict()
    # recipes/boathouse-stems.yaml writes max_gain_db 6 (as its house file does, which wins the tie),
    # ceiling_dbfs -1.0 and on_over reject; pole_margin, max_decay_s and the true-peak ceiling are defaults
    house = os.path.join("recipes", "house", "boathouse-house-eq.yaml")
    stems = os.path.join("recipes", "boathouse-stems.yaml")
    assert d["guard_from"] == {"max_gain_db": f"{house}:11:16", "pole_margin": "default", "max_decay_s": "default",
                               "ceiling_dbfs": f"{stems}:12:17", "true_peak_ceiling_dbtp": "default",
                               "on_over": f"{stems}:13:12"}
    assert d["guard"]["ceiling_dbfs"] == -1.0 and d["warnings"] == []


def test_digest_of_bundled_recipes_is_unchanged_and_location_free(repo_root):
    # Digests computed by chainrun at commit 30a0ae5 (before guard values were merged along includes), so
    # outputs delivered then stay resumable: the digest covers the guard's values, never guard_from.
    old = {"marsh-cleanup.yaml": "bfd7e25dce0efe11159d75116047e995349ac40e8852732181e658fdb7d6cf98",
           "boathouse-stems.yaml": "f99d6b7902d0804a17db2f5ced47703014a7848b336f847fd3ef882f70dcd0ef"}
    for name, digest in old.items():
        recipe = load(repo_root / "recipes" / name)
        assert "guard_from" in recipe.to_dict()
        assert recipe.digest == digest, name


def test_digest_ignores_layout_and_includes(write_recipe):
    write_recipe("format: 1\nchain:\n  - {type: highpass, freq: 80}\n", "house.yaml")
    a = load(write_recipe("format: 1\nname: A\ninclude: house.yaml\nchain:\n  - {type: gain, gain_db: -1}\n", "a.yaml"))
    b = load(write_recipe("""
        format: 1
        name: B
        chain:
          - type: highpass
            freq: 80
          - {type: gain, gain_db: -1}
    """, "sub/b.yaml"))
    c = load(write_recipe("format: 1\nchain:\n  - {type: highpass, freq: 81}\n  - {type: gain, gain_db: -1}\n",
                          "c.yaml"))
    assert a.digest == b.digest
    assert a.digest != c.digest


def test_bundled_boathouse_stems_includes_house_eq(repo_root):
    recipe = load(repo_root / "recipes" / "boathouse-stems.yaml")
    house = load(repo_root / "recipes" / "house" / "boathouse-house-eq.yaml")
    assert [os.path.realpath(p) for p in recipe.includes] == [
        os.path.realpath(repo_root / "recipes" / "house" / "boathouse-house-eq.yaml")]
    kinds = [s.kind for s in recipe.sections]
    assert kinds == ["highpass", "low_shelf", "peak", "high_shelf", "notch", "peak", "gain"]
    assert [s.params for s in recipe.sections[:4]] == [s.params for s in house.sections]
    assert all(s.where.path.endswith(os.path.join("house", "boathouse-house-eq.yaml"))
               for s in recipe.sections[:4])
    assert recipe.guard.ceiling_dbfs == -1.0 and recipe.name == "Boathouse interview stems"


@pytest.mark.parametrize("name", ["boathouse-stems.yaml", "marsh-cleanup.yaml", "unstable-hand-typed.yaml",
                                  os.path.join("house", "boathouse-house-eq.yaml")])
def test_bundled_recipes_load(repo_root, name):
    recipe = load(repo_root / "recipes" / name)
    assert recipe.sections and all(math.isfinite(v) for s in recipe.sections for v in
                                   (x for x in s.params.values() if isinstance(x, float)))


@pytest.mark.parametrize("gain_db", [24.0, 12.0, 3.0, -24.0])
def test_the_steepest_slope_offered_is_accepted(write_recipe, gain_db):
    # W3C Audio EQ Cookbook: the shelf's alpha is real for S <= 1/(1 - 2/(A + 1/A)), A = 10^(gain/40);
    # the error offers that limit rounded down (24 dB: 1.89595... is offered as 1.895), and typing the
    # value offered must load
    path = write_recipe(f"format: 1\nchain:\n  - {{type: low_shelf, freq: 100, gain_db: {gain_db}, slope: 1000}}\n")
    with pytest.raises(RecipeError) as err:
        load(path)
    offered = float(str(err.value).split("allowed: up to ")[1].split(" ")[0])
    a = 10 ** (gain_db / 40)
    assert offered <= 1 / (1 - 2 / (a + 1 / a)) < offered * 1.001
    ok = write_recipe(f"format: 1\nchain:\n  - {{type: low_shelf, freq: 100, gain_db: {gain_db}, slope: {offered}}}\n",
                      name="ok.yaml")
    assert load(ok).sections[0].params["slope"] == offered


# --------------------------------------------------------------------------- loads() and from_dict()

from chainrun.recipe import from_dict, loads  # noqa: E402

VOICE = """\
format: 1
name: boathouse voice
chain:
  - {type: highpass, freq: 80, order: 4}
  - {type: peak, freq: 3000, gain_db: 2.5, bw: 1, label: presence}
  - {type: high_shelf, freq: 9000, gain_db: -3, slope: 0.8}
  - {type: notch, freq: 50, q: 30}
  - {type: iir, b: [0.5, 0.25], a: [1, -0.25]}
guard: {max_gain_db: 12, on_over: clip}
output: {subtype: PCM_24, dither: tpdf}
"""

VOICE_DICT = {
    "format": 1, "name": "boathouse voice",
    "chain": [{"type": "highpass", "freq": 80, "order": 4},
              {"type": "peak", "freq": 3000, "gain_db": 2.5, "bw": 1, "label": "presence"},
              {"type": "high_shelf", "freq": 9000, "gain_db": -3, "slope": 0.8},
              {"type": "notch", "freq": 50, "q": 30},
              {"type": "iir", "b": (0.5, 0.25), "a": [1, -0.25]}],
    "guard": {"max_gain_db": 12, "on_over": "clip"},
    "output": {"subtype": "PCM_24", "dither": "tpdf"},
}


@pytest.mark.parametrize("rate", [44100, 96000])
def test_text_and_dict_design_to_the_same_sos_as_the_file(write_recipe, rate):
    # The file route is the one checked against the Audio EQ Cookbook and scipy.signal in
    # test_design.py; text and mapping must give bit-identical coefficients, guard and output.
    from chainrun.design import design

    from_file = load(write_recipe(VOICE, "voice.yaml"))
    from_text = loads(VOICE)
    from_map = from_dict(VOICE_DICT)
    expected = design(from_file, rate).sos
    for recipe, path in ((from_text, "<text>"), (from_map, "<dict>")):
        assert recipe.path == path and recipe.name == "boathouse voice"
        assert design(recipe, rate).sos.tobytes() == expected.tobytes()
        assert recipe.guard == from_file.guard and recipe.output == from_file.output
        assert recipe.digest == from_file.digest
        assert [s.label for s in recipe.sections] == ["", "presence", "", "", ""]


def test_from_dict_takes_numpy_scalars():
    np = pytest.importorskip("numpy")
    recipe = from_dict({"format": 1, "chain": [{"type": "peak", "freq": np.float32(1000.0),
                                                "gain_db": np.float64(-2.0), "q": np.int64(2)}]})
    assert dict(recipe.sections[0].params) == {"freq": 1000.0, "gain_db": -2.0, "q": 2.0}
    assert recipe.name == "<dict>"


# (text, line, marker in that line or column, message part); the marker's first character is the column
@pytest.mark.parametrize("text, line, col, part", [
    ("format: 1\nchain:\n  - {type: peak, freq: 1000, gain_db: 2, q: 1\n", 4, 1, "invalid YAML"),
    ("format: 1\nchain:\n  - {type: peak, freq: 1000, gain_db: 2, bw: 1, q: 1}\n", 3, "1, q",
     "chain[0] gives both q and bw"),
    ("format: 1\nchain:\n  - type: lowpass\n    freq: 050\n", 4, "050", "'050' is not a decimal number"),
    ("", 1, 1, "the recipe is empty"),
])
def test_malformed_text_is_a_located_error_at_text(text, line, col, part):
    if isinstance(col, str):
        col = text.splitlines()[line - 1].index(col) + 1
    with pytest.raises(RecipeError) as err:
        loads(text)
    msg = str(err.value)
    assert ERROR_RE.match(msg), msg
    # located as the text was written: line and column counted in `text` above
    assert msg.startswith(f"<text>:{line}:{col}: error: ") and part in msg, msg
    named = pytest.raises(RecipeError, loads, text, name="studio-b")
    assert str(named.value).startswith(f"studio-b:{line}:{col}: error: ")


@pytest.mark.parametrize("mapping, part", [
    ({"format": 1, "chain": [{"type": "peak", "freq": 1000, "gain_db": 2}]}, "chain[0] needs q or bw"),
    ({"format": 1, "chain": [{"type": "lowpass", "freq": "80"}]}, "chain[0].freq must be a number; found text '80'"),
    ({"format": 1, "chain": [{"type": "gain", "gain_db": float("nan")}]}, "chain[0].gain_db must be a finite number"),
    ({"format": 1, "chain": [{"type": "gain", "gain_db": object()}]}, "a value of type object cannot be written"),
    ({"format": 1, (1, 2): 3}, "keys must be plain words"),
    (["format", 1], "a recipe must be a mapping"),
])
def test_malformed_dict_is_a_located_error_at_dict(mapping, part):
    with pytest.raises(RecipeError) as err:
        from_dict(mapping)
    msg = str(err.value)
    assert ERROR_RE.match(msg) and msg.startswith("<dict>:") and part in msg, msg


def test_a_dict_that_contains_itself_is_an_error_not_a_hang():
    looped: dict = {"format": 1}
    looped["chain"] = [looped]
    with pytest.raises(RecipeError, match=r"^<dict>:1:1: error: lists and mappings are nested more than"):
        from_dict(looped)


def test_includes_in_text_and_dict_resolve_from_the_working_folder(write_recipe, tmp_path, monkeypatch):
    write_recipe("format: 1\nchain:\n  - {type: highpass, freq: 40}\nguard: {ceiling_dbfs: -1}\n", "lib/house.yaml")
    monkeypatch.chdir(tmp_path)
    text = "format: 1\ninclude: lib/house.yaml\nchain:\n  - {type: gain, gain_db: -2}\n"
    for recipe in (loads(text), from_dict({"format": 1, "include": "lib/house.yaml",
                                           "chain": [{"type": "gain", "gain_db": -2}]})):
        assert [s.kind for s in recipe.sections] == ["highpass", "gain"]
        assert recipe.includes == (os.path.join("lib", "house.yaml"),)
        assert recipe.guard.ceiling_dbfs == -1.0
    with pytest.raises(RecipeError, match=r"^<text>:2:10: error: included recipe 'nowhere.yaml' does not exist"):
        loads("format: 1\ninclude: nowhere.yaml\n")
