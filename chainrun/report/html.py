"""The batch report as one self-contained HTML page.

:func:`render_html` turns the report document (:mod:`chainrun.report.document`)
into a single HTML5 file: inline CSS (``report.css``, package data), the
chain's response at each sample rate as inline SVG, and
nothing that a browser would fetch from anywhere (no scripts, fonts, images or
links outside the page). Every piece of user text (file names, messages,
recipe names and labels) is HTML-escaped; names holding bytes that are not
UTF-8 arrive as ``\\xNN`` text from the report and stay that way.

The page holds, in order: the summary of files by status; a table of every
file with those needing attention first (failed, rejected, clipped, then ok by
output peak loudest first, skipped last: :func:`chainrun.report.table.worst_first`);
the clipped regions of each file whose output has samples at full scale; the
response of the chain at each rate with a chain; and the recipe as resolved.
The table comes before the pictures so that what needs attention is at the
top of the page. Status is always written as a word; colour only repeats it. There
are no per-file pictures, so a batch of thousands of files stays a plain table.
"""
from __future__ import annotations

import shlex
from functools import lru_cache
from importlib import resources
from typing import Any, Iterable

from ..section_types import param_text
from ..results import CLIPPED, DELIVERED, STATUS_ORDER, STATUSES, css_name
from ..text import clock
from .cells import (clipped_total, db_cell, esc, gain_cell, loudness_cell, num_text, plain, seconds_text,
                    status_badge)
from .table import channels_of, duration_text, worst_first

__all__ = ["render_html"]

_MAX_OPEN_REGIONS = 20          # files whose clipped regions are shown unfolded; the rest fold away
# The statuses that need attention (those with a line on stderr), worst first.
_ATTENTION = tuple(s for s in STATUS_ORDER if STATUSES[s].error_word)


def _header(data: dict) -> list[str]:
    recipe = data.get("recipe") or {}
    name = recipe.get("name") or recipe.get("path") or "recipe"
    command = data.get("command")
    rows = [
        ("recipe", f'{esc(name)} <span class="sub">({esc(recipe.get("path"))})</span>'),
        ("recipe digest", f'<code>{esc(data.get("recipe_digest"))}</code>'),
    ] if not data.get("plan") else [
        ("plan", f'<code>{esc(data["plan"])}</code>'),
        ("recipes", "; ".join(f'{esc(r.get("name"))} <span class="sub">({esc(r.get("path"))})</span>'
                              for r in data.get("recipes") or [])),
    ]
    rows += [
        ("command", f"<code>{esc(shlex.join(map(plain, command)))}</code>" if command else '<span class="na">&ndash;</span>'),
    ]
    if data.get("outdir") is not None:
        rows.append(("output folder", f"<code>{esc(data['outdir'])}</code>"))
    pol = data.get("policy") or {}
    if pol and not data.get("plan"):          # a plan's policies are each recipe's, shown with it
        tp = pol.get("true_peak_ceiling_dbtp")
        rows.append(("policy", esc(
            f"on_over {pol.get('on_over')}, ceiling {pol.get('ceiling_dbfs')} dBFS"
            + (f", true-peak ceiling {tp} dBTP" if tp is not None else "")
            + f", output subtype {pol.get('subtype')}, dither {pol.get('dither')}, block {pol.get('block_size')} frames"
            + (f", loudness target {pol['target_lufs']} LUFS (gain per {pol.get('loudness_link') or 'file'})"
               if pol.get("target_lufs") is not None else ""))))
    rows.append(("written", esc(f"{data.get('created')} by chainrun {data.get('chainrun_version')}")))
    out = [f"<h1>chainrun report: {esc(name)}</h1>",
           '<p class="sub">Equaliser chain applied to a batch of audio files; files needing attention are listed first.</p>',
           '<dl class="meta">']
    out += [f"<dt>{k}</dt><dd>{v}</dd>" for k, v in rows]
    out.append("</dl>")
    return out


