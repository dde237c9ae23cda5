"""The cell's own ring-down after each load change, checked against the profile's fn and ζ.

A multiple-model observer on a wrong plant model does not show it in its innovations: its
smooth-load priors take the difference between the model's ringing and the cell's as a
moving force, and the most probable model's NIS stays in its band (a ±50 % damping error
on the demo cell: windowed NIS 1.0–1.28 against a 99 % band up to 1.28). The cell itself
says it plainly. After a load change the force is held and the cell rings freely; a free
decay of a second-order system, ``x(u) = c₀ + c₁·u + e^(−σu)·(A·cos ωd·u + B·sin ωd·u)``
(the linear term takes a slow drift or a constant-rate load, whose forced response is a
straight line), gives ``ωn = √(σ² + ωd²)`` and ``ζ = σ/ωn`` by least squares — the same
quantities `forcelens identify` takes from a ring-down, here from every load change the
observer sees (its jump model taking over, `FLAG_JUMP`).

Each window starts at the first row after a run of jump rows, at least ``_SPACING_S``
after the one before (twice that for each window in a row that agreed, up to 3.2 s: on an
invented staircase changing every 0.5 s the fits cost 0.18 s per million rows, 1.1 s when
every change was fitted, the other alarms 0.3 s), and spans ``_PERIODS`` periods of the
profile's fn, longer on a lightly damped cell (two time constants), at most
``_PERIODS_MAX``. It is fitted from the readings (not the observer's estimate, which is
the model being checked), starting from the profile's values. A window whose fit leaves
more than ``_RMS_NOISE`` times the transducer noise (the next load change came within it,
or the load was not held) is halved, down to ``_PERIODS_MIN`` periods, then dropped; so
is one whose ringing is under ``min_amplitude`` noise σ, told first by the residual of a
straight line (no fit where a load changed without ringing the cell). A window that is
kept *disagrees* when fn or ζ is off by more than its tolerance and by more than
``_SIGNIFICANT`` of the fit's standard uncertainties, and *agrees* when both are within
their tolerances.

Only cells that ring are checked: a profile with ζ above ``ZETA_MAX`` gives no window.
Every window is a function of the stream's rows alone, so the checks do not depend on the
sizes of the blocks they arrive in.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.optimize

__all__ = ["ZETA_MAX", "RingCheck", "RingFit", "RingdownWatch", "fit_ringing"]

#: Profiles more damped than this are not checked (no ringing to fit).
ZETA_MAX = 0.5
_PERIODS = 8.0  # window length in periods of the profile's fn ...
_TIME_CONSTANTS = 2.0  # ... or this many time constants 1/(ζ·ωn), the longer ...
_PERIODS_MAX = 40.0  # ... but at most this many periods
_PERIODS_MIN = 3.0  # a window is halved down to this length before it is dropped
_RMS_NOISE = 2.0  # residual RMS (in noise σ) above which the fit is not a free decay
_SIGNIFICANT = 4.0  # a deviation must also exceed this many standard uncertainties
_SPACING_S = 0.1  # windows start at least this far apart (and a window's length) ...
_SPACING_MAX_DOUBLINGS = 5  # ... twice that after each window that agreed, up to 3.2 s


@dataclass(frozen=True)
class RingFit:
    """A free decay fitted to one window.

    Attributes:
        fn_hz, zeta: natural frequency (Hz) and damping ratio.
        fn_u_hz, zeta_u: their standard uncertainties from the fit (white residuals).
        amplitude_m: amplitude of the ringing at the window's start, m.
        rms_m: RMS of the residuals, m.
    """

    fn_hz: float
    zeta: float
    fn_u_hz: float
    zeta_u: float
    amplitude_m: float
    rms_m: float


@dataclass(frozen=True)
class RingCheck:
    """The verdict on one window.

    Attributes:
        index: stream position of the window's last sample (where it is decided).
        time_s: device time of that sample, s.
        start_index: stream position of the window's first sample.
        fit: the fitted free decay.
        agrees: True (fn and ζ within tolerance) or False (one of them significantly off).
    """

    index: int
    time_s: float
    start_index: int
    fit: RingFit
    agrees: bool


def _model(p: np.ndarray, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The free decay and its Jacobian by (σ, ωd, c₀, c₁, A, B), shapes (n,), (n, 6)."""
    sigma, wd, _c0, _c1, a, b = p
    e = np.exp(-sigma * u)
    c, s = np.cos(wd * u), np.sin(wd * u)
    ring = e * (a * c + b * s)
    x = p[2] + p[3] * u + ring
    jac = np.column_stack([-u * ring, u * e * (b * c - a * s), np.ones_like(u), u, e * c, e * s])
    return x, jac


