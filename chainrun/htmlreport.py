"""The batch report as one self-contained HTML page.

:func:`render_html` turns the report data (``report.batch_dict``) and the
:class:`~chainrun.batch.BatchResult` it came from into a single HTML5 file:
inline CSS, the chain's response at each sample rate as inline SVG, and
nothing that a browser would fetch from anywhere (no scripts, fonts, images or
links outside the page). Every piece of user text (file names, messages,
recipe names and labels) is HTML-escaped; names holding bytes that are not
UTF-8 arrive as ``\\xNN`` text from the report and stay that way.

The page holds, in order: the summary of files by status; a table of every
file with those needing attention first (failed, rejected, clipped, then ok by
output peak loudest first, skipped last: :func:`chainrun.report.worst_first`);
the clipped regions of each file whose output has samples at full scale; the
response of the chain at each rate with a chain; and the recipe as resolved.
The table comes before the pictures so that what needs attention is at the
top of the page. Status is always written as a word; colour only repeats it. There
are no per-file pictures, so a batch of thousands of files stays a plain table.
"""
from __future__ import annotations

import html
import json
import math
import os
import re
import shlex
import signal
import sys
import tempfile
from typing import Any, Iterable

from .batch import BatchResult
from .results import STATUS_ORDER, STATUSES

__all__ = ["render_html"]

_MAX_OPEN_REGIONS = 20          # files whose clipped regions are shown unfolded; the rest fold away

_CSS = """
:root { color-scheme: light; --ink: #1c1c1c; --muted: #555; --rule: #d9d9d9; --band: #f6f6f4; }
* { box-sizing: border-box; }
body { margin: 0; padding: 1.5rem clamp(1rem, 3vw, 2.5rem) 3rem; color: var(--ink); background: #fff;
       font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "Noto Sans", "DejaVu Sans", sans-serif; }
h1 { font-size: 1.55rem; margin: 0 0 .2rem; }
h2 { font-size: 1.2rem; margin: 2.2rem 0 .6rem; padding-top: .6rem; border-top: 2px solid var(--ink); }
h3 { font-size: 1rem; margin: 1.2rem 0 .4rem; }
p, dl { margin: .4rem 0; }
code, .mono { font-family: ui-monospace, "DejaVu Sans Mono", Menlo, Consolas, monospace; font-size: .9em; }
.sub { color: var(--muted); margin: 0 0 1rem; }
.meta { display: grid; grid-template-columns: max-content 1fr; gap: .15rem 1rem; font-size: .92rem; }
.meta dt { color: var(--muted); }
.meta dd { margin: 0; overflow-wrap: anywhere; }
.counts { display: grid; grid-template-columns: repeat(auto-fill, minmax(10.5rem, 1fr)); gap: .6rem;
          list-style: none; padding: 0; margin: .8rem 0; max-width: 70rem; }
.counts li a, .counts li span.box { display: block; height: 100%; padding: .45rem .8rem; border-radius: 4px;
       text-decoration: none; color: inherit; border: 1px solid var(--rule); border-left-width: 6px; }
.counts .what { display: block; font-size: .8rem; color: var(--muted); margin-top: .2rem; }
.counts .n { display: block; font-size: 1.5rem; font-weight: 700; font-variant-numeric: tabular-nums; }
.counts .zero { opacity: .55; }
.b-failed { border-left-color: #d55e00 !important; } .b-rejected { border-left-color: #cc79a7 !important; }
.b-clipped { border-left-color: #e69f00 !important; } .b-ok { border-left-color: #009e73 !important; }
.b-skipped { border-left-color: #8a8a8a !important; }
.banner { padding: .6rem .9rem; border-left: 6px solid #b34700; background: #fbeee6; margin: .8rem 0; }
.banner.good { border-left-color: #006e4f; background: #e6f4ee; }
.status { display: inline-block; padding: 0 .45rem; border-radius: 3px; font-weight: 700; white-space: nowrap;
          border: 1px solid; font-size: .9em; }
.st-failed   { color: #7a2e00; background: #fbe3d6; border-color: #d55e00; }
.st-rejected { color: #6b2c55; background: #f6e1ee; border-color: #cc79a7; }
.st-clipped  { color: #5c4000; background: #fdf0cf; border-color: #e69f00; }
.st-ok       { color: #00513a; background: #dff2ea; border-color: #009e73; }
.st-skipped  { color: #444;    background: #eeeeee; border-color: #8a8a8a; }
.verdict-accepted { color: #006e4f; font-weight: 700; }
.verdict-rejected { color: #b34700; font-weight: 700; }
figure { margin: 1rem 0 1.6rem; max-width: 1000px; }
figure svg.response { display: block; width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { font-size: .92rem; color: var(--muted); margin-top: .3rem; }
table { border-collapse: collapse; font-size: .9rem; }
th, td { padding: .28rem .6rem; border-bottom: 1px solid var(--rule); vertical-align: top; text-align: left; }
thead th { position: sticky; top: 0; background: #fff; border-bottom: 2px solid var(--ink); z-index: 1; }
tbody tr:nth-child(even) { background: var(--band); }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; }
td.num { white-space: nowrap; }
th .unit { display: block; font-weight: 400; color: var(--muted); font-size: .85em; }
#file-table { width: 100%; }
td.file { min-width: 13rem; max-width: 36rem; overflow-wrap: break-word; }
td.msg { min-width: 13rem; max-width: 36rem; overflow-wrap: break-word; }
.na { color: #888; }
.wrap { overflow-x: auto; max-width: 100%; }
details { margin: .35rem 0; }
summary { cursor: pointer; }
pre { background: var(--band); padding: .7rem .9rem; overflow-x: auto; font-size: .85rem; }
.problems { margin: .3rem 0 0 1.2rem; padding: 0; }
.problems li.error { color: #8a3600; }
footer { margin-top: 3rem; color: var(--muted); font-size: .85rem; }
@media print { thead th { position: static; } h2 { break-after: avoid; } figure { break-inside: avoid; } }
"""

