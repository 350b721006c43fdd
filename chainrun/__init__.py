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

Importing the package loads numpy, soundfile and PyYAML only. scipy is imported on first use,
so that ``chainrun --help``, a usage error or a Ctrl-C at start-up answer at once: designing,
assessing and filtering a recipe without raw ``iir`` sections load only scipy's compiled sosfilt
kernel (:mod:`chainrun.dsp`); scipy.signal (about 0.6 s and 76 MB) is imported by raw ``iir``
sections, the meters that use it and the plots.
"""
from .version import __version__

from .design import Chain, design
from .guard import Assessment, assess
from .recipe import Recipe, RecipeError, from_dict, load, loads
from .results import FileResult
from .batch.run import BatchResult, run_batch
from .app import check, filter_file, plot, run, scan
from .report.write import write_reports

__all__ = ["__version__", "load", "loads", "from_dict", "design", "assess", "filter_file", "check", "run",
           "scan", "plot", "write_reports", "Recipe",
           "RecipeError", "Chain", "Assessment", "FileResult", "BatchResult",
           "run_batch"]     # run_batch: kept for callers of 0.1, see above
