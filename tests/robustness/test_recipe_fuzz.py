"""Recipe fuzzing (issue #4): whatever bytes a recipe file holds, the loader answers with a valid Recipe
or one located RecipeError, never anything else.

Four generators feed ``chainrun.recipe.load`` through real files:

* structured YAML documents: random mappings, lists and scalars shaped like recipes (the real keys and
  section types, odd values, anchors and aliases), written in block and flow style;
* mutations of valid recipes (the repository's own recipes and a full one written here): tokens
  inserted, deleted and swapped, numbers and keys replaced, lines duplicated and moved;
* random bytes, bare and after a valid-looking first line;
* small include graphs: files including each other, themselves, missing or absolute paths, folders.

The property (CONVENTIONS.md, "every malformed recipe raises RecipeError with a location"):

* an error is a ``RecipeError`` whose text is one line, ``path:line:col: error: what; what is allowed``,
  with line and column from 1, pointing into a file that exists and at a line it has;
* a recipe that loads can be turned into the JSON report's recipe (no NaN, no infinity), and designing
  and assessing it at 8 kHz and 48 kHz (as a batch does, through ``batch.design_rates``) gives either a
  usable chain or a located one-line error for that rate, never an exception.

``max_examples`` is set on each test; together they run at least 2,000 examples (checked by the last
test of this file, which also writes the figures when ``CHAINRUN_FIGURES`` names a folder).
"""
from __future__ import annotations

import json
import os
import re
import string
from pathlib import Path

import pytest
import yaml
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from chainrun.batch.plan import design_rates
from chainrun.recipe import Recipe, RecipeError, load
from support import REPO

ERROR_RE = re.compile(r"^(?P<path>[^\n]+):(?P<line>\d+):(?P<col>\d+): (?P<kind>error|warning): (?P<msg>[^\n]+)$")
EXAMPLES = {"structured": 700, "mutated": 600, "bytes": 400, "includes": 300}
RAN = {k: 0 for k in EXAMPLES}
OUTCOMES = {"loaded": 0, "RecipeError": 0}
SETTINGS = dict(deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture,
                                                      HealthCheck.filter_too_much, HealthCheck.data_too_large])


def _lines_of(path: str) -> int:
    with open(path, "rb") as fh:
        return fh.read().count(b"\n") + 1


def check_load(path: Path) -> Recipe | None:
    """The property. Returns the recipe if it loaded, None if it was refused (correctly)."""
    try:
        recipe = load(path)
    except RecipeError as e:
        OUTCOMES["RecipeError"] += 1
        text = str(e)
        m = ERROR_RE.match(text)
        assert m and m["kind"] == "error", repr(text)
        assert e.line >= 1 and e.col >= 1, text
        assert os.path.exists(e.path), text               # it points into a file that exists ...
        if not os.path.isdir(e.path):
            assert e.line <= _lines_of(e.path) + 1, text  # ... and at a line that file has
        assert e.message and "Traceback" not in e.message
        return None
    OUTCOMES["loaded"] += 1
    assert recipe.sections
    # the JSON report embeds the resolved recipe: it must be plain, finite data
    json.dumps(recipe.to_dict(), allow_nan=False)
    assert re.fullmatch(r"[0-9a-f]{64}", recipe.digest)
    for rate, d in design_rates(recipe, {8000, 48000}).items():
        if d.error is not None:
            assert ERROR_RE.match(d.error), repr(d.error)
        else:
            assert d.chain.sos.shape[1] == 6 and d.assessment is not None
        if d.assessment is not None:
            for p in d.assessment.problems:
                assert ERROR_RE.match(str(p)), repr(str(p))
    return recipe


@pytest.fixture(scope="module")
def fuzz_dir(tmp_path_factory):
    d = tmp_path_factory.mktemp("fuzz")
    (d / "house.yaml").write_text("format: 1\nchain:\n  - {type: allpass, freq: 700, q: 0.7}\n")
    (d / "folder.yaml").mkdir()
    import shutil

    shutil.copytree(REPO / "recipes" / "house", d / "house")       # what the repository's recipes include
    return d