_CONTROL = re.compile(r"[\x00-\x08\x0b-\x1f\x7f]")


def _text(value: Any) -> str:
    """Any value as text a UTF-8 file can hold: stray surrogates and control characters shown as escapes."""
    s = "" if value is None else str(value)
    try:
        s.encode("utf-8")
    except UnicodeEncodeError:
        try:
            s = s.encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")
        except UnicodeEncodeError:
            s = s.encode("utf-8", "backslashreplace").decode("utf-8")
    s = s.replace("\n", "\\n").replace("\t", "\\t")
    return _CONTROL.sub(lambda m: f"\\x{ord(m.group()):02x}", s)


def _e(value: Any) -> str:
    """Escaped for HTML text and attribute values."""
    return html.escape(_text(value), quote=True)


# --------------------------------------------------------------------------- numbers

def _channels(meters: dict | None) -> list[dict]:
    return list(meters.get("channels") or []) if meters else []


def _worst_db(meters: dict | None, key: str, linear: str) -> tuple[str, float | None]:
    """(state, value): state 'none' (not measured), 'silent' (-inf) or 'value'."""
    chans = _channels(meters)
    if not chans:
        return "none", None
    vals = [c.get(key) for c in chans if c.get(key) is not None]
    if vals:
        return "value", max(vals)
    if all(c.get(linear) is None for c in chans):
        return "none", None         # e.g. true peak not metered
    return "silent", None


def _db_cell(meters: dict | None, key: str, linear: str) -> str:
    state, value = _worst_db(meters, key, linear)
    if state == "none":
        return '<td class="num"><span class="na" title="not measured">&ndash;</span></td>'
    if state == "silent":
        return '<td class="num" title="silence">&minus;&infin;</td>'
    return f'<td class="num">{_fmt_db(value)}</td>'


