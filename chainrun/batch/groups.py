"""Linked loudness gain: one gain for the files of a folder, or of the whole batch (``loudness.link``).

A recipe whose ``loudness:`` block links its target over ``folder`` or ``batch`` has its files
rendered in two phases. Phase 1 (:func:`link_groups`, here, in the calling process, before any file
is rendered) reads, filters and meters every file of each group -- a folder is the parent folder of
the file's relative path in OUTDIR, the batch is every file of that recipe -- in the order of their
relative paths, and combines them with :func:`chainrun.render.loudness.group_of`: the group's
integrated loudness from all its gating blocks together, and its smallest headroom. Phase 2 is the
ordinary render, each file with its group, so every file of a group gets the same gain, and the
balance between them is kept.

Resuming: a group any of whose files is to be rendered is measured whole again, files delivered
by an earlier run included; those are kept as they are. If the group changed since (a file added,
removed or rendered anew), the kept files' gain was decided on the earlier group; a note says so,
and ``--redo`` renders the whole group again.
"""
from __future__ import annotations

import os
from dataclasses import replace

from ..audio.reader import _why
from ..errors import AudioError
from ..render import MAX_BLOCK, MIN_BLOCK, Policy
from ..render.loudness import Group, group_of, measure_file
from .discover import Job

__all__ = ["group_key", "link_groups"]


def group_key(job: Job, policy: Policy) -> tuple[int, str] | None:
    """The linked group ``job`` belongs to: (its recipe, its folder or "" for the batch); None when not linked."""
    if policy.target_lufs is None or policy.loudness_link == "file":
        return None
    folder = os.path.dirname(job.relpath.replace(os.sep, "/")) if policy.loudness_link == "folder" else ""
    return job.recipe, folder


def link_groups(prep, todo, policies: list[Policy]) -> tuple[dict[str, Group], list[str]]:
    """Phase 1: measure every linked group that has a file in ``todo``; returns input path -> its Group, and notes.

    Parameters
    ----------
    prep : Prepared
        The batch (its ``work`` lists every file of every group, delivered ones included).
    todo : list of (Job, Source)
        The files to render in this run.
    policies : list of Policy
        One per recipe of the batch.

    Notes
    -----
    A file that cannot be measured (unreadable, changed, a runtime guard stop) is left out of its
    group, with a note; its render meets the same problem and fails it.
    """
    members: dict[tuple[int, str], list] = {}
    for job, src in prep.work:
        key = group_key(job, policies[job.recipe])
        if key is not None:
            members.setdefault(key, []).append((job, src))
    wanted = {group_key(job, policies[job.recipe]) for job, _ in todo} - {None}
    groups: dict[str, Group] = {}
    notes: list[str] = []
    todo_inputs = {job.input for job, _ in todo}
    for key in sorted(wanted):
        files = sorted(members[key], key=lambda js: js[0].relpath)
        policy = policies[key[0]]
        parts = []
        for job, src in files:
            design = prep.design_for(job, src.rate)
            p = policy
            if src.channels * p.block_size > MAX_BLOCK:       # memory stays bounded, as in the render
                p = replace(p, block_size=max(MIN_BLOCK, MAX_BLOCK // src.channels))
            try:
                parts.append(measure_file(src, design.chain.filters, design.assessment.peak_gain, p))
            except Exception as exc:     # the render meets it again and fails the file
                why = str(exc) if isinstance(exc, AudioError) else _why(exc)
                notes.append(f"{job.relpath}: left out of its loudness group: {why}")
        group = group_of(parts, policy.loudness_link)
        for job, _ in files:
            groups[job.input] = group
        kept = sum(job.input not in todo_inputs for job, _ in files)
        if kept:
            where = "the batch" if policy.loudness_link == "batch" else f"folder '{key[1] or '.'}'"
            notes.append(f"{where}: {kept} file(s) of its loudness group were delivered by an earlier run and kept; "
                         "the group was measured whole again for the others, so if it changed since, the kept "
                         "files' gain differs (use --redo to render the whole group again)")
    return groups, notes
