"""chainrun: guarded IIR equaliser chains for folders of audio files.

The public Python API is small, and gives the same results as the command line:

- :func:`load` a recipe file into a :class:`Recipe` (:func:`loads` from text, :func:`from_dict`
  from plain data);
- :func:`design` it at a sample rate into a :class:`Chain`;
- :func:`assess` the chain with the recipe's guard into an :class:`Assessment`;
- :func:`filter_file`: one file, as ``chainrun run`` renders it;
- :func:`check` recipe files at several rates (what ``chainrun check`` prints);
- :func:`run` a recipe over files and folders into an output folder, with its reports
  (``chainrun run``; returns a ``RunOutcome`` holding the :class:`BatchResult`);
- :func:`scan` existing files into :class:`FileResult` s (``chainrun scan``);
- :func:`plot` a recipe's response at one rate to a PNG or SVG file (``chainrun plot``);
- :func:`write_reports` of a :class:`BatchResult` again, elsewhere.

``run_batch`` (the batch without reports or pictures) stays importable from here for callers of
chainrun 0.1; new code calls :func:`run`. Every other name in the package is private.

Importing the package loads almost nothing: each public name is imported when first used. scipy is imported on first use,
so that ``chainrun --help``, a usage error or a Ctrl-C at start-up answer at once: designing,
assessing and filtering a recipe without raw ``iir`` sections load only scipy's compiled sosfilt
kernel (:mod:`chainrun.dsp`); scipy.signal (about 0.6 s and 76 MB) is imported by raw ``iir``
sections, the meters that use it and the plots.
"""
from .version import __version__
# ``design`` names a module and the function in it: import it here, so that the name is the function
# (a submodule's first import would set the attribute to the module). A check designs anyway.
from .design import Chain, design

# Each public name and the module that holds it. They are imported on first use (PEP 562), so that
# ``import chainrun.cli`` and ``chainrun check`` load only what they use: a check never loads the
# audio, meter, render, batch or report floors.
_PUBLIC = {
    "Assessment": "guard", "assess": "guard",
    "Recipe": "recipe", "RecipeError": "recipe", "from_dict": "recipe", "load": "recipe", "loads": "recipe",
    "FileResult": "results",
    "BatchResult": "batch.run", "run_batch": "batch.run",
    "check": "app", "filter_file": "app", "plot": "app", "run": "app", "scan": "app",
    "write_reports": "report.write",
}

__all__ = ["__version__", "load", "loads", "from_dict", "design", "assess", "filter_file", "check", "run",
           "scan", "plot", "write_reports", "Recipe",
           "RecipeError", "Chain", "Assessment", "FileResult", "BatchResult",
           "run_batch"]     # run_batch: kept for callers of 0.1, see above


def __getattr__(name: str):
    module = _PUBLIC.get(name)
    if module is None:
        raise AttributeError(f"module 'chainrun' has no attribute {name!r}")
    import importlib
    value = getattr(importlib.import_module(f"{__name__}.{module}"), name)
    globals()[name] = value             # once found, an ordinary attribute
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
