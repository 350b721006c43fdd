"""Shared pytest helpers. Keep this file small and generic; add fixtures below."""
from __future__ import annotations

import signal
import textwrap
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]

# The stop-signal tests send SIGINT and SIGQUIT to the chainrun processes they start. A shell starts
# a background job (`pytest ... &`) with both ignored, the processes it starts inherit that, and
# chainrun keeps an ignored signal ignored (chainrun/interrupt.py), as a background program should:
# those tests would then see runs that cannot be stopped. The suite restores the usual dispositions
# for itself, and so for what it starts.
if signal.getsignal(signal.SIGINT) is signal.SIG_IGN:
    signal.signal(signal.SIGINT, signal.default_int_handler)
if hasattr(signal, "SIGQUIT") and signal.getsignal(signal.SIGQUIT) is signal.SIG_IGN:
    signal.signal(signal.SIGQUIT, signal.SIG_DFL)


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


# --------------------------------------------------------------------------- files, permissions, mounts


def _tree_hashes(folder) -> dict:
    import hashlib
    import os

    out = {}
    for root, dirs, files in os.walk(folder):
        for name in files:
            path = os.path.join(root, name)
            if os.path.islink(path):
                out[os.path.relpath(path, folder)] = "-> " + os.readlink(path)
                continue
            try:
                with open(path, "rb") as fh:
                    out[os.path.relpath(path, folder)] = hashlib.sha256(fh.read()).hexdigest()
            except OSError as exc:          # a pipe, or a file the test made unreadable
                out[os.path.relpath(path, folder)] = f"unreadable: {exc.errno}"
    return out


@pytest.fixture
def tree_hashes():
    """``tree_hashes(folder)`` -> {relative path: sha256} of every file under ``folder``.

    Links are listed by their target, not followed; files that cannot be read by their error number.
    Compare before and after a run to show that inputs are never modified.
    """
    return _tree_hashes


class _Caps:
    """The calling thread's capabilities (Linux capget/capset), to make root obey file permission bits."""

    DAC = (1 << 1) | (1 << 2)           # CAP_DAC_OVERRIDE, CAP_DAC_READ_SEARCH

    def __init__(self):
        import ctypes

        class Header(ctypes.Structure):
            _fields_ = [("version", ctypes.c_uint32), ("pid", ctypes.c_int)]

        class Data(ctypes.Structure):
            _fields_ = [("effective", ctypes.c_uint32), ("permitted", ctypes.c_uint32),
                        ("inheritable", ctypes.c_uint32)]

        self.ctypes, self.libc = ctypes, ctypes.CDLL(None, use_errno=True)
        self.header, self.data = Header(0x20080522, 0), (Data * 2)()       # _LINUX_CAPABILITY_VERSION_3
        if self.libc.capget(ctypes.byref(self.header), self.data) != 0:
            raise OSError(ctypes.get_errno(), "capget failed")
        self.saved = self.data[0].effective

    def set_effective(self, value: int) -> None:
        self.data[0].effective = value
        if self.libc.capset(self.ctypes.byref(self.header), self.data) != 0:
            raise OSError(self.ctypes.get_errno(), "capset failed")


@pytest.fixture
def permissions_apply():
    """A context manager under which permission bits stop this process, even when it runs as root.

    As root, ``chmod 000`` stops nothing: CAP_DAC_OVERRIDE and CAP_DAC_READ_SEARCH bypass the bits. Inside
    ``with permissions_apply():`` those two capabilities are dropped from the effective set of the calling
    thread (threads it starts inherit that), and restored on leaving. Not root: nothing to do. Skips the test
    if root's capabilities cannot be changed here. Use it around in-process runs (``--workers 1``).
    """
    import contextlib
    import os
    import sys

    @contextlib.contextmanager
    def _apply():
        if os.geteuid() != 0:
            yield
            return
        if not sys.platform.startswith("linux"):
            pytest.skip("running as root on a system without Linux capabilities: permission bits do not apply")
        try:
            caps = _Caps()
            caps.set_effective(caps.saved & ~_Caps.DAC)
        except (OSError, AttributeError) as exc:
            pytest.skip(f"running as root and cannot drop CAP_DAC_OVERRIDE here ({exc}); "
                        "permission bits do not apply to root")
        try:
            yield
        finally:
            caps.set_effective(caps.saved)

    return _apply


@pytest.fixture
def mounts():
    """Small mounts for fault tests, unmounted afterwards: ``mounts.tmpfs(path, size)`` and
    ``mounts.read_only(path)`` (a read-only bind mount of ``path`` onto itself).

    Both need root and a kernel that allows them (they do in a privileged container); otherwise
    they return False, and the test decides whether to skip or fall back to a simulation.
    """
    import os
    import subprocess

    made: list[str] = []

    class _Mounts:
        @staticmethod
        def _run(*argv) -> bool:
            try:
                return subprocess.run(list(argv), capture_output=True, timeout=30).returncode == 0
            except (OSError, subprocess.SubprocessError):
                return False

        def tmpfs(self, path, size: str) -> bool:
            os.makedirs(path, exist_ok=True)
            if os.geteuid() != 0 or not self._run("mount", "-t", "tmpfs", "-o", f"size={size},mode=0755",
                                                  "tmpfs", str(path)):
                return False
            made.append(str(path))
            return True

        def read_only(self, path) -> bool:
            if os.geteuid() != 0 or not self._run("mount", "--bind", str(path), str(path)):
                return False
            made.append(str(path))
            return self._run("mount", "-o", "remount,bind,ro", str(path), str(path))

    yield _Mounts()
    for path in reversed(made):
        if not _Mounts._run("umount", path):
            _Mounts._run("umount", "-l", path)


def pytest_collection_modifyitems(config, items):
    """The robustness and browser folders (real processes, faults, fuzzing, a browser) count as slow:
    ``pytest -m "not slow"`` is the quick loop of unit and contract tests; CI runs everything."""
    for item in items:
        parts = item.path.parts
        if "robustness" in parts or "browser" in parts:
            item.add_marker(pytest.mark.slow)