def _fmt_db(x: float) -> str:
    if abs(x) < 0.005:
        x = 0.0
    return f"{x:+.2f}".replace("-", "&minus;")


def _clipped(meters: dict | None) -> int | None:
    chans = _channels(meters)
    return sum(int(c.get("clipped_samples") or 0) for c in chans) if chans else None


def _seconds(x: float | None) -> str:
    if x is None or not math.isfinite(x):
        return "&ndash;"
    return f"{x:.1f} s" if x >= 10 else f"{x:.3g} s"


# --------------------------------------------------------------------------- order

def _file_key(f: dict):

    peaks = [c.get("peak") or 0.0 for c in _channels(f.get("output_meters"))]
    return (STATUS_ORDER.get(f.get("status"), 9), -(max(peaks) if peaks else 0.0), f.get("relpath") or "")


def _ordered(data: dict, batch: BatchResult | None) -> list[dict]:
    """The report's files, worst first, in the order report.worst_first gives (CSV and console agree)."""
    files = list(data.get("files") or [])
    if batch is not None and len(batch.results) == len(files):
        from .report import worst_first

        index = {id(r): i for i, r in enumerate(batch.results)}
        return [files[index[id(r)]] for r in worst_first(batch.results)]
    return sorted(files, key=_file_key)


# --------------------------------------------------------------------------- parts

def _status(status: Any) -> str:
    s = _text(status)
    cls = s if s in STATUSES else "skipped"
    return f'<span class="status st-{cls}">{_e(s)}</span>'


def _header(data: dict, batch: BatchResult | None) -> list[str]:
    recipe = data.get("recipe") or {}
    name = recipe.get("name") or recipe.get("path") or "recipe"
    command = data.get("command")
    rows = [
        ("recipe", f'{_e(name)} <span class="sub">({_e(recipe.get("path"))})</span>'),
        ("recipe digest", f'<code>{_e(data.get("recipe_digest"))}</code>'),
        ("command", f"<code>{_e(shlex.join(map(_text, command)))}</code>" if command else '<span class="na">&ndash;</span>'),
    ]
    if batch is not None:
        rows.append(("output folder", f"<code>{_e(batch.outdir)}</code>"))
    pol = data.get("policy") or {}
    if pol:
        tp = pol.get("true_peak_ceiling_dbtp")
        rows.append(("policy", _e(
            f"on_over {pol.get('on_over')}, ceiling {pol.get('ceiling_dbfs')} dBFS"
            + (f", true-peak ceiling {tp} dBTP" if tp is not None else "")
            + f", output subtype {pol.get('subtype')}, dither {pol.get('dither')}, block {pol.get('block_size')} frames")))
    rows.append(("written", _e(f"{data.get('created')} by chainrun {data.get('chainrun_version')}")))
    out = [f"<h1>chainrun report: {_e(name)}</h1>",
           '<p class="sub">Equaliser chain applied to a batch of audio files; files needing attention are listed first.</p>',
           '<dl class="meta">']
    out += [f"<dt>{k}</dt><dd>{v}</dd>" for k, v in rows]
    out.append("</dl>")
    return out


