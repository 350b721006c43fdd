"""Arguments given in the wrong place, refused in one line before any audio is touched.

An audio file where a run's recipe goes (``chainrun run take.wav recipe.yaml``), and a recipe
among a run's audio inputs (several recipes are a batch plan's job).
"""
from __future__ import annotations

import os
import stat

from ..errors import BatchError

__all__ = ["RECIPE_SUFFIXES", "refuse_audio_recipe", "refuse_recipe_inputs"]

RECIPE_SUFFIXES = (".yaml", ".yml")

# The first bytes of audio containers a recipe can never start with (a recipe is UTF-8 YAML).
_AUDIO_MAGIC = {b"RIFF": "WAV", b"RIFX": "WAV", b"RF64": "WAV", b"BW64": "WAV", b"riff": "W64",
                b"FORM": "AIFF", b"fLaC": "FLAC", b"OggS": "Ogg", b"caff": "CAF", b".snd": "AU"}


def refuse_audio_recipe(recipe: str | os.PathLike) -> None:
    """Refuse an audio file given where the recipe goes (``chainrun run take.wav recipe.yaml``).

    Raises
    ------
    BatchError
        One line, when the recipe path's first four bytes are an audio container's.
    """
    try:
        if not stat.S_ISREG(os.stat(recipe).st_mode):     # a pipe could wait for ever: the loader refuses it
            return
        with open(recipe, "rb") as fh:
            head = fh.read(4)
    except OSError:
        return                     # the recipe loader says what is wrong with it
    if head in _AUDIO_MAGIC:
        raise BatchError(f"{os.fspath(recipe)}: error: the first argument is audio ({_AUDIO_MAGIC[head]}), not a "
                         "recipe: chainrun run RECIPE INPUT...; no audio was touched")


def refuse_recipe_inputs(inputs: list[str]) -> None:
    """Refuse a recipe file named among the audio inputs (a second recipe is a plan's job), before any audio.

    Raises
    ------
    BatchError
        Naming the first input with a recipe suffix (.yaml, .yml) that is not a folder.
    """
    for arg in inputs:
        if os.fspath(arg).lower().endswith(RECIPE_SUFFIXES) and not os.path.isdir(arg):
            raise BatchError(f"{arg}: error: a recipe among the inputs; a run takes one recipe, then audio files "
                             "and folders. To give different inputs different recipes, write a batch plan and "
                             "run 'chainrun run --plan PLAN.yaml -o OUTDIR'; no audio was touched")
