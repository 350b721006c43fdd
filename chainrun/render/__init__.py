"""Rendering one file: the policy, the filter, the three-stage pipeline, and :func:`render_file`.

``policy.py`` holds :class:`Policy` and the ``on_over`` classes, ``filter.py`` the filter with
its runtime guard, ``pipeline.py`` the reader / filter / writer threads, ``file.py``
:func:`render_file` and :func:`scan_file`.
"""
from .file import render_file, scan_file
from .policy import DEFAULT_BLOCK, MAX_BLOCK, MIN_BLOCK, Policy

__all__ = ["Policy", "DEFAULT_BLOCK", "MIN_BLOCK", "MAX_BLOCK", "render_file", "scan_file"]
