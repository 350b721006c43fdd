"""Batch: discover inputs, map them into OUTDIR, design per rate, render through an executor.

* :mod:`.discover` — find the audio under the inputs, map each file into OUTDIR (:class:`Job`, :class:`Plan`);
* :mod:`.plan` — probe the inputs, design and assess at every rate (:class:`Prepared`);
* :mod:`.outdir` — OUTDIR's lock, journal and leftovers (:func:`claim_outdir`);
* :mod:`.executors` — who renders the files: in this process, or one per worker process;
* :mod:`.run` — the run loop (:func:`execute`, :class:`BatchResult`).
"""