def _summary(data: dict, ordered: list[dict]) -> list[str]:
    summary = data.get("summary") or {}
    total = summary.get("files", len(ordered))
    counts = {s: sum(f.get("status") == s for f in ordered) for s in STATUS_ORDER}
    out = ['<h2 id="summary">Summary</h2>']
    if summary.get("interrupted"):
        out.append('<p class="banner"><strong>Interrupted.</strong> The batch was stopped; files it did not '
                   "deliver are listed as not rendered, and no partial output was left.</p>")
    attention = sum(counts[s] for s in _ATTENTION)
    if attention:
        out.append(f'<p class="banner"><strong>{attention} of {total} file(s) need attention</strong>: '
                   + ", ".join(f"{counts[s]} {s}" for s in _ATTENTION if counts[s])
                   + ". They head the table below.</p>")
    else:
        out.append(f'<p class="banner good"><strong>Nothing needs attention</strong>: every one of the {total} '
                   "file(s) is ok or was skipped as not audio.</p>")
    out.append('<ul class="counts">')
    for s in STATUS_ORDER:
        n = counts[s]
        c = css_name(s)
        inner = (f'<span class="n">{n}</span><span class="status st-{c}">{s}</span> '
                 f'<span class="what">{esc(STATUSES[s].meaning)}</span>')
        if n:
            out.append(f'<li><a href="#first-{c}" class="b-{c}">{inner}</a></li>')
        else:
            out.append(f'<li><span class="box zero b-{c}">{inner}</span></li>')
    out.append("</ul>")
    out.append(f"<p>{total} file(s); {seconds_text(summary.get('audio_seconds_delivered'))} of audio delivered in "
               f"{seconds_text(summary.get('wall_seconds'))}.</p>")
    notes = list(data.get("notes") or [])
    if notes:
        out.append("<p>Notes from the run:</p><ul>" + "".join(f"<li>{esc(n)}</li>" for n in notes) + "</ul>")
    return out


def _plan_views(data: dict, ordered: list[dict]):
    """For a plan's report: (title, anchor prefix, the data of one recipe as a one-recipe page sees it, its files)."""
    responses = data.get("recipe_responses")
    for entry in data.get("recipes") or []:
        i = entry.get("index")
        view = {**data, "recipe": entry.get("recipe"), "rates": entry.get("rates"), "policy": entry.get("policy")}
        view.pop("responses", None)
        if responses is not None and i is not None and i < len(responses):
            view["responses"] = responses[i]
        files = [f for f in ordered if f.get("recipe_index") == i]
        yield f"{entry.get('name')} ({entry.get('path')})", f"r{i}-", view, files


def _plan_responses(data: dict, ordered: list[dict]) -> list[str]:
    out = ['<h2 id="responses">Each recipe\'s chain at each sample rate</h2>']
    for title, prefix, view, files in _plan_views(data, ordered):
        out += _responses(view, files, prefix, heading=f"<h3>{esc(title)}</h3>")
    return out


def _plan_recipes(data: dict, ordered: list[dict]) -> list[str]:
    out = ['<h2 id="recipe">The recipes as resolved</h2>']
    for _, _, view, _ in _plan_views(data, ordered):
        out += _recipe(view, level=3)
    return out