# =========================================================================== 1. structured documents

KEYS = ["format", "name", "notes", "include", "chain", "guard", "output", "type", "freq", "q", "bw", "gain_db",
        "slope", "order", "b", "a", "label", "max_gain_db", "pole_margin", "max_decay_s", "ceiling_dbfs",
        "true_peak_ceiling_dbtp", "on_over", "subtype", "dither", "from", "chian", "Freq", ""]
TYPES = ["highpass", "lowpass", "low_shelf", "high_shelf", "peak", "notch", "bandpass", "allpass", "gain", "iir",
         "peek", "HIGHPASS", ""]
WORDS = TYPES + ["same", "PCM_16", "PCM_24", "FLOAT", "ULAW", "auto", "tpdf", "none", "reject", "clip", "scale",
                 "house.yaml", "missing.yaml", "folder.yaml", "/etc/hostname", "../house.yaml", ".", "1e-6", "0x10",
                 "1_000", ".inf", "-.nan", "yes", "~", "null", "2024-05-01"]
NUMBERS = st.one_of(
    st.integers(-3, 12), st.integers(-10 ** 30, 10 ** 30),
    st.floats(allow_nan=True, allow_infinity=True), st.floats(-1e5, 1e5),
    st.sampled_from([0, -0.0, 1e-300, 5e-324, 1e300, 1.7976931348623157e308, 0.5, 1, 2, 20, 1000, 3999.99,
                     4000, 23999.9999, 24000, 96000, 1e-12, 0.001, 119.999, 120, 121]),
)
SCALARS = st.one_of(st.none(), st.booleans(), NUMBERS, st.sampled_from(WORDS), st.text(max_size=12))
VALUES = st.recursive(SCALARS, lambda inner: st.one_of(
    st.lists(inner, max_size=5),
    st.dictionaries(st.one_of(st.sampled_from(KEYS), st.text(string.ascii_lowercase + "_", max_size=8)), inner,
                    max_size=6)), max_leaves=20)
SECTION = st.fixed_dictionaries({"type": st.sampled_from(TYPES)}, optional={
    k: st.one_of(NUMBERS, SCALARS, st.lists(NUMBERS, max_size=11), VALUES)
    for k in ("freq", "q", "bw", "gain_db", "slope", "order", "b", "a", "label", "extra")})
RECIPE_DOC = st.fixed_dictionaries({}, optional={
    "format": st.one_of(st.just(1), st.just(1.0), SCALARS),
    "name": SCALARS, "notes": SCALARS,
    "include": st.one_of(st.sampled_from(["house.yaml", "missing.yaml", "folder.yaml", "r.yaml", "/abs.yaml", "",
                                          "../x.yaml"]), st.lists(st.sampled_from(["house.yaml", "r.yaml"]),
                                                                  max_size=3), VALUES),
    "chain": st.one_of(st.lists(SECTION, max_size=6), VALUES),
    "guard": st.one_of(st.dictionaries(st.sampled_from(KEYS[17:24] + ["x"]), st.one_of(NUMBERS, SCALARS),
                                       max_size=7), VALUES),
    "output": st.one_of(st.dictionaries(st.sampled_from(["subtype", "dither", "rate"]), SCALARS, max_size=3),
                        VALUES),
    "extra": VALUES,
})


@st.composite
def structured(draw) -> bytes:
    doc = draw(st.one_of(RECIPE_DOC, RECIPE_DOC, RECIPE_DOC, VALUES))
    if isinstance(doc, dict) and doc.get("chain") and isinstance(doc["chain"], list) and draw(st.booleans()):
        doc["chain"].append(doc["chain"][0])          # the same object twice: safe_dump writes an anchor and alias
    style = draw(st.sampled_from([False, True, None]))
    try:
        text = yaml.safe_dump(doc, default_flow_style=style, allow_unicode=draw(st.booleans()), sort_keys=False,
                              width=draw(st.sampled_from([20, 80, 1000])))
    except (yaml.YAMLError, ValueError, OverflowError):
        text = repr(doc)
    return text.encode("utf-8", "surrogatepass")