def _summary(data: dict, ordered: list[dict], batch: BatchResult | None = None) -> list[str]:

    summary = data.get("summary") or {}
    total = summary.get("files", len(ordered))
    counts = {s: sum(f.get("status") == s for f in ordered) for s in STATUS_ORDER}
    out = ['<h2 id="summary">Summary</h2>']
    if summary.get("interrupted"):
        out.append('<p class="banner"><strong>Interrupted.</strong> The batch was stopped; files not yet rendered '
                   "are listed as failed, and no partial output was left.</p>")
    attention = counts["failed"] + counts["rejected"] + counts["clipped"]
    if attention:
        out.append(f'<p class="banner"><strong>{attention} of {total} file(s) need attention</strong>: '
                   + ", ".join(f"{counts[s]} {s}" for s in ("failed", "rejected", "clipped") if counts[s])
                   + ". They head the table below.</p>")
    else:
        out.append(f'<p class="banner good"><strong>Nothing needs attention</strong>: every one of the {total} '
                   "file(s) is ok or was skipped as not audio.</p>")
    out.append('<ul class="counts">')
    for s in STATUS_ORDER:
        n = counts[s]
        inner = (f'<span class="n">{n}</span><span class="status st-{s}">{s}</span> '
                 f'<span class="what">{_e(STATUSES[s].meaning)}</span>')
        if n:
            out.append(f'<li><a href="#first-{s}" class="b-{s}">{inner}</a></li>')
        else:
            out.append(f'<li><span class="box zero b-{s}">{inner}</span></li>')
    out.append("</ul>")
    out.append(f"<p>{total} file(s); {_seconds(summary.get('audio_seconds_delivered'))} of audio delivered in "
               f"{_seconds(summary.get('wall_seconds'))}.</p>")
    notes = list(data.get("notes") or (getattr(batch, "notes", None) or []))
    if notes:
        out.append("<p>Notes from the run:</p><ul>" + "".join(f"<li>{_e(n)}</li>" for n in notes) + "</ul>")
    return out


def _responses(data: dict, batch: BatchResult | None, ordered: list[dict]) -> list[str]:
    out = ['<h2 id="responses">The chain at each sample rate</h2>']
    rates = data.get("rates") or []
    if not rates:
        out.append("<p>No audio file was read, so the chain was not designed at any rate.</p>")
        return out
    per_rate: dict[Any, int] = {}
    for f in ordered:
        if f.get("rate_hz") is not None:
            per_rate[f["rate_hz"]] = per_rate.get(f["rate_hz"], 0) + 1
    designs = batch.designs if batch is not None else {}
    out.append("<p>Magnitude (top) and phase (below) of the whole chain as designed at each sample rate in the "
               "batch, each section drawn faintly beneath, with the guard's figures written under each picture.</p>")
    for entry in rates:
        rate = entry.get("rate_hz")
        n = per_rate.get(rate, 0)
        a = entry.get("assessment") or {}
        d = designs.get(rate)
        if entry.get("chain") is None or (d is not None and (d.chain is None or d.assessment is None)):
            out.append(f'<h3 id="rate-{_e(rate)}">{_e(rate)} Hz: no chain</h3>')
            out.append(f'<p><span class="verdict-rejected">The recipe cannot be designed at {_e(rate)} Hz</span>, '
                       f"so the {n} file(s) at this rate were rejected: {_e(entry.get('error'))}</p>")
            continue
        accepted = bool(a.get("accepted")) if a else bool(d is not None and d.assessment.accepted)
        verdict = ('<span class="verdict-accepted">accepted by the guard</span>' if accepted else
                   '<span class="verdict-rejected">REJECTED by the guard; not applied to any file</span>')
        out.append(f'<h3 id="rate-{_e(rate)}">{_e(rate)} Hz: {verdict}</h3>')
        out.append("<figure>")
        if d is None:
            out.append("<p>(No picture: it is drawn from the designed chain, which only the batch itself holds.)</p>")
        else:
            try:
                out.append(_picture(batch, rate, d))
            except Exception as exc:   # a picture that cannot be drawn must not cost the report
                out.append(f'<p class="banner">The picture could not be drawn: {_e(type(exc).__name__)}: '
                           f"{_e(exc)}</p>")
        cap = [f"{n} file(s) at {_e(rate)} Hz.",
               f"Largest pole radius {_e(_num(a.get('max_pole_radius'), '.9f'))};",
               f"max gain {_e(_num(a.get('max_gain_db'), '+.2f'))} dB at {_e(_num(a.get('max_gain_hz'), '.0f'))} Hz;",
               f"worst-case peak gain {_e(_num(a.get('worst_case_peak_gain_db'), '+.2f', 'unbounded'))} dB "
               "(L1 norm of the impulse response)."]
        out.append(f"<figcaption>{' '.join(cap)}")
        problems = a.get("problems") or []
        if problems:
            out.append('<ul class="problems">')
            for p in problems:
                sev = _text(p.get("severity"))
                where = f"{_e(p.get('where'))}: " if p.get("where") else ""
                out.append(f'<li class="{_e(sev)}"><strong>{_e(sev)}</strong>: {where}{_e(p.get("message"))}</li>')
            out.append("</ul>")
        out.append("</figcaption></figure>")
    return out