def _responses(data: dict, ordered: list[dict], prefix: str = "", heading: str | None = None) -> list[str]:
    out = ['<h2 id="responses">The chain at each sample rate</h2>'] if heading is None else [heading]
    rates = data.get("rates") or []
    if not rates:
        out.append("<p>No audio file was read, so the chain was not designed at any rate.</p>")
        return out
    per_rate: dict[Any, int] = {}
    for f in ordered:
        if f.get("rate_hz") is not None:
            per_rate[f["rate_hz"]] = per_rate.get(f["rate_hz"], 0) + 1
    drawn = "responses" in data          # the pictures, when the page is drawn from the batch itself
    pictures = {p.get("rate_hz"): p for p in data.get("responses") or []}
    out.append("<p>Magnitude of the whole chain as designed at each sample rate in the batch, each section drawn "
               "faintly beneath, with the guard's figures written under each picture (<code>chainrun plot</code> "
               "draws the phase too).</p>")
    for entry in rates:
        rate = entry.get("rate_hz")
        n = per_rate.get(rate, 0)
        a = entry.get("assessment") or {}
        if entry.get("chain") is None or (drawn and entry.get("assessment") is None):
            out.append(f'<h3 id="{prefix}rate-{esc(rate)}">{esc(rate)} Hz: no chain</h3>')
            out.append(f'<p><span class="verdict-rejected">The recipe cannot be designed at {esc(rate)} Hz</span>, '
                       f"so the {n} file(s) at this rate were rejected: {esc(entry.get('error'))}</p>")
            continue
        accepted = bool(a.get("accepted"))
        verdict = ('<span class="verdict-accepted">accepted by the guard</span>' if accepted else
                   '<span class="verdict-rejected">REJECTED by the guard; not applied to any file</span>')
        out.append(f'<h3 id="{prefix}rate-{esc(rate)}">{esc(rate)} Hz: {verdict}</h3>')
        out.append("<figure>")
        picture = pictures.get(rate) or {}
        if not drawn:
            out.append("<p>(No picture: it is drawn from the designed chain, which only the batch itself holds.)</p>")
        elif picture.get("svg") is not None:
            out.append(picture["svg"])
        else:
            out.append(f'<p class="banner">The picture could not be drawn: {esc(picture.get("error"))}</p>')
        cap = [f"{n} file(s) at {esc(rate)} Hz.",
               f"Largest pole radius {esc(num_text(a.get('max_pole_radius'), '.9f'))};",
               f"max gain {esc(num_text(a.get('max_gain_db'), '+.2f'))} dB at {esc(num_text(a.get('max_gain_hz'), '.0f'))} Hz;",
               f"worst-case peak gain {esc(num_text(a.get('worst_case_peak_gain_db'), '+.2f', 'unbounded'))} dB "
               "(L1 norm of the impulse response)."]
        out.append(f"<figcaption>{' '.join(cap)}")
        problems = a.get("problems") or []
        if problems:
            out.append('<ul class="problems">')
            for p in problems:
                sev = plain(p.get("severity"))
                where = f"{esc(p.get('where'))}: " if p.get("where") else ""
                out.append(f'<li class="{esc(sev)}"><strong>{esc(sev)}</strong>: {where}{esc(p.get("message"))}</li>')
            out.append("</ul>")
        out.append("</figcaption></figure>")
    return out


def _files_table(ordered: list[dict], with_recipe: bool = False) -> list[str]:
    out = ['<h2 id="files">Files, those needing attention first</h2>',
           f"<p>{len(ordered)} file(s): failed, rejected and clipped first, then ok files by output peak, "
           "loudest first, and skipped files last. Levels are the loudest channel's.</p>",
           '<div class="wrap"><table id="file-table">',
           '<thead><tr><th class="num">#</th><th>file</th>' + ("<th>recipe</th>" if with_recipe else "") + '<th>status</th>'
           '<th class="num">input peak <span class="unit">dBFS</span></th>'
           '<th class="num">output peak <span class="unit">dBFS</span></th>'
           '<th class="num">output true peak <span class="unit">dBTP</span></th>'
           '<th class="num">output clipped <span class="unit">samples</span></th>'
           '<th class="num">input loudness <span class="unit">LUFS</span></th>'
           '<th class="num">output loudness <span class="unit">LUFS</span></th>'
           '<th class="num">loudness gain <span class="unit">dB</span></th><th class="num">rate <span class="unit">Hz'
           '</span></th><th class="num">channels</th><th class="num">duration</th><th>message</th></tr></thead>',
           "<tbody>"]
    seen: set[str] = set()
    for k, f in enumerate(ordered, 1):
        status = plain(f.get("status"))
        anchor = ""
        if status not in seen:
            seen.add(status)
            anchor = f' id="first-{esc(css_name(status))}"'
        om, im = f.get("output_meters"), f.get("input_meters")
        clipped = clipped_total(om)
        if clipped is None:
            why = "not measured" if om is None or status in DELIVERED else "no output: not delivered"
            clip_cell = f'<td class="num"><span class="na" title="{why}">&ndash;</span></td>'
        else:
            text = str(clipped or 0)
            flagged = _has_regions(f) or status == CLIPPED
            link = f'<a href="#clip-{k}" title="its clipped regions">{text}</a>' if flagged else text
            clip_cell = f'<td class="num">{link}</td>'
        title = f' title="{esc(f.get("input"))}"' if f.get("input") else ""
        out.append(
            f"<tr{anchor} class=\"row-{esc(css_name(status))}\"><td class=\"num\">{k}</td>"
            f"<td class=\"file\"{title}>{esc(f.get('relpath') or f.get('input'))}</td>"
            + (f'<td title="{esc(f.get("recipe_path"))}">{esc(f.get("recipe_name"))}</td>' if with_recipe else "")
            +             f"<td>{status_badge(status)}</td>"
            + db_cell(im, "peak_dbfs")
            + db_cell(om, "peak_dbfs")
            + db_cell(om, "true_peak_dbtp")
            + clip_cell
            + loudness_cell(im) + loudness_cell(om) + gain_cell(f.get("loudness_gain_db"))
            + "".join(f'<td class="num">{esc(num_text(f.get(k), ".0f"))}</td>' for k in ("rate_hz", "channels"))
            + f'<td class="num" title="{esc(num_text(f.get("duration_s"), ".3f"))} s">{esc(duration_text(f))}</td>'
            + f"<td class=\"msg\">{esc(f.get('message'))}{_metadata_line(f)}</td></tr>")
    out += ["</tbody></table></div>"]
    return out


