"""The report's static figures, drawn with matplotlib (no Qt, no window).

* `overview`: displacement and force over the whole run, the force with its ±U band
  (k = 2) and the static k·x. A long run is reduced to the minimum and maximum of each of
  at most `OVERVIEW_BINS` time bins, so time and memory do not grow with its length
  beyond one pass over the arrays, and no peak is lost.
* `closeups`: one panel per load change (the largest `MAX_CLOSEUPS` when there are more),
  six to a figure: the estimate with its ±U band, k·x, the settling band and the
  settling time, the vertical scale on the arrival (final value ± 6 settling bands) so the
  band is visible whatever the size of the step.
"""

from __future__ import annotations

import io
from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = [
    "MAX_CLOSEUPS",
    "OVERVIEW_BINS",
    "Traces",
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


@dataclass(frozen=True)
class Traces:
    """What the figures show; arrays of shape (n,), SI units."""

    time_s: np.ndarray
    displacement_m: np.ndarray
    force_n: np.ndarray
    expanded_u_n: np.ndarray  # U = 2u_c (k = 2)
    static_force_n: np.ndarray  # k·x
    title: str


def _bins(n: int, bins: int) -> np.ndarray:
    return np.linspace(0, n, min(n, bins) + 1).astype(np.int64)


def _reduce(values: np.ndarray, edges: np.ndarray, fn: Any) -> np.ndarray:
    """``fn`` (np.fmin or np.fmax) of ``values`` over each bin; NaN-tolerant."""
    return fn.reduceat(values, edges[:-1]) if values.size else values


def _envelope(t: np.ndarray, y: np.ndarray, bins: int) -> tuple[np.ndarray, np.ndarray]:
    """(t, y) of a line through each bin's minimum then maximum: every peak stays."""
    if t.size <= 2 * bins:
        return t, y
    edges = _bins(t.size, bins)
    lo, hi = _reduce(y, edges, np.fmin), _reduce(y, edges, np.fmax)
    tt = np.repeat(t[edges[:-1]], 2)
    yy = np.column_stack([lo, hi]).ravel()
    return tt, yy


def _pyplot() -> Any:
    import matplotlib

    matplotlib.use("Agg", force=False)  # files only; no display needed
    import matplotlib.pyplot as plt

    return plt


def overview(tr: Traces) -> Any:
    """The whole run: displacement (µm) above, force (N) with ±U and k·x below."""
    plt = _pyplot()
    fig, (ax1, ax2) = plt.subplots(2, 1, figsize=(10, 6.2), sharex=True, layout="constrained")
    fig.suptitle(tr.title)
    t = tr.time_s
    ax1.plot(*_envelope(t, tr.displacement_m * 1e6, OVERVIEW_BINS), color=_DISPLACEMENT, lw=0.8)
    ax1.set_ylabel("displacement / µm")
    if t.size > 2 * OVERVIEW_BINS:
        edges = _bins(t.size, OVERVIEW_BINS)
        low = _reduce(tr.force_n - tr.expanded_u_n, edges, np.fmin)
        high = _reduce(tr.force_n + tr.expanded_u_n, edges, np.fmax)
        tb = t[edges[:-1]]
    else:
        low, high, tb = tr.force_n - tr.expanded_u_n, tr.force_n + tr.expanded_u_n, t
    ax2.fill_between(tb, low, high, color=_BAND, lw=0, label="± U (k = 2)")
    ax2.plot(*_envelope(t, tr.static_force_n, OVERVIEW_BINS), color=_STATIC, lw=0.7, label="k·x")
    ax2.plot(*_envelope(t, tr.force_n, OVERVIEW_BINS), color=_ESTIMATE, lw=1.0, label="estimate")
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


def closeups(tr: Traces, changes: list[dict[str, Any]], band_floor_n: float) -> list[Any]:
    """Figures of six close-ups each, one per load change chosen by `closeup_changes`."""
    plt = _pyplot()
    chosen = closeup_changes(changes)
    figures = []
    t = tr.time_s
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
            lo, hi = np.searchsorted(t, [t0 - 0.2 * span, t0 + span])
            s = slice(int(lo), int(hi))
            ax.fill_between(
                t[s],
                tr.force_n[s] - tr.expanded_u_n[s],
                tr.force_n[s] + tr.expanded_u_n[s],
                color=_BAND,
                lw=0,
                label="± U (k = 2)",
            )
            ax.plot(t[s], tr.static_force_n[s], color=_STATIC, lw=0.8, label="k·x")
            ax.plot(t[s], tr.force_n[s], color=_ESTIMATE, lw=1.2, label="estimate")
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
        figures.append(fig)
    return figures


def svg_text(fig: Any) -> str:
    """The figure as SVG text, for inlining in HTML."""
    buffer = io.StringIO()
    fig.savefig(buffer, format="svg")
    text = buffer.getvalue()
    return text[text.index("<svg") :]


def close(fig: Any) -> None:
    """Free a figure once it is saved."""
    _pyplot().close(fig)
