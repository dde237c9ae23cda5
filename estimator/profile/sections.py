"""The profile itself: one frozen dataclass per TOML table, each checking its values as it is
made, and `CellProfile`, which holds them and checks what spans tables."""

from __future__ import annotations

import dataclasses
import datetime
import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, ClassVar

from estimator.errors import ProfileError
from estimator.profile.checks import _fail, _integer, _real, _set, _show, _suggest, _text
from estimator.profile.keys import (
    _DISPLACEMENT_MAX_M,
    _FN_MIN_HZ,
    _ISO_DATE,
    ALLOWED_FRAMINGS,
    ALLOWED_LINE_COLUMNS,
    ALLOWED_PARITIES,
    ALLOWED_STOP_BITS,
    MAX_BAUDRATE,
    MAX_SAMPLE_RATE_HZ,
)
from estimator.profile.toml_text import _toml_string

if TYPE_CHECKING:
    from estimator.plant import Plant


@dataclass(frozen=True)
class CellInfo:
    """Identity of the cell: name, free description, provenance, calibration date.

    ``calibration_date`` is an ISO date ``"YYYY-MM-DD"`` or ``""`` (never calibrated).
    """

    TABLE: ClassVar[str] = "cell"

    name: str
    description: str = ""
    source: str = ""
    calibration_date: str = ""

    def __post_init__(self) -> None:
        t = self.TABLE
        name = _text(t, "name", self.name)
        if not name.strip():
            raise _fail(t, "name", name, "must not be empty")
        _text(t, "description", self.description)
        _text(t, "source", self.source)
        date = _text(t, "calibration_date", self.calibration_date)
        if date:
            valid = _ISO_DATE.match(date) is not None
            if valid:
                try:
                    datetime.date.fromisoformat(date)
                except ValueError:
                    valid = False
            if not valid:
                raise _fail(
                    t, "calibration_date", date, 'must be a date "YYYY-MM-DD", or "" if never'
                )


@dataclass(frozen=True)
class PlantSection:
    """Mechanics of the cell: m·ẍ + c·ẋ + k·x = F, given as mass, stiffness and ζ.

    Uncertainties are standard uncertainties (coverage factor k=1), >= 0.
    The damping ratio must be > 0: an undamped or unstable cell is refused.
    """

    TABLE: ClassVar[str] = "plant"

    mass_kg: float
    stiffness_n_per_m: float
    damping_ratio: float
    mass_u_kg: float = 0.0
    stiffness_u_n_per_m: float = 0.0
    damping_ratio_u: float = 0.0

    def __post_init__(self) -> None:
        t = self.TABLE
        _set(self, "mass_kg", _real(t, "mass_kg", self.mass_kg, above=0.0))
        _set(
            self,
            "stiffness_n_per_m",
            _real(t, "stiffness_n_per_m", self.stiffness_n_per_m, above=0.0),
        )
        _set(self, "damping_ratio", _real(t, "damping_ratio", self.damping_ratio, above=0.0))
        for key in ("mass_u_kg", "stiffness_u_n_per_m", "damping_ratio_u"):
            _set(self, key, _real(t, key, getattr(self, key), at_least=0.0))

    @property
    def natural_freq_rad_s(self) -> float:
        """Undamped natural frequency ωn = sqrt(k/m), rad/s."""
        return math.sqrt(self.stiffness_n_per_m / self.mass_kg)

    @property
    def natural_freq_hz(self) -> float:
        """Undamped natural frequency fn = sqrt(k/m) / (2π), Hz."""
        return self.natural_freq_rad_s / (2.0 * math.pi)

    @property
    def damping_n_s_per_m(self) -> float:
        """Viscous damping coefficient c = 2ζ·sqrt(k·m), N·s/m."""
        return 2.0 * self.damping_ratio * math.sqrt(self.stiffness_n_per_m * self.mass_kg)

    @property
    def damping_u_n_s_per_m(self) -> float:
        """Standard uncertainty of c = 2ζ·sqrt(k·m), N·s/m: GUM 5.1.6 for a product of
        powers, ζ, k and m taken as uncorrelated."""
        rel = math.hypot(
            self.damping_ratio_u / self.damping_ratio,  # ζ > 0 in every profile
            0.5 * self.stiffness_u_n_per_m / self.stiffness_n_per_m,
            0.5 * self.mass_u_kg / self.mass_kg,
        )
        return self.damping_n_s_per_m * rel

    def plant(self) -> Plant:
        """Return the :class:`~estimator.plant.Plant` (mass, c = 2ζ·sqrt(k·m), k)."""
        from estimator.plant import Plant  # imported here: keeps this module light

        return Plant(self.mass_kg, self.damping_n_s_per_m, self.stiffness_n_per_m)