@settings(max_examples=EXAMPLES["structured"], **SETTINGS)
@given(data=structured())
def test_structured_documents_load_or_raise_one_located_error(fuzz_dir, data):
    RAN["structured"] += 1
    path = fuzz_dir / "r.yaml"
    path.write_bytes(data)
    check_load(path)


# =========================================================================== 2. mutations of valid recipes

FULL = """\
format: 1
name: Saltings Hour, everything at once
include: house.yaml
notes: written for the fuzzer; every key and section type appears
chain:
  - {type: highpass, freq: 45, order: 4, label: wind}
  - {type: lowpass, freq: 16000, q: 0.7}
  - {type: notch, freq: 50, q: 30, label: generator hum}
  - {type: bandpass, freq: 500, bw: 2}
  - {type: allpass, freq: 900, q: 0.5}
  - {type: peak, freq: 3000, gain_db: 2.5, bw: 0.7}
  - {type: low_shelf, freq: 120, gain_db: -3, slope: 1}
  - {type: high_shelf, freq: 9000, gain_db: 1, order: 1}
  - &last {type: iir, b: [0.5, 0.25], a: [1, -0.5]}
  - type: gain
    gain_db: -1.5
guard:
  max_gain_db: 24
  pole_margin: 1.0e-6
  max_decay_s: 5
  ceiling_dbfs: -1.0
  true_peak_ceiling_dbtp: -1.0
  on_over: scale
output:
  subtype: PCM_24
  dither: tpdf
"""
BASES = [FULL] + [p.read_text() for p in sorted((REPO / "recipes").glob("*.yaml"))]
TOKENS = [":", ": ", "- ", "[", "]", "{", "}", ",", "&a ", "*a", "*last", "<<: *last", "!", "!!str ", "!!int ",
          "!!python/object:os.system ", "!!python/name:os.system ", "!!binary ", "!!set ", "!foo ", "#", "'", '"',
          "\n", "  ", "\t", "\x00", "\x1b", "\u2028", "\ufeff", "é", "---\n", "...\n", "%YAML 1.1\n", "? ", "|",
          ">", "@", "`", "~", "null", "yes", "no", ".inf", "-.inf", ".nan", "0", "-0", "-1", "1e999", "1e-999",
          "1e-6", "5e-324", "0x1F", "0o17", "1_000", "2.5", "[]", "{}", "[[[[", "type", "freq", "q", "bw",
          "order", "gain_db", "slope", "include", "chain", "house.yaml", "r.yaml", "/abs.yaml", "folder.yaml",
          "99", "iir", "peak", "peek", "\r\n", "\\", "a: [1, 0]", "b: [0]", "format: 2"]


