"""chainrun: guarded IIR equaliser chains for folders of audio files.

The public Python API is small:

- :func:`load` a recipe file into a :class:`Recipe`;
- :func:`design` it at a sample rate into a :class:`Chain`;
- :func:`assess` the chain with the recipe's guard into an :class:`Assessment`.
"""
__version__ = "0.1.0"

from .design import Chain, design
from .guard import Assessment, assess
from .recipe import Recipe, RecipeError, load

__all__ = ["__version__", "load", "design", "assess", "Recipe", "RecipeError", "Chain", "Assessment"]
