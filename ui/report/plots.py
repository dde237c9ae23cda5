"""The report's static figures, drawn with matplotlib (no Qt, no window).

* `overview`: displacement and force over the whole run, the force with its ±U band
  (k = 2) and the static k·x. A long run is reduced to the minimum and maximum of each of
  at most `OVERVIEW_BINS` bins (``ui.report.traces``), so memory does not grow with its
  length and no peak is lost.
* `closeups`: one panel per load change (the largest `MAX_CLOSEUPS` when there are more),
  six to a figure: the estimate with its ±U band, k·x, the settling band and the
  settling time, the vertical scale on the arrival (final value ± 6 settling bands) so the
  band is visible whatever the size of the step; a long stretch reduced as the overview.
"""

from __future__ import annotations

import io
from collections.abc import Callable, Iterator
from typing import Any

import numpy as np

from ui.report.traces import Lines

__all__ = [
    "MAX_CLOSEUPS",
    "OVERVIEW_BINS",
    "close",
    "closeup_changes",
    "closeups",
    "overview",
    "svg_text",
]

OVERVIEW_BINS = 2000
MAX_CLOSEUPS = 48
_PER_FIGURE = 6
# Our own palette: estimate deep teal, its band pale teal, k·x slate grey,
# displacement indigo, the settling band amber.
_ESTIMATE = "#006e78"
_BAND = "#006e7840"
_STATIC = "#78808c"
_DISPLACEMENT = "#3c3c96"
_SETTLE = "#d78c00"


def _pyplot() -> Any:
    import matplotlib

    matplotlib.use("Agg", force=False)  # files only; no display needed
    import matplotlib.pyplot as plt

    return plt


def overview(tr: Lines, title: str) -> Any:
    """The whole run: displacement (µm) above, force (N) with ±U and k·x below."""
    plt = _pyplot()
    fig, (ax1, ax2) = plt.subplots(2, 1, figsize=(10, 6.2), sharex=True, layout="constrained")
    fig.suptitle(title)
    ax1.plot(tr.time_s, tr.displacement_m * 1e6, color=_DISPLACEMENT, lw=0.8)
    ax1.set_ylabel("displacement / µm")
    ax2.fill_between(
        tr.band_time_s, tr.band_low_n, tr.band_high_n, color=_BAND, lw=0, label="± U (k = 2)"
    )
    ax2.plot(tr.time_s, tr.static_force_n, color=_STATIC, lw=0.7, label="k·x")
    ax2.plot(tr.time_s, tr.force_n, color=_ESTIMATE, lw=1.0, label="estimate")
    ax2.set_ylabel("force / N")
    ax2.set_xlabel("time / s")
    ax2.legend(loc="upper right", fontsize="small")
    for ax in (ax1, ax2):
        ax.grid(alpha=0.25)
    return fig


def closeup_changes(changes: list[dict[str, Any]]) -> list[int]:
    """Indices of the changes that get a close-up: all, or the largest `MAX_CLOSEUPS`
    in time order."""
    if len(changes) <= MAX_CLOSEUPS:
        return list(range(len(changes)))
    size = [abs(c["after_n"] - c["before_n"]) for c in changes]
    return sorted(np.argsort(size)[::-1][:MAX_CLOSEUPS].tolist())


def closeups(
    window: Callable[[float, float], Lines], changes: list[dict[str, Any]], band_floor_n: float
) -> Iterator[Any]:
    """Figures of six close-ups each, one per load change chosen by `closeup_changes`,
    drawn one at a time; ``window(t_from, t_to)`` gives the traces of a stretch of time."""
    plt = _pyplot()
    chosen = closeup_changes(changes)
    for first in range(0, len(chosen), _PER_FIGURE):
        group = chosen[first : first + _PER_FIGURE]
        rows = (len(group) + 1) // 2
        fig, axes = plt.subplots(
            rows, 2, figsize=(10, 2.9 * rows), squeeze=False, layout="constrained"
        )
        for ax in axes.ravel()[len(group) :]:
            ax.set_visible(False)
        for ax, i in zip(axes.ravel(), group, strict=False):
            c = changes[i]
            step = c["after_n"] - c["before_n"]
            band = max(0.02 * abs(step), band_floor_n)
            settle_s = (c["settle_ms"] or 0.0) * 1e-3
            static_s = (c["static_settle_ms"] or 0.0) * 1e-3
            t0 = c["t_start_s"]
            span = max(0.02, 2.0 * settle_s, 1.2 * static_s)
            tr = window(t0 - 0.2 * span, t0 + span)
            ax.fill_between(
                tr.band_time_s,
                tr.band_low_n,
                tr.band_high_n,
                color=_BAND,
                lw=0,
                label="± U (k = 2)",
            )
            ax.plot(tr.time_s, tr.static_force_n, color=_STATIC, lw=0.8, label="k·x")
            ax.plot(tr.time_s, tr.force_n, color=_ESTIMATE, lw=1.2, label="estimate")
            ax.axhspan(c["after_n"] - band, c["after_n"] + band, color=_SETTLE, alpha=0.12)
            if settle_s > 0:
                ax.axvline(t0 + settle_s, color=_SETTLE, lw=1.0, ls="--")
            ax.set_ylim(c["after_n"] - 6 * band, c["after_n"] + 6 * band)
            settle = "—" if not c["settle_ms"] else f"{c['settle_ms']:.1f} ms"
            ax.set_title(
                f"{c['before_n']:.4g} → {c['after_n']:.4g} N at {t0:.3f} s; settled in {settle}",
                fontsize="small",
            )
            ax.set_xlabel("time / s", fontsize="small")
            ax.set_ylabel("force / N", fontsize="small")
            ax.tick_params(labelsize="x-small")
            ax.grid(alpha=0.25)
        axes.ravel()[0].legend(loc="lower right", fontsize="x-small")
        yield fig


def svg_text(fig: Any) -> str:
    """The figure as SVG text, for inlining in HTML: the same bytes from the same run (no
    date, and element ids hashed with a fixed salt instead of a random one), so that a
    report made again can be compared byte for byte."""
    import matplotlib

    buffer = io.StringIO()
    with matplotlib.rc_context({"svg.hashsalt": "forcelens"}):
        fig.savefig(buffer, format="svg", metadata={"Date": None})
    text = buffer.getvalue()
    return text[text.index("<svg") :]


def close(fig: Any) -> None:
    """Free a figure once it is saved. A figure is a web of reference cycles; with many
    long-lived objects about (a long run's transitions) Python's collector would leave a
    few figures' worth of them behind, so they are collected here."""
    import gc

    _pyplot().close(fig)
    gc.collect()