@dataclass(frozen=True)
class TransducerSection:
    """Transducer chain: ADC counts → volts → metres.

    x_m = (counts · volts_per_count − zero_volts) · metres_per_volt (the reader
    applies this; the profile only stores the numbers).
    """

    TABLE: ClassVar[str] = "transducer"

    volts_per_count: float
    metres_per_volt: float
    zero_volts: float = 0.0
    noise_m: float = 0.0

    def __post_init__(self) -> None:
        t = self.TABLE
        _set(self, "volts_per_count", _real(t, "volts_per_count", self.volts_per_count, above=0.0))
        _set(
            self,
            "metres_per_volt",
            _real(t, "metres_per_volt", self.metres_per_volt, nonzero=True),
        )
        _set(self, "zero_volts", _real(t, "zero_volts", self.zero_volts))
        _set(self, "noise_m", _real(t, "noise_m", self.noise_m, at_least=0.0))
        # a displacement transducer on a force cell resolves micrometres and spans at most
        # centimetres: a metre of noise or of one count is a unit error (and would overflow)
        for key, value in (("noise_m", self.noise_m), ("resolution", self.resolution_m)):
            if not value < _DISPLACEMENT_MAX_M:
                what = (
                    "noise_m"
                    if key == "noise_m"
                    else "volts_per_count × metres_per_volt (one count)"
                )
                raise ProfileError(
                    f"[{t}] {what} = {value!r} m: must be below {_DISPLACEMENT_MAX_M:g} m "
                    "(a transducer on a force cell resolves micrometres; check the unit)"
                )

    @property
    def resolution_m(self) -> float:
        """One ADC count expressed in metres, |volts_per_count · metres_per_volt|."""
        return abs(self.volts_per_count * self.metres_per_volt)


