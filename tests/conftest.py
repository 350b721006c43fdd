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