def _num(x: Any, fmt: str, none: str = "-") -> str:
    if x is None:
        return none
    try:
        return format(float(x), fmt)
    except (TypeError, ValueError):
        return str(x)


def _files_table(ordered: list[dict]) -> list[str]:
    out = ['<h2 id="files">Files, those needing attention first</h2>',
           f"<p>{len(ordered)} file(s): failed, rejected and clipped first, then ok files by output peak, "
           "loudest first, and skipped files last. Levels are the loudest channel's.</p>",
           '<div class="wrap"><table id="file-table">',
           '<thead><tr><th class="num">#</th><th>file</th><th>status</th>'
           '<th class="num">input peak <span class="unit">dBFS</span></th>'
           '<th class="num">output peak <span class="unit">dBFS</span></th>'
           '<th class="num">output true peak <span class="unit">dBTP</span></th>'
           '<th class="num">output clipped <span class="unit">samples</span></th><th>message</th></tr></thead>', "<tbody>"]
    seen: set[str] = set()
    for k, f in enumerate(ordered, 1):
        status = _text(f.get("status"))
        anchor = ""
        if status not in seen:
            seen.add(status)
            anchor = f' id="first-{_e(status)}"'
        om, im = f.get("output_meters"), f.get("input_meters")
        clipped = _clipped(om)
        if clipped is None:
            clip_cell = '<td class="num"><span class="na" title="not measured">&ndash;</span></td>'
        else:
            text = str(clipped or 0)
            flagged = _has_regions(f) or status == "clipped"
            link = f'<a href="#clip-{k}" title="its clipped regions">{text}</a>' if flagged else text
            clip_cell = f'<td class="num">{link}</td>'
        title = f' title="{_e(f.get("input"))}"' if f.get("input") else ""
        out.append(
            f"<tr{anchor} class=\"row-{_e(status)}\"><td class=\"num\">{k}</td>"
            f"<td class=\"file\"{title}>{_e(f.get('relpath') or f.get('input'))}</td>"
            f"<td>{_status(status)}</td>"
            + _db_cell(im, "peak_dbfs", "peak")
            + _db_cell(om, "peak_dbfs", "peak")
            + _db_cell(om, "true_peak_dbtp", "true_peak")
            + clip_cell
            + f"<td class=\"msg\">{_e(f.get('message'))}</td></tr>")
    out += ["</tbody></table></div>"]
    return out


def _has_regions(f: dict) -> bool:
    """A delivered output with samples at full scale (a rejected file's meters describe no file)."""
    return f.get("status") in ("ok", "clipped") and any(
        c.get("clipped_regions") or c.get("clipped_samples") for c in _channels(f.get("output_meters")))


