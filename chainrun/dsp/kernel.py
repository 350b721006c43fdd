"""The one adapter to scipy's compiled sosfilt kernel: the filter without scipy.signal's import.

``from scipy.signal import sosfilt`` runs scipy.signal's package import (about 0.6 s and 75 MB,
benchmarks/RESULTS.md) for one compiled loop. :func:`sosfilt` loads that loop's extension module,
``scipy/signal/_sosfilt``, straight from its file (a few ms; the module registers itself under its
own name, so a later ``import scipy.signal`` finds it and loads nothing twice) and does around it
what scipy.signal.sosfilt does around it for float64: the same copies and layouts, so the output
is the same to the last bit (tests/unit/test_dsp.py compares the two). When the kernel cannot be
loaded or does not behave as expected on a small probe (another scipy layout or signature:
ImportError, AttributeError, OSError, TypeError, ValueError), scipy.signal.sosfilt itself is used.
"""
from __future__ import annotations

import importlib.machinery
import importlib.util
import os
import sys
import threading

import numpy as np

from . import compiled

__all__ = ["sosfilt", "kernel_loaded", "lfilter", "lfilter_squares", "sos2tf", "preload_kernels"]

_NAME = "scipy.signal._sosfilt"   # the module of the sosfilt kernel
_kernel = None          # the compiled kernel, once loaded; False when it cannot serve
_public = None          # scipy.signal.sosfilt, once imported (the fallback)
_linear = None          # scipy.signal._sigtools._linear_filter, once loaded; False when it cannot serve
_public_lfilter = None  # scipy.signal.lfilter, once imported (its fallback)
_lock = threading.Lock()   # the render pipeline's threads may ask first at the same time


def _extension(stem: str):
    """scipy.signal's compiled module ``stem`` (``_sosfilt``, ``_sigtools``), loaded from its file
    without running scipy.signal's package import; registered under its own name, so that a later
    ``import scipy.signal`` finds it and loads nothing twice."""
    name = f"scipy.signal.{stem}"
    module = sys.modules.get(name)
    if module is None:
        spec = importlib.util.find_spec("scipy")          # finds the package; runs none of its code
        if spec is None or not spec.submodule_search_locations:
            raise ImportError("scipy is not installed")
        folder = os.path.join(list(spec.submodule_search_locations)[0], "signal")
        for suffix in importlib.machinery.EXTENSION_SUFFIXES:
            path = os.path.join(folder, stem + suffix)
            if os.path.isfile(path):
                break
        else:
            raise ImportError(f"no compiled {stem} module in {folder}")
        loader = importlib.machinery.ExtensionFileLoader(name, path)
        module = importlib.util.module_from_spec(importlib.util.spec_from_file_location(name, path, loader=loader))
        loader.exec_module(module)
        sys.modules.setdefault(name, module)
    return module


def _load_kernel():
    """scipy.signal._sosfilt._sosfilt, loaded from its file without importing scipy.signal."""
    module = _extension("_sosfilt")
    kernel = module._sosfilt
    # Probe: one first-order row, y[n] = 0.5 x[n] + 0.25 x[n-1] + 0.5 y[n-1], state carried in and out.
    sos = np.array([[0.5, 0.25, 0.0, 1.0, -0.5, 0.0]])
    x = np.array([[1.0, 0.0, 2.0, 0.0]])
    zi = np.array([[[1.0, 0.0]]])
    kernel(sos, x, zi)
    if x.tolist() != [[1.5, 1.0, 1.5, 1.25]] or zi.tolist() != [[[0.625, 0.0]]]:
        raise ValueError("scipy's compiled sosfilt kernel did not give the expected result")
    return kernel


def _once(name: str, load):
    """The module-level ``name``, set by ``load()`` on first use (under the lock, as the render pipeline's
    threads may ask first at the same time); False for good when it cannot serve."""
    value = globals()[name]
    if value is None:
        with _lock:
            value = globals()[name]
            if value is None:
                try:
                    value = load()
                except (ImportError, AttributeError, OSError, TypeError, ValueError):
                    value = False
                globals()[name] = value
    return value


def _get_kernel():
    return _once("_kernel", lambda: _load_kernel())


def _get_linear():
    return _once("_linear", lambda: _load_linear())


def kernel_loaded() -> bool:
    """Whether :func:`sosfilt` runs scipy's compiled kernel directly (False: scipy.signal.sosfilt)."""
    return bool(_get_kernel())


def _public_sosfilt(sos, x, zi):
    global _public
    if _public is None:
        from scipy.signal import sosfilt as public     # the fallback: scipy.signal's public function
        _public = public
    return _public(sos, x, axis=-1, zi=zi)