def _metadata_line(f: dict) -> str:
    """One small line under a delivered file's message: how many metadata chunks were carried,
    rewritten and dropped (each named in its tooltip), and the notes on malformed ones."""
    m = f.get("metadata") or {}
    items = [i for i in m.get("items") or [] if i.get("action") != "rewritten" or i.get("chunk") == "bext"]
    if not items and not m.get("notes"):
        return ""
    parts = []
    for action in ("carried", "rewritten", "dropped"):
        names = [str(i.get("chunk") or i.get("block")).strip() for i in items if i.get("action") == action]
        if names:
            parts.append(f'<span title="{esc(", ".join(names))}">{len(names)} {action}</span>')
    notes = "".join(f"<br>{esc(n)}" for n in m.get("notes") or [])
    return f'<div class="sub">metadata: {", ".join(parts) or "none"}{notes}</div>'


def _has_regions(f: dict) -> bool:
    """A delivered output with samples at full scale (a rejected file's meters describe no file)."""
    return f.get("status") in DELIVERED and any(
        c.get("clipped_regions") or c.get("clipped_samples") for c in channels_of(f.get("output_meters")))


def _regions(ordered: list[dict]) -> list[str]:
    flagged = [(k, f) for k, f in enumerate(ordered, 1) if _has_regions(f) or f.get("status") == CLIPPED]
    out = ['<h2 id="clipping">Clipped regions</h2>']
    if not flagged:
        out.append("<p>No output holds a sample at full scale, and chainrun clipped none.</p>")
        return out
    out.append(f"<p>{len(flagged)} output file(s) hold samples at full scale or were clipped by chainrun. "
               "Each region is a run of consecutive "
               "clipped samples in one channel: where it starts (h:mm:ss.mmm from the start of the file, cut to the "
               "millisecond, and the frame number) and how many samples it lasts.</p>")
    for n, (k, f) in enumerate(flagged):
        om = f.get("output_meters") or {}
        rate = om.get("rate") or f.get("rate_hz")
        total = clipped_total(om) or 0
        opened = " open" if n < _MAX_OPEN_REGIONS else ""
        out.append(f'<details id="clip-{k}"{opened}><summary><strong>{esc(f.get("relpath") or f.get("input"))}</strong>'
                   f" &nbsp;{status_badge(f.get('status'))} &nbsp;{total} output sample(s) at full scale</summary>")
        rows = []
        more = 0
        for ch, c in enumerate(channels_of(om), 1):
            regions = c.get("clipped_regions") or []
            more += max(0, int(c.get("clipped_region_count") or len(regions)) - len(regions))
            for start, length in regions:
                t = clock(start, rate) if rate else "&ndash;"
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
        in_clipped = clipped_total(f.get("input_meters"))
        if in_clipped:
            out.append(f"<p>The input already held {in_clipped} sample(s) at full scale.</p>")
        out.append("</details>")
    return out