def fit_ringing(u_s: np.ndarray, x_m: np.ndarray, wn0: float, zeta0: float) -> RingFit | None:
    """Fit ``c₀ + c₁·u + e^(−σu)·(A·cos ωd·u + B·sin ωd·u)`` to ``x_m`` at ``u_s`` (s from
    the window's start), starting from ``ωn = wn0`` (rad/s), ``ζ = zeta0 < 1``; None when
    the fit fails or leaves fewer than two residual degrees of freedom."""
    if u_s.size < 8:
        return None
    sigma0 = zeta0 * wn0
    wd0 = wn0 * math.sqrt(1.0 - zeta0 * zeta0)
    e = np.exp(-sigma0 * u_s)
    basis = np.column_stack([np.ones_like(u_s), u_s, e * np.cos(wd0 * u_s), e * np.sin(wd0 * u_s)])
    lin, *_ = np.linalg.lstsq(basis, x_m, rcond=None)
    scale = max(float(np.max(np.abs(x_m - lin[0]))), 1e-300)
    p0 = np.array([sigma0, wd0, *lin])

    def residual(p: np.ndarray) -> np.ndarray:
        return (_model(p, u_s)[0] - x_m) / scale

    def jacobian(p: np.ndarray) -> np.ndarray:
        return _model(p, u_s)[1] / scale

    try:
        res = scipy.optimize.least_squares(
            residual,
            p0,
            jac=jacobian,
            bounds=([0.0, 0.1 * wd0, -np.inf, -np.inf, -np.inf, -np.inf], np.inf),
            x_scale=np.array([max(sigma0, 1e-3 * wn0), wd0, scale, scale / u_s[-1], scale, scale]),
            max_nfev=60,
        )
    except (ValueError, np.linalg.LinAlgError):
        return None
    dof = u_s.size - 6
    if not res.success or dof < 2:
        return None
    r = res.fun * scale
    s2 = float(r @ r) / dof
    jac = res.jac * scale
    cov = np.linalg.pinv(jac.T @ jac, hermitian=True) * s2
    sigma, wd = float(res.x[0]), float(res.x[1])
    wn = math.hypot(sigma, wd)
    # ωn = √(σ² + ωd²), ζ = σ/ωn: gradients by (σ, ωd) for the uncertainties
    g_wn = np.array([sigma / wn, wd / wn])
    g_zeta = np.array([wd * wd / wn**3, -sigma * wd / wn**3])
    c2 = cov[:2, :2]
    return RingFit(
        fn_hz=wn / (2.0 * math.pi),
        zeta=sigma / wn,
        fn_u_hz=math.sqrt(max(float(g_wn @ c2 @ g_wn), 0.0)) / (2.0 * math.pi),
        zeta_u=math.sqrt(max(float(g_zeta @ c2 @ g_zeta), 0.0)),
        amplitude_m=math.hypot(float(res.x[4]), float(res.x[5])),
        rms_m=math.sqrt(float(r @ r) / u_s.size),
    )