@st.composite
def mutated(draw) -> bytes:
    text = draw(st.sampled_from(BASES))
    for _ in range(draw(st.integers(1, 5))):
        kind = draw(st.sampled_from(["insert", "delete", "replace_word", "replace_number", "dup_line",
                                     "swap_lines", "indent", "raw_byte"]))
        pos = draw(st.integers(0, len(text)))
        lines = text.split("\n")
        i, j = draw(st.integers(0, len(lines) - 1)), draw(st.integers(0, len(lines) - 1))
        if kind == "insert":
            text = text[:pos] + draw(st.sampled_from(TOKENS)) + text[pos:]
        elif kind == "delete":
            text = text[:pos] + text[pos + draw(st.integers(1, 20)):]
        elif kind == "replace_word":
            words = re.findall(r"[A-Za-z_][\w.\-/]*", text) or ["format"]
            text = text.replace(draw(st.sampled_from(words)), draw(st.sampled_from(TOKENS + KEYS + TYPES)), 1)
        elif kind == "replace_number":
            numbers = re.findall(r"-?\d+(?:\.\d+)?(?:e-?\d+)?", text) or ["1"]
            new = draw(st.one_of(st.sampled_from(TOKENS[40:62]), NUMBERS.map(repr)))
            text = text.replace(draw(st.sampled_from(numbers)), new, 1)
        elif kind == "dup_line":
            lines.insert(i, lines[j])
            text = "\n".join(lines)
        elif kind == "swap_lines":
            lines[i], lines[j] = lines[j], lines[i]
            text = "\n".join(lines)
        elif kind == "indent":
            lines[i] = " " * draw(st.integers(0, 7)) + lines[i].lstrip()
            text = "\n".join(lines)
        else:
            lines[i] = lines[i] + "\udcff"           # a byte that is not UTF-8
            text = "\n".join(lines)
    return text.encode("utf-8", "surrogateescape")


@settings(max_examples=EXAMPLES["mutated"], **SETTINGS)
@given(data=mutated())
def test_mutated_recipes_load_or_raise_one_located_error(fuzz_dir, data):
    RAN["mutated"] += 1
    path = fuzz_dir / "r.yaml"
    path.write_bytes(data)
    check_load(path)


def test_the_mutation_bases_are_valid(fuzz_dir):
    for text in BASES:
        path = fuzz_dir / "base.yaml"
        path.write_text(text)
        assert check_load(path) is not None


# =========================================================================== 3. random bytes


@settings(max_examples=EXAMPLES["bytes"], **SETTINGS)
@given(data=st.one_of(st.binary(max_size=400),
                      st.binary(max_size=200).map(lambda b: b"format: 1\nchain:\n  - " + b),
                      st.binary(max_size=200).map(lambda b: b"\xef\xbb\xbfformat: 1\n" + b)))
@example(data=b"\xff\xfe" + "format: 1".encode("utf-16-le"))          # a UTF-16 file
@example(data=b"format: 1\nchain:\n  - {type: gain, gain_db: 1}\n" + b"\x00" * 10)
@example(data=b"[" * 10_000)
@example(data=b"&a [*a]")
def test_random_bytes_load_or_raise_one_located_error(fuzz_dir, data):
    RAN["bytes"] += 1
    path = fuzz_dir / "r.yaml"
    path.write_bytes(data)
    check_load(path)


# =========================================================================== 4. include graphs

NAMES = ["r.yaml", "a.yaml", "b.yaml", "sub/c.yaml"]
TARGETS = ["a.yaml", "b.yaml", "sub/c.yaml", "r.yaml", "missing.yaml", "folder.yaml", "/etc/hostname", "",
           "../a.yaml", "./b.yaml", "sub", "house.yaml"]
CHAINS = ["chain:\n  - {type: gain, gain_db: -1}\n", "chain: []\n", "", "chain:\n  - {type: peak, freq: 1000}\n",
          "chain:\n" + "  - {type: gain, gain_db: 0.1}\n" * 40]


@st.composite
def include_graph(draw) -> dict[str, str]:
    files = {}
    for name in NAMES[: draw(st.integers(1, len(NAMES)))]:
        head = draw(st.sampled_from(["format: 1\n", "format: 1\n", "format: 2\n", ""]))
        inc = draw(st.one_of(st.none(), st.sampled_from(TARGETS), st.lists(st.sampled_from(TARGETS), max_size=3)))
        include = "" if inc is None else f"include: {json.dumps(inc)}\n"
        files[name] = head + include + draw(st.sampled_from(CHAINS))
    return files


