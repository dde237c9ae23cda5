"""``forcelens report``: a self-contained HTML report of a run, a PDF, and its figures.

The report is written to ``<run>-report/`` beside the run (or ``--out``): ``report.html``
(summary first, figures inline as SVG, readable without forcelens), ``report.pdf`` (a
multi-page A4 PDF drawn by matplotlib) and ``figures.json`` (every number shown, for
``forcelens audit``). The parts are in ``ui/report/``; no Qt is needed.
"""

from __future__ import annotations

import argparse
from collections.abc import Iterator
from pathlib import Path
from typing import Any, TextIO

from ui.outputs import add_force_option, claim_folder, replacing
from ui.unverified import add_unverified_option

__all__ = ["default_report_folder", "register"]


def register(subparsers: Any) -> None:
    from ui.input_paths import input_path

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
    p.add_argument("run_folder", metavar="RUN", type=input_path, help="run folder")
    p.add_argument(
        "--out", metavar="DIR", help="output folder (default: RUN-report beside the run)"
    )
    add_force_option(p)
    add_unverified_option(p)
    p.set_defaults(run=run)


def default_report_folder(run_folder: Path) -> Path:
    """Where `report` writes and `audit` looks by default: ``<run>-report`` beside it."""
    run_folder = Path(run_folder).resolve()
    return run_folder.parent / f"{run_folder.name}-report"


def run(args: argparse.Namespace) -> int:
    from ui.figures import replay_run
    from ui.progress import wanted
    from ui.unverified import check_verifiable

    folder = Path(args.run_folder)
    out = Path(args.out) if args.out else default_report_folder(folder)
    names = ["report.html", "figures.json", "report.pdf"]
    replaced = claim_folder(out, names, inputs=[folder], force=args.force)
    unverified = check_verifiable(folder, args.unverified)
    if unverified:
        print("UNVERIFIED run (--unverified): the report rests on what is left of it")
    with wanted():
        replayed = replay_run(folder)
    try:
        written = _write(replayed, folder, out)
    finally:
        replayed.close()
    print(f"wrote {', '.join(written)} to {out}")
    for note_line in replaced:
        print(note_line)
    return 0


def _write(replayed: Any, folder: Path, out: Path) -> list[str]:
    """Write figures.json, report.pdf and report.html; the names written, in that order."""
    import itertools

    from daq.runs import verify_run
    from estimator.uncertainty import ForceUncertainty
    from ui.figures import compute_figures
    from ui.figures_file import write_figures
    from ui.progress import bar
    from ui.report import plots
    from ui.report.html import NO_CLOSEUPS, figure, page
    from ui.report.pdf import write_pdf
    from ui.report.summary import summarise
    from ui.report.traces import expanded_u_floor, lines, rows_between

    figures = compute_figures(replayed)
    out.mkdir(parents=True, exist_ok=True)
    summary = summarise(replayed, figures, folder, out, verify_run(folder))
    figures["command"] = summary.reproduce
    write_figures(out / "figures.json", figures)
    budget = ForceUncertainty.from_profile(replayed.profile)
    changes = figures["changes"]
    shown = plots.closeup_changes(changes)
    note = (
        ""
        if len(shown) == len(changes)
        else f"The {len(shown)} largest of {len(changes)} load changes are shown; every one "
        "is in the table at the end."
    )

    def window(t_from: float, t_to: float) -> Any:
        lo, hi = rows_between(replayed, t_from, t_to)
        return lines(replayed, budget, lo, hi, plots.OVERVIEW_BINS)

    before, between, after = page(summary, figures, replayed, note)

    def drawn(html: TextIO) -> Iterator[Any]:
        """Each figure drawn, written into the page as SVG, given to the PDF, closed."""
        title = f"run {summary.run_id}: displacement and force ± U (k = 2)"
        whole = lines(replayed, budget, 0, replayed.rows, plots.OVERVIEW_BINS)
        floor = expanded_u_floor(replayed, budget)
        html.write(before)
        with bar(1 + (len(shown) + 5) // 6, "drawing", unit="figures") as done:
            for n, fig in enumerate(
                itertools.chain(
                    [plots.overview(whole, title)], plots.closeups(window, changes, floor)
                )
            ):
                try:
                    html.write(figure(plots.svg_text(fig)) + (between if n == 0 else ""))
                    yield fig
                finally:
                    plots.close(fig)
                done.update(1)
        html.write((NO_CLOSEUPS if not shown else "") + after)

    with (
        replacing(out / "report.html") as html_tmp,
        open(html_tmp, "w", encoding="utf-8") as html,
        replacing(out / "report.pdf") as pdf_tmp,
    ):
        write_pdf(pdf_tmp, summary, figures, drawn(html), _provenance(replayed, figures, summary))
    return ["report.html", "figures.json", "report.pdf"]


def _provenance(replayed: Any, figures: dict[str, Any], summary: Any) -> list[str]:
    """The provenance section as text lines, for the PDF."""
    d = replayed.data.description
    prof = replayed.profile
    from ui.version import platform_text

    libraries = ", ".join(f"{k} {v}" for k, v in (d.get("libraries") or {}).items())
    libraries = "; ".join(x for x in (libraries, platform_text(d)) if x)
    lines = [
        f"profile: {prof.cell.source}; calibrated {prof.cell.calibration_date or 'never'}",
        f"profile SHA-256 {figures['profile_sha256']}",
        f"plant: m = {prof.plant.mass_kg:.6g} kg, k = {prof.plant.stiffness_n_per_m:.6g} N/m, "
        f"ζ = {prof.plant.damping_ratio:.4g}; {prof.acquisition.sample_rate_hz:g} Hz",
        f"recorded with forcelens {d['software_version']} "
        f"({libraries or 'library versions not recorded'}); report made with "
        f"{figures['software_version']}",
        f"replayed estimates SHA-256 {figures['estimates_sha256']}",
    ]
    closing = replayed.data.closing or {}
    for name, entry in closing.get("streams", {}).items():
        lines.append(f"{name}: {entry['records']} records, SHA-256 {entry['sha256']}")
    lines += ["", "alarms:"]
    lines += [
        f"  {a['event']} at {a['time_s']:.4f} s ({a['clock']} clock): {a['message']}"
        for a in figures["alarms"]
    ] or ["  none"]
    return lines