@dataclass(frozen=True)
class AcquisitionSection:
    """How samples arrive: rate, serial port (``""`` = built-in simulated cell), framing."""

    TABLE: ClassVar[str] = "acquisition"

    sample_rate_hz: float
    port: str = ""
    baudrate: int = 921600
    framing: str = "ascii-lines"
    parity: str = "none"
    stop_bits: float = 1.0
    data_bits: int = 8
    line_delimiter: str = ","
    line_columns: str = "seq,time_us,counts"

    def __post_init__(self) -> None:
        t = self.TABLE
        rate = _real(t, "sample_rate_hz", self.sample_rate_hz, above=0.0)
        if rate > MAX_SAMPLE_RATE_HZ:
            raise _fail(t, "sample_rate_hz", rate, f"must be at most {MAX_SAMPLE_RATE_HZ:g} Hz")
        _set(self, "sample_rate_hz", rate)
        _text(t, "port", self.port)
        baud = _integer(t, "baudrate", self.baudrate, at_least=1)
        if baud > MAX_BAUDRATE:
            raise _fail(t, "baudrate", baud, f"must be at most {MAX_BAUDRATE} bit/s")
        _set(self, "baudrate", baud)
        framing = _text(t, "framing", self.framing)
        if framing not in ALLOWED_FRAMINGS:
            allowed = ", ".join(_toml_string(f) for f in ALLOWED_FRAMINGS)
            raise _fail(t, "framing", framing, f"not supported; allowed: {allowed}")
        parity = _text(t, "parity", self.parity)
        if parity not in ALLOWED_PARITIES:
            allowed = ", ".join(_toml_string(p) for p in ALLOWED_PARITIES)
            raise _fail(t, "parity", parity, f"not supported; allowed: {allowed}")
        stop = _real(t, "stop_bits", self.stop_bits)
        if stop not in ALLOWED_STOP_BITS:
            raise _fail(t, "stop_bits", self.stop_bits, "must be 1, 1.5 or 2")
        _set(self, "stop_bits", stop)
        bits = _integer(t, "data_bits", self.data_bits, at_least=5)
        if bits > 8:
            raise _fail(t, "data_bits", bits, "must be 5, 6, 7 or 8")
        if bits != 8 and framing != "ascii-lines":
            raise _fail(t, "data_bits", bits, f"must be 8 with the binary framing {framing!r}")
        _set(self, "data_bits", bits)
        delim = _text(t, "line_delimiter", self.line_delimiter)
        if len(delim) != 1 or not delim.isascii() or delim in "0123456789-\r\n":
            raise _fail(
                t,
                "line_delimiter",
                delim,
                "must be one ASCII character other than a digit, - or CR/LF",
            )
        columns = self.columns
        unknown = [c for c in columns if c not in ALLOWED_LINE_COLUMNS]
        if unknown:
            raise _fail(
                t,
                "line_columns",
                self.line_columns,
                f"unknown column meaning {unknown[0]!r}; "
                f"allowed: {', '.join(ALLOWED_LINE_COLUMNS)}",
            )
        for kind in ("seq", "time_us", "time_ms", "counts"):
            if columns.count(kind) > 1:
                raise _fail(t, "line_columns", self.line_columns, f"{kind!r} appears twice")
        if "counts" not in columns:
            raise _fail(t, "line_columns", self.line_columns, "must contain 'counts'")
        if "time_us" in columns and "time_ms" in columns:
            raise _fail(t, "line_columns", self.line_columns, "give time_us or time_ms, not both")

    @property
    def columns(self) -> tuple[str, ...]:
        """``line_columns`` split into its column meanings."""
        return tuple(
            c.strip() for c in _text(self.TABLE, "line_columns", self.line_columns).split(",")
        )

    @property
    def sample_period_s(self) -> float:
        """Time between samples, s."""
        return 1.0 / self.sample_rate_hz


@dataclass(frozen=True)
class ObserverSection:
    """Observer tuning.

    ``force_bandwidth_hz`` sets the random-walk intensity the observer's hold model
    designs its gain for (the model itself assumes a constant force: the bandwidth sets
    how fast a held reading follows, not what its σ means); ``process_noise_n2_per_s``,
    when given, sets it directly and overrides the bandwidth. ``rate_scale`` multiplies
    the intensities of its rate models (1: the bank derived from the cell's natural
    frequency and range; `forcelens tune` fits it).
    """

    TABLE: ClassVar[str] = "observer"

    force_bandwidth_hz: float = 10.0
    process_noise_n2_per_s: float | None = None
    gate_sigma: float = 5.0
    rate_scale: float = 1.0

    def __post_init__(self) -> None:
        t = self.TABLE
        _set(
            self,
            "force_bandwidth_hz",
            _real(t, "force_bandwidth_hz", self.force_bandwidth_hz, above=0.0),
        )
        if self.process_noise_n2_per_s is not None:
            _set(
                self,
                "process_noise_n2_per_s",
                _real(t, "process_noise_n2_per_s", self.process_noise_n2_per_s, above=0.0),
            )
        _set(self, "gate_sigma", _real(t, "gate_sigma", self.gate_sigma, above=1.0))
        _set(self, "rate_scale", _real(t, "rate_scale", self.rate_scale, above=0.0))