def _regions(ordered: list[dict]) -> list[str]:
    flagged = [(k, f) for k, f in enumerate(ordered, 1) if _has_regions(f) or f.get("status") == "clipped"]
    out = ['<h2 id="clipping">Clipped regions</h2>']
    if not flagged:
        out.append("<p>No output holds a sample at full scale, and chainrun clipped none.</p>")
        return out
    out.append(f"<p>{len(flagged)} output file(s) hold samples at full scale or were clipped by chainrun. "
               "Each region is a run of consecutive "
               "clipped samples in one channel: where it starts (seconds from the start of the file, and the frame "
               "number) and how many samples it lasts.</p>")
    for n, (k, f) in enumerate(flagged):
        om = f.get("output_meters") or {}
        rate = om.get("rate") or f.get("rate_hz")
        total = _clipped(om) or 0
        opened = " open" if n < _MAX_OPEN_REGIONS else ""
        out.append(f'<details id="clip-{k}"{opened}><summary><strong>{_e(f.get("relpath") or f.get("input"))}</strong>'
                   f" &nbsp;{_status(f.get('status'))} &nbsp;{total} output sample(s) at full scale</summary>")
        rows = []
        more = 0
        for ch, c in enumerate(_channels(om), 1):
            regions = c.get("clipped_regions") or []
            more += max(0, int(c.get("clipped_region_count") or len(regions)) - len(regions))
            for start, length in regions:
                t = f"{start / rate:.6f} s" if rate else "&ndash;"
                dur = f"{1000.0 * length / rate:.3f} ms" if rate else "&ndash;"
                rows.append(f'<tr><td class="num">{ch}</td><td class="num">{t}</td><td class="num">{int(start)}</td>'
                            f'<td class="num">{int(length)}</td><td class="num">{dur}</td></tr>')
        by_us = int(f.get("clipped_by_chainrun") or 0)
        if by_us and not total:
            out.append(f"<p>chainrun hard-clipped {by_us} sample(s) at the ceiling, which lies below full scale; "
                       "the output meter lists regions only of samples at full scale, so none are listed.</p>")
        elif rows:
            out.append('<table><thead><tr><th class="num">channel</th><th class="num">starts at</th>'
                       '<th class="num">start frame</th><th class="num">length (samples)</th>'
                       '<th class="num">lasts</th></tr></thead><tbody>')
            out += rows
            out.append("</tbody></table>")
        elif total:
            out.append("<p>The meter counted the samples but kept no region list.</p>")
        if more:
            out.append(f"<p>{more} more region(s) not listed (the meter keeps the first ones of each channel).</p>")
        in_clipped = _clipped(f.get("input_meters"))
        if in_clipped:
            out.append(f"<p>The input already held {in_clipped} sample(s) at full scale.</p>")
        out.append("</details>")
    return out


def _param_text(section: dict) -> str:
    parts = []
    for key, value in section.items():
        if key in ("type", "label", "from"):
            continue
        if isinstance(value, (list, tuple)):
            value = "[" + ", ".join(f"{v:g}" if isinstance(v, float) else str(v) for v in value) + "]"
        elif isinstance(value, float):
            value = f"{value:g}"
        unit = {"freq": " Hz", "gain_db": " dB", "bw": " octaves"}.get(key, "")
        parts.append(f"{key} {value}{unit}")
    return ", ".join(parts)