def sosfilt(sos: np.ndarray, x: np.ndarray, zi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``scipy.signal.sosfilt(sos, x, axis=-1, zi=zi)`` for float64: ``(y, zf)``.

    ``sos`` (S, 6) with ``a0 == 1``; ``x`` (..., N) float64, filtered along its last axis; ``zi``
    (S, ..., 2), the state carried in. Neither input is modified.
    """
    x = np.asarray(x)
    sos = np.asarray(sos)
    zi = np.asarray(zi)
    # the optional compiled loop (compiled.py) first: sosfilt's arithmetic, about half its time
    kernel = compiled.cascade_rows if compiled.cascade_rows is not None else _get_kernel()
    if not kernel or x.dtype != np.float64 or sos.dtype != np.float64 or zi.dtype != np.float64:
        return _public_sosfilt(sos, x, zi)
    if sos.ndim != 2 or sos.shape[1] != 6 or not np.all(sos[:, 3] == 1):
        raise ValueError("sos must have shape (n_sections, 6) with sos[:, 3] all ones")
    n_sections = sos.shape[0]
    if zi.shape != (n_sections,) + x.shape[:-1] + (2,):
        raise ValueError(f"zi must have shape {(n_sections,) + x.shape[:-1] + (2,)}, got {zi.shape}")
    # as scipy.signal.sosfilt does: the signals as C-ordered rows, the state as (signals, sections, 2),
    # a copy that the loop overwrites; scipy's kernel filters its own copy of the rows in place, the
    # compiled loop reads the rows and writes a new array
    x_shape, zi_shape = x.shape, np.moveaxis(zi, 0, -2).shape
    rows = np.reshape(x, (-1, x.shape[-1]))
    z = np.array(np.reshape(np.moveaxis(zi, 0, -2), (-1, n_sections, 2)), np.float64, order="C")
    if kernel is compiled.cascade_rows:
        rows = np.ascontiguousarray(rows)
        y = np.empty_like(rows)
        kernel(np.ascontiguousarray(sos), rows, z, y)
    else:
        y = np.array(rows, np.float64, order="C")
        kernel(np.ascontiguousarray(sos), y, z)
    return y.reshape(x_shape), np.moveaxis(z.reshape(zi_shape), -2, 0)


def _load_linear():
    """scipy.signal._sigtools._linear_filter (lfilter's compiled loop), checked on a small probe."""
    linear = _extension("_sigtools")._linear_filter
    # Probe: y[n] = x[n] + 0.5 y[n-1] over two rows, state carried in and out.
    y, zf = linear(np.array([1.0, 0.0]), np.array([1.0, -0.5]), np.array([[1.0, 0.0, 0.0], [0.0, 2.0, 0.0]]),
                   -1, np.array([[0.0], [1.0]]))
    if y.tolist() != [[1.0, 0.5, 0.25], [1.0, 2.5, 1.25]] or zf.tolist() != [[0.125], [0.625]]:
        raise ValueError("scipy's compiled linear filter did not give the expected result")
    return linear


def lfilter(b: np.ndarray, a: np.ndarray, x: np.ndarray, zi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``scipy.signal.lfilter(b, a, x, axis=-1, zi=zi)`` for float64 and ``len(a) > 1``: ``(y, zf)``.

    scipy.signal.lfilter hands exactly these arguments to its compiled loop on this path, so the
    output is the same to the last bit (tests/unit/test_dsp.py); the public function is the fallback.
    """
    global _public_lfilter
    b, a = np.atleast_1d(b), np.atleast_1d(a)
    if compiled.linear is not None:                # the optional compiled loop (compiled.py), when built
        done = compiled.linear(b, a, x, zi)
        if done is not None:
            return done
    linear = _get_linear()
    if linear and len(a) > 1 and b.ndim == a.ndim == 1 and all(
            np.asarray(v).dtype == np.float64 for v in (b, a, x, zi)):
        return linear(b, a, np.asarray(x), -1, np.asarray(zi))
    if _public_lfilter is None:
        from scipy.signal import lfilter as public        # the fallback: scipy.signal's public function
        _public_lfilter = public
    return _public_lfilter(b, a, x, axis=-1, zi=zi)


def lfilter_squares(b: np.ndarray, a: np.ndarray, x: np.ndarray, zi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(numpy.square(y), zf)`` for ``(y, zf) = lfilter(b, a, x, zi)``: the optional compiled loop
    squares each output as it goes (the same bits, one pass less over the block)."""
    if compiled.linear is not None:
        done = compiled.linear(np.atleast_1d(b), np.atleast_1d(a), x, zi, square=True)
        if done is not None:
            return done
    y, zf = lfilter(b, a, x, zi)
    return np.square(y, out=y), zf


def lfilter_squares_two(b: np.ndarray, a: np.ndarray, x1: np.ndarray, zi1: np.ndarray, x2: np.ndarray,
                        zi2: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """:func:`lfilter_squares` of two blocks of the same frames: ``(sq1, zf1, sq2, zf2)``, the same bits;
    the optional compiled loop runs the rows of both side by side (four in the time of two)."""
    if compiled.linear_two is not None:
        done = compiled.linear_two(np.atleast_1d(b), np.atleast_1d(a), x1, zi1, x2, zi2, square=True)
        if done is not None:
            return done
    return (*lfilter_squares(b, a, x1, zi1), *lfilter_squares(b, a, x2, zi2))


def sos2tf(sos: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``scipy.signal.sos2tf``: the cascade's numerator and denominator polynomials, float64."""
    sos = np.asarray(sos, dtype=np.float64)
    b = np.array([1.0])
    a = np.array([1.0])
    for row in sos:
        b = np.convolve(b, row[:3])
        a = np.convolve(a, row[3:])
    return b, a


def preload_kernels() -> None:
    """Load the compiled loops now (before worker processes fork, so that they share them): scipy's,
    unless chainrun's optional compiled loops (compiled.py) serve instead."""
    if compiled.cascade_rows is None:
        _get_kernel()
    if compiled.linear is None:
        _get_linear()
