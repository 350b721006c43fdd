"""chainrun: guarded IIR equaliser chains for folders of audio files.

The public Python API is small:

- :func:`load` a recipe file into a :class:`Recipe`;
- :func:`design` it at a sample rate into a :class:`Chain`;
- :func:`assess` the chain with the recipe's guard into an :class:`Assessment`;
- :func:`run_batch` to filter files and folders into an output folder.

Importing the package loads numpy, soundfile and PyYAML only. scipy (about 0.6 s and
76 MB) is imported by the functions that design, check, meter or filter, on first use,
so that ``chainrun --help``, a usage error or a Ctrl-C at start-up answer at once.
"""
__version__ = "0.1.0"

from .design import Chain, design
from .guard import Assessment, assess
from .recipe import Recipe, RecipeError, load
from .batch import run_batch

__all__ = ["__version__", "load", "design", "assess", "run_batch", "Recipe", "RecipeError", "Chain", "Assessment"]
