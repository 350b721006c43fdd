"""The report document: everything a batch's reports say, as JSON-safe data.

This is the only module of :mod:`chainrun.report` that reads the live
:class:`~chainrun.batch.BatchResult`; the console summary, the CSV and the HTML
page are drawn from the document alone, so a report can be drawn again from its
JSON. Field names are plain English and trade terms (dBFS, dBTP). dB values of
silence, which are minus infinity, are written as null.
"""
from __future__ import annotations

import math
import platform
import time
from typing import TYPE_CHECKING, Any

from ..version import __version__
from .. import meters as meters_module
from ..results import DELIVERED, STATUS_ORDER, FileResult
from ..text import clock, shown

if TYPE_CHECKING:
    from ..batch.run import BatchResult

__all__ = ["batch_dict", "files_document", "file_dict", "headline_fields", "with_pictures", "loudest", "VIEW_ONLY"]

# The meter figures every report shows, as (key, label, unit), used until chainrun.meters declares them.
_FALLBACK_HEADLINE = (
    ("peak_dbfs", "peak", "dBFS"),
    ("true_peak_dbtp", "true peak", "dBTP"),
    ("rms_dbfs", "RMS", "dBFS"),
    ("clipped_samples", "clipped", "samples"),
)

# Keys the HTML page needs that are not written to the JSON report (they hold the live batch's pictures).
VIEW_ONLY = ("outdir", "responses", "recipe_responses")


def _num(x: Any) -> Any:
    if isinstance(x, float) and not math.isfinite(x):
        return None
    return x


def loudest(reading, attr: str) -> float | None:
    """The largest of one meter figure (e.g. ``peak_dbfs``) over a reading's channels; None if none."""
    if reading is None:
        return None
    vals = [getattr(c, attr) for c in reading.channels if getattr(c, attr) is not None]
    return max(vals) if vals else None


def headline_fields() -> list[dict]:
    """The meter figures the reports show, in order: ``[{"key", "label", "unit"}, ...]``."""
    # transitional: chainrun.meters gains HEADLINE_FIELDS during the reshape; until then the local table
    fields = getattr(meters_module, "HEADLINE_FIELDS", _FALLBACK_HEADLINE)
    out = []
    for field in fields:
        key, label, unit = (field["key"], field["label"], field["unit"]) if isinstance(field, dict) else field
        out.append({"key": key, "label": label, "unit": unit})
    return out


def _meters_dict(reading, output_exists: bool = True) -> dict | None:
    """A meter reading as JSON, each clipped region also given as [start in seconds, length in samples] and
    as where it starts, ``h:mm:ss.mmm``. The meters of an output that was not delivered (rejected,
    failed, not rendered) keep their levels, the levels it would have had, but count no clipped samples
    (null): no output holds them."""
    if reading is None:
        return None
    d = reading.to_dict()
    for ch in d["channels"]:
        if not output_exists:
            ch.update(clipped_samples=None, clipped_region_count=None, clipped_regions=[])
        ch["clipped_regions_s"] = [[round(start / reading.rate, 6), length] for start, length in ch["clipped_regions"]]
        ch["clipped_regions_at"] = [clock(start, reading.rate) for start, _ in ch["clipped_regions"]]
    return d


def _metadata_dict(m: dict | None) -> dict | None:
    """What became of the input's metadata chunks or blocks, with the notes, as JSON-safe data."""
    if m is None:
        return None
    return {"container": m.get("container"), "items": [dict(i) for i in m.get("items") or []],
            "notes": [shown(n) for n in m.get("notes") or []], "changes": list(m.get("changes") or [])}


def file_dict(r: FileResult) -> dict:
    """One file's result as JSON-safe data."""
    s = r.source
    delivered = r.status in DELIVERED          # only a delivered file has an output whose clipping can be counted
    d = {
        "input": shown(r.input), "relpath": shown(r.relpath), "output": shown(r.output),
        "status": r.status, "message": shown(r.message),
        "rate_hz": s.rate if s else None, "channels": s.channels if s else None,
        "frames": s.frames if s else None, "duration_s": s.duration_s if s else None,
        "format": s.format if s else None, "subtype": s.subtype if s else None,
        "out_format": r.out_format, "out_subtype": r.out_subtype, "dither": r.dither if r.out_subtype else None,
        "over_db": _num(r.over_db), "trim_db": _num(r.trim_db), "gain_db": _num(r.gain_db),
        "clipped_by_chainrun": r.clipped_by_chainrun if delivered else None, "seconds": round(r.seconds, 4),
        "loudness_gain_db": _num(getattr(r, "loudness_gain_db", None)),
        "loudness_shortfall_lu": _num(getattr(r, "loudness_shortfall_lu", None)),
        "input_meters": _meters_dict(r.input_meters),
        "output_meters": _meters_dict(r.output_meters, delivered),
        "metadata": _metadata_dict(r.metadata),
    }
    d.update(r.extra)
    return d


