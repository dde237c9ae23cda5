"""``forcelens report``: a self-contained HTML report of a run, a PDF, and its figures.

The report is written to ``<run>-report/`` beside the run (or ``--out``): ``report.html``
(plots embedded, readable without forcelens), ``report.pdf`` (Qt's PDF writer),
``figures.json`` (every number shown, for ``forcelens audit``) and ``plot.png``.
"""

from __future__ import annotations

import argparse
import base64
import html
import json
import shlex
from pathlib import Path
from typing import Any

from ui.outputs import add_force_option, claim_folder, replacing, write_text_atomic

__all__ = ["default_report_folder", "register"]


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "report",
        help="HTML and PDF report of a recorded run, with the figures an audit re-checks",
        description=(
            "Replay a run through the same pipeline as the live run and write a "
            "self-contained HTML report (plots of displacement and force ± U, the table of "
            "load changes, alarms, the profile and its provenance, the run's hashes, the "
            "software version and the command that reproduces it), a PDF of it, and "
            "figures.json for forcelens audit."
        ),
    )
    p.add_argument("run_folder", metavar="RUN", help="run folder")
    p.add_argument("--out", help="output folder (default: RUN-report beside the run)")
    add_force_option(p)
    p.set_defaults(run=run)


def default_report_folder(run_folder: Path) -> Path:
    """Where `report` writes and `audit` looks by default: ``<run>-report`` beside it."""
    run_folder = Path(run_folder).resolve()
    return run_folder.parent / f"{run_folder.name}-report"


def run(args: argparse.Namespace) -> int:
    from ui.figures import compute_figures, replay_run

    folder = Path(args.run_folder)
    out = Path(args.out) if args.out else default_report_folder(folder)
    names = ["report.html", "figures.json", "plot.png", "report.pdf"]
    replaced = claim_folder(out, names, inputs=[folder], force=args.force)
    from ui.progress import wanted

    with wanted():
        replayed = replay_run(folder)
    figures = compute_figures(replayed)
    out.mkdir(parents=True, exist_ok=True)
    command = f"forcelens report {shlex.quote(str(folder))}" + (
        f" --out {shlex.quote(str(args.out))}" if args.out else ""
    )
    figures["command"] = command
    text = json.dumps(figures, indent=2, ensure_ascii=False, allow_nan=False)
    write_text_atomic(out / "figures.json", text + "\n")
    plot = _plot(replayed, out / "plot.png")
    body = _body(replayed, figures, command)
    encoded = base64.b64encode(plot.read_bytes()).decode("ascii")
    page = _page(body.replace("{{PLOT}}", f"data:image/png;base64,{encoded}"))
    write_text_atomic(out / "report.html", page)
    written = ["report.html", "figures.json", "plot.png"]
    if _pdf(_page(body.replace("{{PLOT}}", "plot.png")), plot, out / "report.pdf"):
        written.append("report.pdf")
    print(f"wrote {', '.join(written)} to {out}")
    for note in replaced:
        print(note)
    return 0


def _plot(replayed: Any, path: Path) -> Path:
    import numpy as np

    from estimator.uncertainty import ForceUncertainty
    from ui.plots import RunTraces, render_run_png

    est = replayed.estimates
    x = np.asarray(replayed.data.samples["displacement_m"])
    k = replayed.profile.plant.stiffness_n_per_m
    return render_run_png(
        RunTraces(
            time_s=est["time_s"],
            displacement_m=x,
            force_n=est["force_n"],
            force_expanded_u_n=ForceUncertainty.from_profile(replayed.profile).expanded_n(
                est["force_n"], est["force_u_n"]
            ),
            static_force_n=k * x,
            title=f"run {replayed.data.description['run_id']}",
        ),
        path,
        size=(1400, 900),
    )


def _cell(value: Any, fmt: str) -> str:
    return "—" if value is None else format(value, fmt)


