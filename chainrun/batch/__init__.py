"""Batch: discover inputs, map them into OUTDIR, design per rate, render through an executor.

* :mod:`.discover` — find the audio under the inputs, map each file into OUTDIR (:class:`Job`, :class:`Plan`);
* :mod:`.plan` — probe the inputs, design and assess at every rate (:class:`Prepared`);
* :mod:`.outdir` — OUTDIR's lock, journal and leftovers (:func:`claim_outdir`);
* :mod:`.executors` — who renders the files: in this process, or one per worker process;
* :mod:`.run` — the run loop (:func:`execute`, :class:`BatchResult`).
"""
# transitional re-export: the names other modules and tests imported from chainrun.batch and
# chainrun.journal before the package existed; the final cleanup points them at the modules above.
# (Not the function discover: it would hide the module chainrun.batch.discover.)
from ..errors import BatchError
from ..results import FAILED, INTERRUPTED, MAC_METADATA, NOT_AUDIO, QUIET_SKIPS, FileResult
from .discover import AUDIO_EXTENSIONS, Job, Plan
from .outdir import (JOURNAL_NAME, LOCK_NAME, ForeignFileError, Journal, LockedError, OutdirLock, check_journal,
                     claim_outdir, clean_leftovers, fingerprint)
from .plan import Prepared, RateDesign, design_and_assess, design_fault, design_rates, prepare, probe_job
from .run import MAX_WORKERS, BatchResult, claimed, execute, job_key, run_batch

__all__ = [  # transitional re-export
    "BatchError", "FAILED", "INTERRUPTED", "MAC_METADATA", "NOT_AUDIO", "QUIET_SKIPS", "FileResult",
    "AUDIO_EXTENSIONS", "Job", "Plan",
    "JOURNAL_NAME", "LOCK_NAME", "ForeignFileError", "Journal", "LockedError", "OutdirLock", "check_journal",
    "claim_outdir", "clean_leftovers", "fingerprint",
    "Prepared", "RateDesign", "design_and_assess", "design_fault", "design_rates", "prepare", "probe_job",
    "MAX_WORKERS", "BatchResult", "claimed", "execute", "job_key", "run_batch",
]