@dataclass(frozen=True)
class LimitsSection:
    """Calibrated force range (N) and, optionally, the mechanical stop (m)."""

    TABLE: ClassVar[str] = "limits"

    force_min_n: float
    force_max_n: float
    travel_m: float | None = None

    def __post_init__(self) -> None:
        t = self.TABLE
        low = _real(t, "force_min_n", self.force_min_n)
        high = _real(t, "force_max_n", self.force_max_n)
        if not low < high:
            raise _fail(
                t,
                "force_min_n",
                self.force_min_n,
                f"must be < [limits] force_max_n = {_show(self.force_max_n)}",
            )
        _set(self, "force_min_n", low)
        _set(self, "force_max_n", high)
        if self.travel_m is not None:
            _set(self, "travel_m", _real(t, "travel_m", self.travel_m, above=0.0))


_SECTIONS: dict[str, type] = {
    "cell": CellInfo,
    "plant": PlantSection,
    "transducer": TransducerSection,
    "acquisition": AcquisitionSection,
    "observer": ObserverSection,
    "limits": LimitsSection,
}
#: Tables that may be left out of a file (every key has a default).
_OPTIONAL_TABLES = frozenset({"observer"})


@dataclass(frozen=True)
class CellProfile:
    """Everything known about one cell; one attribute per TOML table."""

    cell: CellInfo
    plant: PlantSection
    transducer: TransducerSection
    acquisition: AcquisitionSection
    observer: ObserverSection
    limits: LimitsSection

    def __post_init__(self) -> None:
        for name, cls in _SECTIONS.items():
            value = getattr(self, name)
            if not isinstance(value, cls):
                raise ProfileError(
                    f"[{name}]: expected a {cls.__name__}, got {type(value).__name__}"
                )
        nyquist_hz = self.acquisition.sample_rate_hz / 2.0
        fn_hz = self.plant.natural_freq_rad_s / (2.0 * math.pi)
        if not _FN_MIN_HZ <= fn_hz < nyquist_hz:
            raise ProfileError(
                f"[plant] mass_kg = {self.plant.mass_kg!r} and stiffness_n_per_m = "
                f"{self.plant.stiffness_n_per_m!r} give a natural frequency of {fn_hz:.6g} Hz: "
                f"it must be from {_FN_MIN_HZ:g} Hz to below the Nyquist frequency, "
                f"[acquisition] sample_rate_hz / 2 = {nyquist_hz:g} Hz (a cell that rings "
                "faster than the samples cannot be observed)"
            )
        if not self.observer.force_bandwidth_hz < nyquist_hz:
            raise _fail(
                "observer",
                "force_bandwidth_hz",
                self.observer.force_bandwidth_hz,
                f"must be below the Nyquist frequency, [acquisition] sample_rate_hz / 2 = "
                f"{nyquist_hz:g} Hz; lower it or raise the sample rate",
            )
        plant = self.plant
        for key, of in (("mass_u_kg", "mass_kg"), ("stiffness_u_n_per_m", "stiffness_n_per_m")):
            if not getattr(plant, key) < getattr(plant, of):  # the observer's σ carries them
                raise _fail(
                    "plant",
                    key,
                    getattr(plant, key),
                    f"must be below {of} = {getattr(plant, of)!r}: a standard uncertainty as "
                    "large as the value says nothing of it",
                )
        if not math.isfinite(plant.damping_u_n_s_per_m):
            raise _fail(
                "plant",
                "damping_ratio_u",
                plant.damping_ratio_u,
                "gives the damping coefficient an infinite uncertainty",
            )

    def with_updates(self, **sections: Any) -> CellProfile:
        """Return a copy with whole sections replaced, e.g. ``with_updates(plant=new_plant)``.

        The copy is validated again. Unknown section names raise ProfileError.
        """
        for name in sections:
            if name not in _SECTIONS:
                raise ProfileError(f"no section named {name!r}{_suggest(name, _SECTIONS)}")
        return dataclasses.replace(self, **sections)