def _body(replayed: Any, figures: dict[str, Any], command: str) -> str:
    d = replayed.data.description
    closing = replayed.data.closing
    prof = replayed.profile
    e = html.escape
    rows = "".join(
        "<tr>"
        + "".join(
            f"<td>{_cell(c[key], fmt)}</td>"
            for key, fmt in (
                ("t_start_s", ".4f"),
                ("before_n", ".4g"),
                ("after_n", ".4g"),
                ("rise_ms", ".2f"),
                ("overshoot_pct", ".2f"),
                ("settle_ms", ".2f"),
                ("settle50_ms", ".2f"),
                ("static_settle_ms", ".2f"),
                ("ratio", ".1f"),
            )
        )
        + "</tr>"
        for c in figures["changes"]
    )
    alarms = "".join(
        f"<li>{e(a['event'])} at {a['time_s']:.4f} s ({e(a['clock'])} clock): "
        f"{e(a['message'])}</li>"
        for a in figures["alarms"]
    )
    status = "closed, " + closing["status"] if closing else "NOT closed (ended without closing)"
    hashes = "".join(
        f"<li><code>{e(name)}</code>: {entry['records']} records, SHA-256 "
        f"<code>{entry['sha256']}</code></li>"
        for name, entry in (closing or {}).get("streams", {}).items()
    )
    return f"""
<h1>forcelens run report</h1>
<p class="caution">Force testing can hurt people: stay within the cell's rated capacity and
follow your laboratory's procedures and local codes. This report does not replace an
accredited calibration.</p>
<table class="facts">
<tr><th>run</th><td>{e(d["run_id"])} ({e(status)})</td></tr>
<tr><th>started (UTC)</th><td>{e(d["started_utc"])}</td></tr>
<tr><th>operator note</th><td>{e(d["operator_note"])}</td></tr>
<tr><th>tags</th><td>{e(", ".join(d["tags"]))}</td></tr>
<tr><th>cell</th><td>{e(prof.cell.name)}</td></tr>
<tr><th>profile source</th><td>{e(prof.cell.source)}; calibrated
 {e(prof.cell.calibration_date or "never")}</td></tr>
<tr><th>plant</th><td>m = {prof.plant.mass_kg:.6g} kg, k = {prof.plant.stiffness_n_per_m:.6g}
 N/m, ζ = {prof.plant.damping_ratio:.4g}; sample rate
 {prof.acquisition.sample_rate_hz:g} Hz</td></tr>
<tr><th>software</th><td>recorded with {e(d["software_version"])}; this report made with
 {e(figures["software_version"])}</td></tr>
<tr><th>samples</th><td>{figures["samples"]}</td></tr>
</table>
<h2>Displacement and force</h2>
<p>Force with its expanded uncertainty band U = 2u_c (k = 2, about 95 %; u_c combines the
observer, the calibration and the resolution by the GUM law of propagation); the static
conversion k·x for comparison.</p>
<img alt="plots" src="{{{{PLOT}}}}">
<h2>Load changes</h2>
<p>Settling band ±2 % of each step (common practice), never narrower than 2U; "settle" from
the start of the change, "settle50" from its 50 % crossing (IEEE Std 181).</p>
<table class="grid"><tr><th>start s</th><th>from N</th><th>to N</th><th>rise ms</th>
<th>overshoot %</th><th>settle ms</th><th>settle50 ms</th><th>k·x settle ms</th>
<th>k·x / estimate</th></tr>{rows}</table>
<h2>Uncertainty of a settled reading</h2>
<p>GUM law of propagation (JCGM 100:2008) at the largest settled level, standard
uncertainties (k = 1) unless stated:</p>
<pre>{e(_budget_text(figures["uncertainty"]))}</pre>
<h2>Alarms</h2>
<ul>{alarms or "<li>none</li>"}</ul>
<h2>Provenance</h2>
<ul>{hashes or "<li>no closing record</li>"}</ul>
<p>Profile used: SHA-256 <code>{figures["profile_sha256"]}</code>. Replayed estimates: SHA-256
<code>{figures["estimates_sha256"]}</code>.</p>
<p>Reproduce this report with <code>{e(command)}</code>; check it with
<code>forcelens audit {e(command.split(" ", 2)[2])}</code>.</p>
"""


def _budget_text(u: dict[str, Any]) -> str:
    rows = [
        ("observer (noise, force model)", u["observer_n"]),
        ("calibration (stiffness)", u["calibration_n"]),
        ("resolution (one count, rectangular)", u["resolution_n"]),
        ("model (relative term)", u["model_n"]),
        ("combined u_c", u["combined_n"]),
        ("expanded U (k = 2, about 95 %)", u["expanded_n_k2"]),
    ]
    lines = [f"at F = {u['force_n']:.6g} N"]
    lines += [f"  {name:38s} {_cell(value, '.3g')} N" for name, value in rows]
    return "\n".join(lines)


def _page(body: str) -> str:
    return (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
        "<title>forcelens run report</title><style>"
        "body{font-family:sans-serif;max-width:1000px;margin:2em auto;color:#222}"
        "img{max-width:100%}table.grid{border-collapse:collapse}"
        "table.grid td,table.grid th{border:1px solid #bbb;padding:3px 6px;text-align:right}"
        "table.facts th{text-align:left;padding-right:1em}"
        ".caution{color:#6d4c00}code{font-size:90%}</style></head>"
        f"<body>{body}</body></html>\n"
    )


def _pdf(page: str, plot: Path, path: Path) -> bool:
    """Print the report to PDF with Qt's writer; False (and a note) when Qt cannot."""
    try:
        from pyqtgraph.Qt import QtCore, QtGui

        from ui.plots import _qt_app

        _qt_app()
        with replacing(path) as tmp:
            writer = QtGui.QPdfWriter(str(tmp))
            writer.setPageSize(QtGui.QPageSize(QtGui.QPageSize.PageSizeId.A4))
            writer.setResolution(150)
            doc = QtGui.QTextDocument()
            doc.addResource(
                QtGui.QTextDocument.ResourceType.ImageResource,
                QtCore.QUrl("plot.png"),
                QtGui.QImage(str(plot)).scaledToWidth(900),
            )
            doc.setHtml(page)
            doc.print_(writer)
            del writer  # closes the file
            if tmp.stat().st_size == 0:
                raise OSError("Qt wrote an empty file")
        return True
    except Exception as exc:  # PDF is optional: the HTML report stands on its own
        print(f"note: no PDF ({exc})")
        return False
