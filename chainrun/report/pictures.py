"""The batch's response pictures, drawn while the audio renders.

The report shows the chain's response at each designed rate (:mod:`chainrun.report.plot`).
Those pictures depend only on the recipe and its designs, so they are started before or while
the audio is filtered: in a forked child process (:func:`draw_pictures_aside`), so that
matplotlib's memory and its use of the GIL are never the renderer's, or where there is no
``fork`` in a thread (:func:`draw_pictures`). :func:`picture_of` gives the report each picture,
drawing it itself if the child failed.
"""
from __future__ import annotations

import json
import os
import signal
import sys
import tempfile

__all__ = ["draw_pictures", "draw_pictures_aside", "picture_of"]


def picture_of(batch, rate: int, d) -> str:
    """The response picture of ``rate`` as inline SVG: the one drawn aside for the batch
    (``batch.pictures``), or drawn here if there is none or it failed."""
    ready = getattr(batch, "pictures", {}).get(rate)
    if ready is not None:
        svg = ready.result()
        if svg is not None:
            return svg
    from .plot import response_svg

    return response_svg(batch.recipe, d.chain, d.assessment)


def draw_pictures(recipe, designs: dict) -> dict:
    """Start drawing the response picture of every designed rate in a background thread.

    Returns ``{rate: Future}``, to be set as ``BatchResult.pictures``; the report
    then waits for them instead of drawing them. The pictures depend only on the
    recipe and its designs, so they can be drawn while the audio is filtered.
    """
    from concurrent.futures import ThreadPoolExecutor

    def draw(d) -> str:
        # Imported here, in the drawing thread: matplotlib takes ~0.4 s to import, and a Ctrl-C landing in
        # the middle of that import in the main thread would surface as a RuntimeError from class creation.
        from .plot import response_svg

        return response_svg(recipe, d.chain, d.assessment)

    pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="chainrun-pictures")
    futures = {rate: pool.submit(draw, designs[rate]) for rate in _drawable(designs)}
    pool.shutdown(wait=False)
    return futures


def _drawable(designs: dict) -> list[int]:
    """The rates, in order, whose design has a chain and an assessment to draw."""
    return [rate for rate, d in sorted(designs.items()) if d.chain is not None and d.assessment is not None]


class _Aside:
    """Response pictures drawn by a forked child process while this one goes on.

    The child draws the SVG of every rate, writes them as one JSON object to an
    unnamed temporary file (so it never waits for the parent) and exits; it
    ignores SIGINT, so a Ctrl-C stops only the parent's rendering and the report
    still gets its pictures. If the child fails in any way, each picture's
    ``result()`` gives None and the report draws it itself.
    """

    def __init__(self, recipe, designs: dict, rates: list[int]):
        self._file = tempfile.TemporaryFile()
        pid = os.fork()
        if pid == 0:                                   # the child: draw, write, exit without cleanup
            code = 1
            try:
                signal.signal(signal.SIGINT, signal.SIG_IGN)
                from .plot import response_svg

                svgs = {str(r): response_svg(recipe, designs[r].chain, designs[r].assessment) for r in rates}
                self._file.write(json.dumps(svgs).encode("utf-8"))
                self._file.flush()
                code = 0
            except BaseException:                     # noqa: BLE001 - any failure: the parent draws instead
                pass
            finally:
                os._exit(code)
        self._pid = pid
        self._svgs: dict | None = None

    def svg(self, rate: int) -> str | None:
        """The picture of ``rate``; the first call waits for the child."""
        if self._svgs is None:
            self._svgs = self._collect()
        return self._svgs.get(str(rate))

    def _collect(self) -> dict:
        try:
            _, status = os.waitpid(self._pid, 0)
            if os.waitstatus_to_exitcode(status) != 0:
                return {}
            self._file.seek(0)
            return json.loads(self._file.read())
        except (OSError, ValueError):
            return {}
        finally:
            self._file.close()

    def picture(self, rate: int) -> "_AsidePicture":
        return _AsidePicture(self, rate)


class _AsidePicture:
    """One rate's picture from an :class:`_Aside`, with a Future's ``result()``."""

    def __init__(self, aside: _Aside, rate: int):
        self.aside, self.rate = aside, rate

    def result(self) -> str | None:
        return self.aside.svg(self.rate)


def draw_pictures_aside(recipe, designs: dict) -> dict:
    """Start drawing the response picture of every designed rate in a forked child process.

    A child process does not compete with this one's threads for the GIL, and
    matplotlib's memory is never added to this process's. Call it while this
    process has no threads of its own (a fork copies only the calling thread) and
    before a fork-based process pool exists. Returns ``{rate: picture}`` like
    :func:`draw_pictures`; a picture's ``result()`` is None if the child failed.
    Where ``os.fork`` is not available this is :func:`draw_pictures`.
    """
    if not hasattr(os, "fork") or not sys.platform.startswith("linux"):
        return draw_pictures(recipe, designs)
    rates = _drawable(designs)
    if not rates:
        return {}
    try:
        aside = _Aside(recipe, designs, rates)
    except OSError:            # no temporary file or no fork: the report draws the pictures itself
        return {}
    return {rate: aside.picture(rate) for rate in rates}
