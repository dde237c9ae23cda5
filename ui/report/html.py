"""The report as one self-contained HTML page: summary first, figures (inline SVG),
the GUM budget, alarms, provenance, and the long per-change table last."""

from __future__ import annotations

import html
from typing import Any

from ui.report.summary import ReportSummary
from ui.report.tables import CHANGE_COLUMNS, budget_lines, cell, change_rows
from ui.version import platform_text

__all__ = ["NO_CLOSEUPS", "figure", "page"]

NO_CLOSEUPS = "<p>no load change found</p>"

_MAX_LISTED = 12  # readings and alarms listed on the first screen
_STYLE = (
    "body{font-family:sans-serif;max-width:1050px;margin:2em auto;color:#222}"
    "svg{max-width:100%;height:auto}"
    "table.grid{border-collapse:collapse;margin:0.5em 0}"
    "table.grid td,table.grid th{border:1px solid #bbb;padding:3px 6px;text-align:right}"
    # headers break between words only, never inside one
    "th{white-space:nowrap;word-break:keep-all;hyphens:none}"
    "table.facts th{text-align:left;padding-right:1em;vertical-align:top}"
    ".caution{color:#6d4c00}code{font-size:90%}pre{white-space:pre-wrap}"
)


def figure(svg: str) -> str:
    """One figure of the page."""
    return f"<figure>{svg}</figure>"


def _head(words: str, unit: str) -> str:
    return f"{html.escape(words)}<br>{html.escape(unit)}"


def page(
    s: ReportSummary,
    figures: dict[str, Any],
    replayed: Any,
    closeup_note: str,
) -> tuple[str, str, str]:
    """The page around its figures, so that each figure's SVG can be written as it is
    drawn: ``(text, text, text)`` to be written with the overview between the first two
    and the close-ups between the last two (each in ``<figure>``; `NO_CLOSEUPS` when
    there are none)."""
    e = html.escape
    d = replayed.data.description
    prof = replayed.profile
    readings = "".join(
        f"<li>{e(r.text)} (U, k = 2) from {r.t_start_s:.3f} s"
        + (f", settled in {r.settle_ms:.1f} ms" if r.settle_ms else ", not settled")
        + "</li>"
        for r in s.readings[:_MAX_LISTED]
    )
    if len(s.readings) > _MAX_LISTED:
        readings += f"<li>… {len(s.readings) - _MAX_LISTED} more in the table at the end</li>"
    alarms = "".join(
        f"<li>{e(a['event'])} at {a['time_s']:.4f} s ({e(a['clock'])} clock): "
        f"{e(a['message'])}</li>"
        for a in figures["alarms"][:_MAX_LISTED]
    )
    if len(figures["alarms"]) > _MAX_LISTED:
        alarms += f"<li>… {len(figures['alarms']) - _MAX_LISTED} more</li>"
    closing = replayed.data.closing
    hashes = "".join(
        f"<li><code>{e(name)}</code>: {entry['records']} records, SHA-256 "
        f"<code>{entry['sha256']}</code></li>"
        for name, entry in (closing or {}).get("streams", {}).items()
    )
    libraries = ", ".join(f"{k} {v}" for k, v in (d.get("libraries") or {}).items())
    libraries = "; ".join(x for x in (libraries, platform_text(d)) if x)
    head = "".join(f"<th>{_head(w, u)}</th>" for _, w, u, _ in CHANGE_COLUMNS)
    rows = "".join(
        "<tr>" + "".join(f"<td>{v}</td>" for v in row) + "</tr>"
        for row in change_rows(figures["changes"])
    )
    before = f"""
<h1>forcelens run report</h1>
<p class="caution">Force testing can hurt people: stay within the cell's rated capacity and
follow your laboratory's procedures and local codes. This report does not replace an
accredited calibration.</p>
<h2>Summary</h2>
<table class="facts">
<tr><th>run</th><td>{e(s.run_id)}: cell {e(s.cell)}, started {e(s.started_utc)} (UTC),
 {s.duration_s:.3f} s, {s.samples} samples</td></tr>
<tr><th>operator note</th><td>{e(s.note) or "—"}</td></tr>
<tr><th>readings</th><td><ul>{readings or "<li>no load change found</li>"}</ul></td></tr>
<tr><th>at the end</th><td>{e(s.final_state)}</td></tr>
<tr><th>alarms</th><td>{s.alarms}</td></tr>
<tr><th>verify</th><td>{e(s.verify)}</td></tr>
<tr><th>audit</th><td><code>{e(s.check)}</code> replays the run and compares every figure
 of this report (prints "identical")</td></tr>
</table>
<table class="grid"><tr><th>load<br>changes</th><th>median settle<br>ms</th>
<th>median k·x settle<br>ms</th><th>median k·x / estimate<br>×</th>
<th>largest overshoot<br>%</th></tr>
<tr><td>{s.changes}</td><td>{cell(s.median_settle_ms, ".2f")}</td>
<td>{cell(s.median_static_settle_ms, ".2f")}</td><td>{cell(s.median_ratio, ".1f")}</td>
<td>{cell(s.max_overshoot_pct, ".2f")}</td></tr></table>
<h2>Displacement and force</h2>
<p>Force with its expanded uncertainty band U = 2u_c (k = 2, about 95 %; u_c combines the
observer, the calibration and the resolution by the GUM law of propagation); the static
conversion k·x for comparison.</p>
"""
    between = f"""
<h2>Close-up of each load change</h2>
<p>Vertical scale on the arrival: the final value ± 6 settling bands (amber: ±2 % of the
step, never narrower than 2U; dashed: the settling time). {e(closeup_note)}</p>
"""
    after = f"""
<h2>Uncertainty of a settled reading</h2>
<p>GUM law of propagation (JCGM 100:2008) at the largest settled level, standard
uncertainties (k = 1) unless stated:</p>
<pre>{e(chr(10).join(budget_lines(figures["uncertainty"], s.calibration_stated)))}</pre>
<h2>Alarms</h2>
<ul>{alarms or "<li>none</li>"}</ul>
<h2>Provenance</h2>
<table class="facts">
<tr><th>profile</th><td>{e(prof.cell.source)}; calibrated
 {e(prof.cell.calibration_date or "never")}; SHA-256
 <code>{figures["profile_sha256"]}</code></td></tr>
<tr><th>plant</th><td>m = {prof.plant.mass_kg:.6g} kg, k = {prof.plant.stiffness_n_per_m:.6g}
 N/m, ζ = {prof.plant.damping_ratio:.4g}; sample rate
 {prof.acquisition.sample_rate_hz:g} Hz</td></tr>
<tr><th>software</th><td>recorded with forcelens {e(d["software_version"])}
 ({e(libraries or "library versions not recorded")}); this report made with
 {e(figures["software_version"])}</td></tr>
<tr><th>replayed estimates</th><td>SHA-256 <code>{figures["estimates_sha256"]}</code></td></tr>
</table>
<ul>{hashes or "<li>no closing record</li>"}</ul>
<p>Reproduce this report: <code>{e(s.reproduce)}</code> (the same files, byte for byte,
with the same software)<br>
Check it: <code>{e(s.check)}</code></p>
<h2>Every load change</h2>
<p>Settling band ±2 % of each step (common practice), never narrower than 2U; "settle" from
the start of the change, "settle50" from its 50 % crossing (IEEE Std 181).</p>
<table class="grid"><tr>{head}</tr>{rows}</table>
"""
    return (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
        f"<title>forcelens run report {e(s.run_id)}</title><style>{_STYLE}</style></head>"
        f"<body>{before}",
        between,
        f"{after}</body></html>\n",
    )