class RingdownWatch:
    """Collects a window after each load change the observer sees and fits it.

    Args:
        fn_hz, zeta: the profile's natural frequency and damping ratio.
        sample_rate_hz: nominal sample rate, Hz.
        noise_m: standard deviation of the readings (transducer noise and quantisation), m.
        fn_tolerance, zeta_tolerance: relative deviations beyond which a window disagrees.
        min_amplitude: ringing (in noise σ) a window needs to be judged.
    """

    def __init__(
        self,
        fn_hz: float,
        zeta: float,
        sample_rate_hz: float,
        noise_m: float,
        fn_tolerance: float,
        zeta_tolerance: float,
        min_amplitude: float,
    ) -> None:
        self.fn_hz, self.zeta = float(fn_hz), float(zeta)
        self.noise_m = float(noise_m)
        self.fn_tolerance, self.zeta_tolerance = float(fn_tolerance), float(zeta_tolerance)
        self.min_amplitude = float(min_amplitude)
        self.enabled = self.zeta <= ZETA_MAX and self.noise_m > 0.0
        period = sample_rate_hz / self.fn_hz  # samples per period
        tau = sample_rate_hz / (max(self.zeta, 1e-12) * 2.0 * math.pi * self.fn_hz)
        length = min(max(_PERIODS * period, _TIME_CONSTANTS * tau), _PERIODS_MAX * period)
        self.length = max(8, math.ceil(length))  # samples per window
        self.shortest = max(8, math.ceil(_PERIODS_MIN * period))
        # windows start at least this many samples apart: a load the observer takes for a
        # jump every few milliseconds must not cost a fit each (one takes 1-7 ms); the
        # spacing doubles with each window that agrees, up to _SPACING_MAX_DOUBLINGS times
        self.spacing = max(self.length, math.ceil(_SPACING_S * sample_rate_hz))
        self._agreeing = 0  # windows in a row that agreed
        self._next = 0  # first stream position where a window may start
        self._open: list[np.ndarray] = []  # rows (time, reading) of the window being filled
        self._open_start = -1  # its first stream position; -1: none open
        self._in_jump = False  # the row before was a jump row

    def describe(self) -> str:
        if not self.enabled:
            return "not checked (the profile's cell does not ring)"
        return (
            f"the ring-down after each load change ({self.length} samples) fitted for fn "
            f"and ζ: off by more than {self.fn_tolerance * 100:g} % (fn) or "
            f"{self.zeta_tolerance * 100:g} % (ζ) of the profile's"
        )

    def feed(
        self, pos: np.ndarray, time_s: np.ndarray, reading_m: np.ndarray, jump: np.ndarray
    ) -> list[RingCheck]:
        """One block of rows: stream positions, device times (s), readings (m) and whether
        the observer's jump model leads; returns the checks decided in it, in order."""
        if not self.enabled or pos.size == 0:
            return []
        checks: list[RingCheck] = []
        prev = np.concatenate(([self._in_jump], jump[:-1]))
        starts = np.flatnonzero(prev & ~jump)  # first row after a run of jump rows
        self._in_jump = bool(jump[-1])
        i = 0
        n = pos.size
        while i < n:
            if self._open_start < 0:
                later = starts[(starts >= i) & (pos[starts] >= self._next)]
                if later.size == 0:
                    break
                i = int(later[0])
                self._open_start = int(pos[i])
                doublings = min(self._agreeing, _SPACING_MAX_DOUBLINGS)
                self._next = self._open_start + self.spacing * 2**doublings
                self._open = []
            need = self.length - sum(part.shape[1] for part in self._open)
            take = min(need, n - i)
            self._open.append(np.vstack((time_s[i : i + take], reading_m[i : i + take])))
            i += take
            if take == need:
                rows = np.hstack(self._open)
                check = self._judge(rows, int(pos[i - 1]))
                if check is not None:
                    checks.append(check)
                    self._agreeing = self._agreeing + 1 if check.agrees else 0
                self._open_start = -1
                self._open = []
        return checks

    def _judge(self, rows: np.ndarray, last: int) -> RingCheck | None:
        t, x = rows
        ok = np.isfinite(x)
        if not self._rings(t[ok] - t[0], x[ok]):
            return None
        wn0 = 2.0 * math.pi * self.fn_hz
        m = t.size
        while m >= self.shortest:
            u, xm = t[:m][ok[:m]] - t[0], x[:m][ok[:m]]
            fit = fit_ringing(u, xm, wn0, self.zeta)
            if fit is not None and fit.rms_m <= _RMS_NOISE * self.noise_m:
                if fit.amplitude_m < self.min_amplitude * self.noise_m:
                    return None
                return self._verdict(fit, last, float(t[-1]), last - t.size + 1)
            m //= 2
        return None

    def _rings(self, u: np.ndarray, x: np.ndarray) -> bool:
        """Does anything but a straight line reach ``min_amplitude`` noise σ? A cheap test
        that spares the fit where a load changed without the cell ringing (a slow
        application, a heavily damped cell, or readings that step with no dynamics)."""
        if u.size < 8:
            return False
        line = np.polynomial.polynomial.polyfit(u, x, 1)
        rest = x - np.polynomial.polynomial.polyval(u, line)
        return float(np.max(np.abs(rest))) >= self.min_amplitude * self.noise_m

    def _verdict(self, fit: RingFit, last: int, time_s: float, start: int) -> RingCheck | None:
        d_fn = abs(fit.fn_hz - self.fn_hz)
        d_zeta = abs(fit.zeta - self.zeta)
        off = (d_fn > self.fn_tolerance * self.fn_hz and d_fn > _SIGNIFICANT * fit.fn_u_hz) or (
            d_zeta > self.zeta_tolerance * self.zeta and d_zeta > _SIGNIFICANT * fit.zeta_u
        )
        within = (
            d_fn <= self.fn_tolerance * self.fn_hz and d_zeta <= self.zeta_tolerance * self.zeta
        )
        if not (off or within):
            return None  # too uncertain to say either
        return RingCheck(last, time_s, start, fit, agrees=not off)