def _recipe(data: dict) -> list[str]:
    recipe = data.get("recipe") or {}
    out = ['<h2 id="recipe">The recipe as resolved</h2>',
           f"<p><strong>{_e(recipe.get('name'))}</strong> from <code>{_e(recipe.get('path'))}</code>"]
    includes = recipe.get("includes") or []
    if includes:
        out.append(" (its chain follows that of " + ", ".join(f"<code>{_e(i)}</code>" for i in includes) + ")")
    out.append(". Sections are applied top to bottom; the numbers match the pictures.</p>")
    out.append('<div class="wrap"><table><thead><tr><th class="num">#</th><th>type</th><th>parameters</th>'
               "<th>label</th><th>written at</th></tr></thead><tbody>")
    for k, s in enumerate(recipe.get("chain") or [], 1):
        out.append(f'<tr><td class="num">{k}</td><td>{_e(s.get("type"))}</td><td>{_e(_param_text(s))}</td>'
                   f'<td>{_e(s.get("label", ""))}</td><td><code>{_e(s.get("from", ""))}</code></td></tr>')
    out.append("</tbody></table></div>")
    policy = data.get("policy") or {}
    for title, key in (("guard", "guard"), ("output", "output")):
        block = recipe.get(key) or {}
        out.append(f"<h3>{title}</h3><dl class=\"meta\">")
        for k, v in block.items():
            note = ""
            if k in policy and k != "dither" and policy[k] != v and not (k == "subtype" and v == "same"):
                note = f' <span class="sub">(this run used <code>{_e(policy[k])}</code>, from the command line)</span>'
            source = (recipe.get("guard_from") or {}).get(k) if key == "guard" else None
            if source:
                note += (' <span class="sub">(default)</span>' if source == "default" else
                         f' <span class="sub">(set at <code>{_e(source)}</code>)</span>')
            out.append(f"<dt>{_e(k)}</dt><dd><code>{_e('null' if v is None else v)}</code>{note}</dd>")
        out.append("</dl>")
    try:
        import yaml

        text = yaml.safe_dump(recipe, sort_keys=False, allow_unicode=True, width=100)
    except Exception:  # the table above already shows it
        text = None
    if text:
        out.append(f"<details><summary>The same recipe as YAML</summary><pre>{_e(text)}</pre></details>")
    return out


def _page(title: str, body: Iterable[str]) -> str:
    return "\n".join([
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        '<meta name="generator" content="chainrun">',
        f"<title>{title}</title>",
        f"<style>{_CSS}</style>",
        "</head>",
        "<body>",
        *body,
        "</body>",
        "</html>",
        "",
    ])


def _picture(batch: BatchResult, rate: int, d) -> str:
    ready = getattr(batch, "pictures", {}).get(rate)
    if ready is not None:
        svg = ready.result()
        if svg is not None:
            return svg
    from .plot import response_svg

    return response_svg(batch.recipe, d.chain, d.assessment)


def draw_pictures(recipe, designs: dict) -> dict:
    """Start drawing the response picture of every designed rate in a background thread.

    Returns ``{rate: Future}``, to be set as ``BatchResult.pictures``; the report
    then waits for them instead of drawing them. The pictures depend only on the
    recipe and its designs, so they can be drawn while the audio is filtered.
    """
    from concurrent.futures import ThreadPoolExecutor

    def draw(d) -> str:
        # Imported here, in the drawing thread: matplotlib takes ~0.4 s to import, and a Ctrl-C landing in
        # the middle of that import in the main thread would surface as a RuntimeError from class creation.
        from .plot import response_svg

        return response_svg(recipe, d.chain, d.assessment)

    pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="chainrun-pictures")
    futures = {rate: pool.submit(draw, designs[rate]) for rate in _drawable(designs)}
    pool.shutdown(wait=False)
    return futures


def _drawable(designs: dict) -> list[int]:
    """The rates, in order, whose design has a chain and an assessment to draw."""
    return [rate for rate, d in sorted(designs.items()) if d.chain is not None and d.assessment is not None]


