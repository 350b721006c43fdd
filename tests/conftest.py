"""Shared pytest helpers. Keep this file small and generic; add fixtures below."""
from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture
def repo_root() -> Path:
    """The repository root (the folder holding chainrun/, recipes/, tests/)."""
    return REPO


@pytest.fixture
def write_recipe(tmp_path):
    """Write a recipe file under ``tmp_path`` and return its path.

    ``write_recipe(text, name="recipe.yaml")``: ``str`` text is dedented and a
    leading newline dropped, so the first written line is line 1; ``bytes`` are
    written as they are. ``name`` may contain sub-folders.
    """

    def _write(text: str | bytes, name: str = "recipe.yaml") -> Path:
        path = tmp_path / name
        path.parent.mkdir(parents=True, exist_ok=True)
        if isinstance(text, bytes):
            path.write_bytes(text)
        else:
            path.write_text(textwrap.dedent(text).lstrip("\n"), encoding="utf-8")
        return path

    return _write


# --------------------------------------------------------------------------- audio files

_PCM_BITS = {"PCM_16": 16, "PCM_24": 24, "PCM_32": 32}


def pcm_codes(data, subtype: str):
    """Float samples (1.0 = full scale) -> integer codes of ``subtype``: round(x * 2**(bits-1)), clipped.

    A value ``k / 2**(bits-1)`` becomes code ``k`` exactly (libsndfile's own float->PCM conversion
    scales by ``2**(bits-1) - 1`` instead, so it cannot be used to write exact test codes).
    """
    import numpy as np

    bits = _PCM_BITS[subtype]
    scale = 2.0 ** (bits - 1)
    return np.clip(np.rint(np.asarray(data, dtype=np.float64) * scale), -scale, scale - 1).astype(np.int64)


@pytest.fixture
def write_audio(tmp_path):
    """Write an audio file under ``tmp_path`` from a numpy array; returns its path.

    ``write_audio(name, data, rate=48000, subtype="PCM_16", format=None)``

    ``data`` is (frames,) or (frames, channels). For PCM subtypes, float data is
    taken as 1.0 = full scale and stored as the codes :func:`pcm_codes` gives
    (so it reads back exactly as ``code / 2**(bits-1)``); integer data is taken
    as codes of that word length. FLOAT and DOUBLE store the values as they are
    (beyond +-1 too). ``format`` (WAV, FLAC, AIFF, ...) defaults to the suffix.
    ``name`` may contain sub-folders.
    """
    import numpy as np
    import soundfile as sf

    def _write(name, data, rate: int = 48000, subtype: str = "PCM_16", format: str | None = None) -> Path:
        path = tmp_path / name
        path.parent.mkdir(parents=True, exist_ok=True)
        data = np.asarray(data)
        if subtype in _PCM_BITS:
            codes = data.astype(np.int64) if data.dtype.kind in "iu" else pcm_codes(data, subtype)
            if subtype == "PCM_16":
                data = codes.astype(np.int16)
            elif subtype == "PCM_24":
                data = (codes << 8).astype(np.int32)      # libsndfile takes the top 24 bits of int32
            else:
                data = codes.astype(np.int32)
        elif subtype == "FLOAT":
            data = data.astype(np.float32)
        else:
            data = data.astype(np.float64)
        sf.write(str(path), data, rate, subtype=subtype, format=format)
        return path

    return _write


@pytest.fixture
def read_codes():
    """``read_codes(path)`` -> (array (frames, channels), soundfile info).

    PCM files come back as int64 codes of their own word length (PCM_16 read
    with dtype int16, PCM_24 as int32 shifted down by 8, PCM_32 as int32);
    FLOAT and DOUBLE files as float64 values.
    """
    import numpy as np
    import soundfile as sf

    def _read(path):
        info = sf.info(str(path))
        if info.subtype == "PCM_16":
            data, _ = sf.read(str(path), dtype="int16", always_2d=True)
        elif info.subtype in ("PCM_24", "PCM_32"):
            data, _ = sf.read(str(path), dtype="int32", always_2d=True)
            if info.subtype == "PCM_24":
                data = data >> 8
        else:
            data, _ = sf.read(str(path), dtype="float64", always_2d=True)
            return data, info
        return data.astype(np.int64), info

    return _read


@pytest.fixture
def run_cli(capsys):
    """Run ``chainrun.cli.main`` in-process: ``run_cli(*argv)`` -> (status, stdout, stderr).

    Fails the test if a traceback or an "internal error" reaches stderr, or if a
    Python warning (numpy, scipy) is raised on the way.
    """
    import warnings

    from chainrun.cli import main

    def _run(*argv):
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                status = main([str(a) for a in argv])
            except SystemExit as exc:       # pragma: no cover - main() turns these into a status
                status = exc.code
        out, err = capsys.readouterr()
        assert "Traceback" not in err and "internal error" not in err, err
        assert not caught, [str(w.message) for w in caught]
        return status, out, err

    return _run