@settings(max_examples=EXAMPLES["includes"], **SETTINGS)
@given(files=include_graph())
def test_include_graphs_load_or_raise_one_located_error(fuzz_dir, files):
    RAN["includes"] += 1
    d = fuzz_dir / "graph"
    if d.exists():
        import shutil

        shutil.rmtree(d)
    (d / "sub").mkdir(parents=True)
    (d / "folder.yaml").mkdir()
    (d / "house.yaml").write_text("format: 1\nchain:\n  - {type: notch, freq: 50, q: 20}\n")
    for name, text in files.items():
        (d / name).write_text(text)
    recipe = check_load(d / "r.yaml")
    if recipe is not None:
        for inc in recipe.includes:
            assert os.path.isfile(inc)                          # only files that exist were read


# =========================================================================== regressions found by fuzzing

# Each of these came out of load() or the batch's design step as something other than a RecipeError
# (ZeroDivisionError, ValueError from scipy.signal.butter, OverflowError, numpy overflow) before the fixes
# in recipe.py and batch.design_rates.
FOUND = [
    ("shelf gain so small that A + 1/A rounds to 2",
     "format: 1\nchain:\n  - {type: low_shelf, freq: 1.0, gain_db: 5.960464477539063e-08, slope: 1.0}\n", None),
    ("subnormal frequency", "format: 1\nchain:\n  - {type: highpass, freq: 5e-324, order: 1}\n",
     "too low to design"),
    ("iir numerator huge against a[0]", "format: 1\nchain:\n  - {type: iir, b: [90167039.0], a: [1e-300]}\n",
     "times a[0]"),
    ("iir denominator huge against a[0]", "format: 1\nchain:\n  - {type: iir, b: [1.0], a: [1e-300, 179769314.0]}\n",
     "times a[0]"),
    ("iir numerator effectively zero", "format: 1\nchain:\n  - {type: iir, b: [1.0, 0.0], a: [100000000000000.0]}\n",
     "effectively zero"),
    ("bandwidth form right below Nyquist", "format: 1\nchain:\n  - {type: notch, freq: 23884.0, bw: 10.0}\n", None),
]


@pytest.mark.parametrize("text, part", [f[1:] for f in FOUND], ids=[f[0] for f in FOUND])
def test_regressions_found_by_fuzzing(fuzz_dir, text, part):
    path = fuzz_dir / "found.yaml"
    path.write_text(text)
    if part is None:
        check_load(path)                  # loads, and each rate gives a chain or a located error
    else:
        with pytest.raises(RecipeError, match=re.escape(part)) as info:
            load(path)
        assert ERROR_RE.match(str(info.value)) and info.value.line == 3


def test_bandwidth_form_right_below_nyquist_is_a_located_error_not_a_crash(fuzz_dir):
    # design.py: the cookbook's bandwidth form sinh(ln2/2 * bw * w0/sin(w0)) overflows as w0 nears pi;
    # the batch reports it at the section, one line, instead of failing with OverflowError
    path = fuzz_dir / "nyq.yaml"
    path.write_text("format: 1\nchain:\n  - {type: notch, freq: 23884.0, bw: 10.0}\n")
    d = design_rates(load(path), {48000})[48000]
    assert not d.usable
    assert d.error.startswith(f"{path}:3:") and "cannot be designed at 48000 Hz" in d.error, d.error


def test_at_least_2000_fuzz_examples_ran(tmp_path):
    ran = sum(RAN.values())
    if any(v == 0 for v in RAN.values()):
        pytest.skip("run the whole file to count the examples")
    figures = os.environ.get("CHAINRUN_FIGURES")
    if figures:
        os.makedirs(figures, exist_ok=True)
        with open(os.path.join(figures, "fuzz.json"), "w") as fh:
            json.dump({"examples": RAN, "total": ran, "outcomes": OUTCOMES}, fh, indent=2)
    assert ran >= 2000, RAN
    assert OUTCOMES["loaded"] > 0 and OUTCOMES["RecipeError"] > 0, OUTCOMES      # both sides were reached
