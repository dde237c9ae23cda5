"""The report as a multi-page A4 PDF drawn by matplotlib (PdfPages; no Qt): the summary,
the overview, the close-ups, then the budget, provenance and every load change as
monospaced text pages (a table never wraps inside a word)."""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import Any

from ui.report.summary import ReportSummary
from ui.report.tables import CHANGE_COLUMNS, budget_lines, cell, change_rows

__all__ = ["write_pdf"]

_A4 = (8.27, 11.69)  # inches
_LINES_PER_PAGE = 78
_WIDTH = 110  # characters a text line may take at the page's font size


def _text_pages(pdf: Any, plt: Any, title: str, lines: list[str]) -> None:
    import matplotlib

    for first in range(0, max(len(lines), 1), _LINES_PER_PAGE):
        chunk = [line[:_WIDTH] for line in lines[first : first + _LINES_PER_PAGE]]
        text = "\n".join(chunk)
        with matplotlib.rc_context(_CORE_FONTS if _in_core_fonts(title + text) else {}):
            fig = plt.figure(figsize=_A4)
            fig.text(0.06, 0.965, title, fontsize=12, weight="bold", va="top")
            fig.text(0.06, 0.935, text, family="monospace", fontsize=7.2, va="top")
            pdf.savefig(fig)
            plt.close(fig)


# A page of text whose characters the PDF's standard fonts hold (Windows-1252) is set in
# them (Courier, Helvetica: nothing embedded): 28 times faster than laying out and
# embedding the glyphs of a TrueType font one by one; the table of every load change of a
# long run fills hundreds of pages (1 M samples of invented steps: 16 s of a 40 s report).
_CORE_FONTS = {
    "pdf.use14corefonts": True,
    "font.monospace": ["Courier"],
    "font.sans-serif": ["Helvetica"],
    "font.weight": "medium",
}


def _in_core_fonts(text: str) -> bool:
    try:
        text.encode("cp1252")
    except UnicodeEncodeError:
        return False
    return True


def _wrap(text: str, width: int = _WIDTH) -> list[str]:
    import textwrap

    return textwrap.wrap(text, width, break_long_words=False, break_on_hyphens=False) or [""]


def summary_lines(s: ReportSummary, figures: dict[str, Any]) -> list[str]:
    """The first page's facts as text lines."""
    lines = [
        f"run        {s.run_id}, cell {s.cell}",
        f"started    {s.started_utc} (UTC), {s.duration_s:.3f} s, {s.samples} samples",
        f"note       {s.note or '—'}",
        "",
        "readings (U: expanded uncertainty, k = 2, about 95 %)",
    ]
    for r in s.readings[:20]:
        settled = f"settled in {r.settle_ms:.1f} ms" if r.settle_ms else "not settled"
        lines.append(f"  {r.text:>24}  from {r.t_start_s:.3f} s, {settled}")
    if len(s.readings) > 20:
        lines.append(f"  … {len(s.readings) - 20} more in the table at the end")
    if not s.readings:
        lines.append("  no load change found")
    lines += [
        "",
        f"at the end {s.final_state}",
        f"alarms     {s.alarms}",
        *_wrap(f"verify     {s.verify}"),
        "",
        f"load changes {s.changes}; median settle {cell(s.median_settle_ms, '.2f')} ms, "
        f"k·x {cell(s.median_static_settle_ms, '.2f')} ms, "
        f"k·x / estimate {cell(s.median_ratio, '.1f')}×; largest overshoot "
        f"{cell(s.max_overshoot_pct, '.2f')} %",
        "",
        "uncertainty of a settled reading (GUM, JCGM 100:2008; k = 1 unless stated)",
        *budget_lines(figures["uncertainty"], s.calibration_stated),
        "",
        "reproduce:",
        *_wrap("  " + s.reproduce),
        "check (prints 'identical'):",
        *_wrap("  " + s.check),
    ]
    return lines


def write_pdf(
    path: Path,
    s: ReportSummary,
    figures: dict[str, Any],
    figs: Iterable[Any],
    provenance: list[str],
) -> None:
    """Write the PDF to ``path`` (a temporary name; the caller renames it); the figures
    are saved in turn as ``figs`` yields them."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt
    from matplotlib.backends.backend_pdf import PdfPages

    widths = [max(len(w), len(u), 9) for _, w, u, _ in CHANGE_COLUMNS]
    table = [
        " ".join(w.rjust(n) for (_, w, _, _), n in zip(CHANGE_COLUMNS, widths, strict=True)),
        " ".join(u.rjust(n) for (_, _, u, _), n in zip(CHANGE_COLUMNS, widths, strict=True)),
    ]
    table += [
        " ".join(v.rjust(n) for v, n in zip(row, widths, strict=True))
        for row in change_rows(figures["changes"])
    ]
    # no creation date: the same run gives the same bytes (a report made again compares)
    meta = {"Title": f"forcelens run report {s.run_id}", "CreationDate": None}
    with PdfPages(path, metadata=meta) as pdf:
        _text_pages(pdf, plt, f"forcelens run report — {s.run_id}", summary_lines(s, figures))
        for fig in figs:
            pdf.savefig(fig)
        _text_pages(pdf, plt, "Provenance", [w for p in provenance for w in _wrap(p)])
        _text_pages(pdf, plt, "Every load change", table)
