"""Rendering one file: the policy, the filter, the three-stage pipeline, and :func:`render_file`.

``policy.py`` holds :class:`Policy` and the ``on_over`` classes, ``filter.py`` the filter with
its runtime guard, ``pipeline.py`` the reader / filter / writer threads, ``file.py``
:func:`render_file` and :func:`scan_file`.
"""
from .file import render_file, scan_file
from .policy import DEFAULT_BLOCK, MAX_BLOCK, MIN_BLOCK, Policy

from ..audio.formats import output_format  # transitional re-export
from ..audio.quantise import Quantiser, seed_for  # transitional re-export
from ..audio.reader import probe  # transitional re-export
from ..audio.source import Source  # transitional re-export
from ..errors import AudioError  # transitional re-export
from ..fsutil import TEMP_TAG  # transitional re-export
from ..results import FileResult  # transitional re-export

__all__ = ["Policy", "DEFAULT_BLOCK", "MIN_BLOCK", "MAX_BLOCK", "render_file", "scan_file",
           "output_format", "Quantiser", "seed_for", "probe", "Source", "AudioError", "TEMP_TAG", "FileResult"]