def _policy_dict(policy) -> dict:
    return {"on_over": policy.on_over, "ceiling_dbfs": policy.ceiling_dbfs,
            "true_peak_ceiling_dbtp": policy.true_peak_ceiling_dbtp, "subtype": policy.subtype,
            "dither": policy.dither, "block_size": policy.block_size,
            "metadata": "keep" if getattr(policy, "metadata", True) else "drop",
            "loudness": getattr(policy, "loudness", False),
            "target_lufs": getattr(policy, "target_lufs", None),
            "loudness_link": getattr(policy, "loudness_link", "file")}


def _rates_list(designs: dict) -> list[dict]:
    return [{"rate_hz": rate, "usable": d.usable, "error": d.error,
             "chain": d.chain.to_dict() if d.chain else None,
             "assessment": d.assessment.to_dict() if d.assessment else None}
            for rate, d in sorted(designs.items())]


def _plan_part(b: BatchResult) -> dict:
    """A plan run's own keys: ``plan`` (its path) and ``recipes`` (each with its policy and its designs per rate);
    ``recipe``/``recipe_digest``/``policy``/``rates`` are then the first recipe's. Empty outside a plan."""
    if b.plan_path is None:
        return {}
    return {"plan": shown(b.plan_path), "recipes": [
        {"index": i, "name": r.name, "path": shown(r.path), "digest": r.digest, "recipe": r.to_dict(),
         "policy": _policy_dict(p), "rates": _rates_list(d),
         "files": sum(b.recipe_of.get(f.input) == i for f in b.results)}
        for i, (r, p, d) in enumerate(zip(b.recipes, b.policies, b.recipe_designs))]}


def _files(b: BatchResult) -> list[dict]:
    """Every file's dict; in a plan run each also names its recipe (``recipe_name``, ``recipe_path``)."""
    files = []
    for r in b.results:
        d = file_dict(r)
        if b.plan_path is not None:
            i = b.recipe_of.get(r.input)
            recipe = b.recipes[i] if i is not None else None
            d["recipe_index"] = i
            d["recipe_name"] = recipe.name if recipe else None
            d["recipe_path"] = shown(recipe.path) if recipe else None
        files.append(d)
    return files


def batch_dict(b: BatchResult, command: list[str] | None = None) -> dict:
    """The whole batch as JSON-safe data: recipe, designs per rate, files, summary (the JSON report)."""
    return {
        "chainrun_version": __version__,
        "created": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
        "host": {"python": platform.python_version(), "platform": platform.platform()},
        "command": command,
        "recipe": b.recipe.to_dict(),
        "recipe_digest": b.recipe.digest,
        "policy": _policy_dict(b.policy),
        "rates": _rates_list(b.designs),
        **_plan_part(b),
        "summary": _summary(b),
        "notes": list(b.notes),
        "headline_fields": headline_fields(),
        "files": _files(b),
    }


def _summary(b: BatchResult) -> dict:
    audio_s = sum(r.source.duration_s for r in b.results if r.source and r.status in DELIVERED)
    return {
        "files": len(b.results), **{s: b.count(s) for s in STATUS_ORDER},
        "audio_seconds_delivered": round(audio_s, 3), "wall_seconds": round(b.seconds, 3),
        "interrupted": b.interrupted,
    }


def files_document(b: BatchResult) -> dict:
    """The part of the document that the console summary and the stderr lines read: summary, files."""
    return {"summary": _summary(b), "headline_fields": headline_fields(), "files": _files(b)}


def with_pictures(document: dict, b: BatchResult) -> dict:
    """``document`` with what only the live batch holds, for the HTML page (keys :data:`VIEW_ONLY`).

    ``outdir`` is the batch's output folder; ``responses`` has, for each rate
    whose chain was designed and assessed, ``{"rate_hz", "svg", "error"}``: the
    response picture as inline SVG, or why it could not be drawn.
    """
    extra = {"outdir": b.outdir, "responses": _responses(b.recipe, b.designs)}
    if b.plan_path is not None:        # a plan: each recipe's pictures, as "recipe_responses"[index]
        extra["recipe_responses"] = [_responses(r, designs) for r, designs in zip(b.recipes, b.recipe_designs)]
    return {**document, **extra}


def _responses(recipe, designs: dict) -> list[dict]:
    """``{"rate_hz", "svg", "error"}`` for each designed rate of ``designs``."""
    from .pictures import picture_of

    responses = []
    for rate, d in sorted(designs.items()):
        if d.chain is None or d.assessment is None:
            continue
        svg = error = None
        try:
            svg = picture_of(recipe, d)
        except Exception as exc:   # a picture that cannot be drawn must not cost the report
            error = f"{type(exc).__name__}: {exc}"
        responses.append({"rate_hz": rate, "svg": svg, "error": error})
    return responses