def _recipe(data: dict, level: int = 2) -> list[str]:
    recipe = data.get("recipe") or {}
    head = ('<h2 id="recipe">The recipe as resolved</h2>' if level == 2 else
            f"<h3>{esc(recipe.get('name'))}</h3>")
    out = [head,
           f"<p><strong>{esc(recipe.get('name'))}</strong> from <code>{esc(recipe.get('path'))}</code>"]
    includes = recipe.get("includes") or []
    if includes:
        out.append(" (its chain follows that of " + ", ".join(f"<code>{esc(i)}</code>" for i in includes) + ")")
    out.append(". Sections are applied top to bottom; the numbers match the pictures.</p>")
    out.append('<div class="wrap"><table><thead><tr><th class="num">#</th><th>type</th><th>parameters</th>'
               "<th>label</th><th>written at</th></tr></thead><tbody>")
    for k, s in enumerate(recipe.get("chain") or [], 1):
        out.append(f'<tr><td class="num">{k}</td><td>{esc(s.get("type"))}</td><td>{esc(param_text(s))}</td>'
                   f'<td>{esc(s.get("label", ""))}</td><td><code>{esc(s.get("from", ""))}</code></td></tr>')
    out.append("</tbody></table></div>")
    policy = data.get("policy") or {}
    for title, key in (("guard", "guard"), ("output", "output")):
        block = recipe.get(key) or {}
        out.append(f"<h{level + 1}>{title}</h{level + 1}><dl class=\"meta\">")
        for k, v in block.items():
            note = ""
            if k in policy and k != "dither" and policy[k] != v and not (k == "subtype" and v == "same"):
                note = f' <span class="sub">(this run used <code>{esc(policy[k])}</code>, from the command line)</span>'
            source = (recipe.get("guard_from") or {}).get(k) if key == "guard" else None
            if source:
                note += (' <span class="sub">(default)</span>' if source == "default" else
                         f' <span class="sub">(set at <code>{esc(source)}</code>)</span>')
            out.append(f"<dt>{esc(k)}</dt><dd><code>{esc('null' if v is None else v)}</code>{note}</dd>")
        out.append("</dl>")
    try:
        import yaml

        text = yaml.safe_dump(recipe, sort_keys=False, allow_unicode=True, width=100)
    except Exception:  # the table above already shows it
        text = None
    if text:
        out.append(f"<details><summary>The same recipe as YAML</summary><pre>{esc(text)}</pre></details>")
    return out


@lru_cache(maxsize=1)
def _css() -> str:
    """The page's style sheet (``report.css``, package data)."""
    return resources.files(__package__).joinpath("report.css").read_text(encoding="utf-8")


def _page(title: str, body: Iterable[str]) -> str:
    return "\n".join([
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        '<meta name="generator" content="chainrun">',
        f"<title>{title}</title>",
        f"<style>\n{_css()}</style>",
        "</head>",
        "<body>",
        *body,
        "</body>",
        "</html>",
        "",
    ])


def render_html(data: dict) -> str:
    """The batch report as one self-contained HTML5 page.

    Parameters
    ----------
    data
        The report document: ``document.batch_dict(batch, command)``, the same
        data as the JSON report. With ``document.with_pictures`` it also holds
        the output folder and the response picture of each rate; without them
        (a page drawn again from a JSON report) the page names the rates but
        draws no pictures.

    Returns
    -------
    str
        The page. It loads nothing: styles and pictures are inline.

    Examples
    --------
    >>> from chainrun.report.document import batch_dict, with_pictures       # doctest: +SKIP
    >>> page = render_html(with_pictures(batch_dict(result, argv), result))     # doctest: +SKIP
    """
    ordered = worst_first(data.get("files") or [])
    recipe = data.get("recipe") or {}
    body: list[str] = ["<header>"]
    body += _header(data)
    body.append('<nav><p><a href="#summary">Summary</a> &middot; <a href="#files">Files</a> &middot; '
                '<a href="#clipping">Clipped regions</a> &middot; <a href="#responses">Chain responses</a> &middot; '
                '<a href="#recipe">Recipe</a></p></nav>')
    body.append("</header><main>")
    body += _summary(data, ordered)
    plan = bool(data.get("plan"))
    body += _files_table(ordered, with_recipe=plan)
    body += _regions(ordered)
    body += _plan_responses(data, ordered) if plan else _responses(data, ordered)
    body += _plan_recipes(data, ordered) if plan else _recipe(data)
    body.append("</main>")
    body.append(f"<footer><p>Written by chainrun {esc(data.get('chainrun_version'))} on {esc(data.get('created'))}. "
                "This page is self-contained: it loads nothing from any network. The same figures are in "
                "the JSON and CSV reports written beside it.</p></footer>")
    return _page(f"chainrun report: {esc(recipe.get('name') or recipe.get('path') or 'batch')}", body)