class _Aside:
    """Response pictures drawn by a forked child process while this one goes on.

    The child draws the SVG of every rate, writes them as one JSON object to an
    unnamed temporary file (so it never waits for the parent) and exits; it
    ignores SIGINT, so a Ctrl-C stops only the parent's rendering and the report
    still gets its pictures. If the child fails in any way, each picture's
    ``result()`` gives None and the report draws it itself.
    """

    def __init__(self, recipe, designs: dict, rates: list[int]):
        self._file = tempfile.TemporaryFile()
        pid = os.fork()
        if pid == 0:                                   # the child: draw, write, exit without cleanup
            code = 1
            try:
                signal.signal(signal.SIGINT, signal.SIG_IGN)
                from .plot import response_svg

                svgs = {str(r): response_svg(recipe, designs[r].chain, designs[r].assessment) for r in rates}
                self._file.write(json.dumps(svgs).encode("utf-8"))
                self._file.flush()
                code = 0
            except BaseException:                     # noqa: BLE001 - any failure: the parent draws instead
                pass
            finally:
                os._exit(code)
        self._pid = pid
        self._svgs: dict | None = None

    def svg(self, rate: int) -> str | None:
        """The picture of ``rate``; the first call waits for the child."""
        if self._svgs is None:
            self._svgs = self._collect()
        return self._svgs.get(str(rate))

    def _collect(self) -> dict:
        try:
            _, status = os.waitpid(self._pid, 0)
            if os.waitstatus_to_exitcode(status) != 0:
                return {}
            self._file.seek(0)
            return json.loads(self._file.read())
        except (OSError, ValueError):
            return {}
        finally:
            self._file.close()

    def picture(self, rate: int) -> "_AsidePicture":
        return _AsidePicture(self, rate)


class _AsidePicture:
    """One rate's picture from an :class:`_Aside`, with a Future's ``result()``."""

    def __init__(self, aside: _Aside, rate: int):
        self.aside, self.rate = aside, rate

    def result(self) -> str | None:
        return self.aside.svg(self.rate)


def draw_pictures_aside(recipe, designs: dict) -> dict:
    """Start drawing the response picture of every designed rate in a forked child process.

    A child process does not compete with this one's threads for the GIL, and
    matplotlib's memory is never added to this process's. Call it while this
    process has no threads of its own (a fork copies only the calling thread) and
    before a fork-based process pool exists. Returns ``{rate: picture}`` like
    :func:`draw_pictures`; a picture's ``result()`` is None if the child failed.
    Where ``os.fork`` is not available this is :func:`draw_pictures`.
    """
    if not hasattr(os, "fork") or not sys.platform.startswith("linux"):
        return draw_pictures(recipe, designs)
    rates = _drawable(designs)
    if not rates:
        return {}
    try:
        aside = _Aside(recipe, designs, rates)
    except OSError:            # no temporary file or no fork: the report draws the pictures itself
        return {}
    return {rate: aside.picture(rate) for rate in rates}


def render_html(data: dict, batch: BatchResult | None = None) -> str:
    """The batch report as one self-contained HTML5 page.

    Parameters
    ----------
    data
        ``report.batch_dict(batch, command)``: the same data as the JSON report.
    batch
        The batch it came from; its designs give the response pictures (rates
        without a chain are named, not drawn) and its results the worst-first
        order. Without it the page has no pictures and orders files itself.

    Returns
    -------
    str
        The page. It loads nothing: styles and pictures are inline.

    Examples
    --------
    >>> from chainrun.report import batch_dict                    # doctest: +SKIP
    >>> page = render_html(batch_dict(result, argv), result)        # doctest: +SKIP
    """
    ordered = _ordered(data, batch)
    recipe = data.get("recipe") or {}
    body: list[str] = ["<header>"]
    body += _header(data, batch)
    body.append('<nav><p><a href="#summary">Summary</a> &middot; <a href="#files">Files</a> &middot; '
                '<a href="#clipping">Clipped regions</a> &middot; <a href="#responses">Chain responses</a> &middot; '
                '<a href="#recipe">Recipe</a></p></nav>')
    body.append("</header><main>")
    body += _summary(data, ordered, batch)
    body += _files_table(ordered)
    body += _regions(ordered)
    body += _responses(data, batch, ordered)
    body += _recipe(data)
    body.append("</main>")
    body.append(f"<footer><p>Written by chainrun {_e(data.get('chainrun_version'))} on {_e(data.get('created'))}. "
                "This page is self-contained: it loads nothing from any network. The same figures are in "
                "the JSON and CSV reports written beside it.</p></footer>")
    return _page(f"chainrun report: {_e(recipe.get('name') or recipe.get('path') or 'batch')}", body)
