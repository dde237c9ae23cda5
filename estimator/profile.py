"""Cell profiles: the TOML file that describes one force cell, read and written.

A profile holds what the observer needs to know about a cell: its mechanics
(mass, stiffness, damping ratio, with standard uncertainties), the transducer
chain (volts per ADC count, metres per volt, noise), how samples arrive, the
observer's tuning and the calibrated force range. Every value is SI (kg, m, N,
s, Hz, V); every name carries its unit. The format is documented key by key in
``docs/cell-profile.md``.

Reading uses :mod:`tomllib`; writing uses a small writer of our own (no extra
dependency) that writes floats with :func:`repr` so a save/load round trip is
exact. Every check raises :class:`~estimator.errors.ProfileError` with a
message that names the table, the key, the bad value and the rule, e.g.
``profile.toml: [plant] mass_kg = -1: must be > 0 (moving mass in kg)``.
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime
import difflib
import importlib.resources
import math
import os
import re
import stat
import tempfile
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, ClassVar

from estimator.errors import ProfileError

if TYPE_CHECKING:
    from estimator.plant import Plant

__all__ = [
    "ALLOWED_FRAMINGS",
    "ALLOWED_LINE_COLUMNS",
    "ALLOWED_PARITIES",
    "ALLOWED_STOP_BITS",
    "PROFILE_FORMAT",
    "PROFILE_VERSION",
    "SUPPORTED_VERSIONS",
    "AcquisitionSection",
    "CellInfo",
    "CellProfile",
    "LimitsSection",
    "ObserverSection",
    "PlantSection",
    "ProfileError",
    "TransducerSection",
    "default_demo_profile",
    "load_profile",
    "profile_from_mapping",
    "profile_to_toml",
    "save_profile",
]

#: Value of the top-level ``format`` key of every profile.
PROFILE_FORMAT = "forcelens-cell-profile"
#: Version this software writes.
PROFILE_VERSION = 1
#: Versions this software reads.
SUPPORTED_VERSIONS: tuple[int, ...] = (1,)
#: Framings of the serial stream this software understands.
ALLOWED_FRAMINGS: tuple[str, ...] = ("ascii-lines", "binary-24", "binary-32")
#: Serial parity settings.
ALLOWED_PARITIES: tuple[str, ...] = ("none", "even", "odd", "mark", "space")
#: Serial stop bits.
ALLOWED_STOP_BITS: tuple[float, ...] = (1.0, 1.5, 2.0)
#: Meanings an ASCII line column may have (see docs/ascii-line-format.md).
ALLOWED_LINE_COLUMNS: tuple[str, ...] = ("seq", "time_us", "time_ms", "counts", "ignore")

#: One line per key: what it is and its unit. Used in error messages, in the
#: comments the writer puts beside each key, and mirrored in docs/cell-profile.md.
KEY_HELP: dict[str, dict[str, str]] = {
    "cell": {
        "name": "short name of the cell",
        "description": "free text",
        "source": "where the numbers come from",
        "calibration_date": 'ISO date YYYY-MM-DD of the last calibration, "" if never',
    },
    "plant": {
        "mass_kg": "moving mass in kg",
        "stiffness_n_per_m": "spring stiffness in N/m",
        "damping_ratio": "damping ratio zeta, dimensionless",
        "mass_u_kg": "standard uncertainty (k=1) of mass_kg, in kg",
        "stiffness_u_n_per_m": "standard uncertainty (k=1) of stiffness_n_per_m, in N/m",
        "damping_ratio_u": "standard uncertainty (k=1) of damping_ratio, dimensionless",
    },
    "transducer": {
        "volts_per_count": "ADC least significant bit in V",
        "metres_per_volt": "transducer and conditioner sensitivity in m/V, sign allowed",
        "zero_volts": "electrical zero in V",
        "noise_m": "1-sigma white displacement noise in m",
    },
    "acquisition": {
        "sample_rate_hz": "samples per second, Hz",
        "port": 'serial port name, "" for the built-in simulated cell',
        "baudrate": "serial line speed in bit/s",
        "framing": "how samples are framed on the line; one of: " + ", ".join(ALLOWED_FRAMINGS),
        "parity": "serial parity; one of: " + ", ".join(ALLOWED_PARITIES),
        "stop_bits": "serial stop bits: 1, 1.5 or 2",
        "data_bits": "serial data bits per character, 5..8",
        "line_delimiter": "ascii-lines only: the one character between fields",
        "line_columns": "ascii-lines only: comma-separated column meanings from: "
        + ", ".join(ALLOWED_LINE_COLUMNS),
    },
    "observer": {
        "force_bandwidth_hz": "bandwidth of the observer's hold model (held loads), Hz",
        "process_noise_n2_per_s": "hold model's random-walk intensity, N^2/s; overrides the above",
        "gate_sigma": "innovation that makes a sample suspect, in standard deviations",
        "rate_scale": "factor on the intensities of the observer's rate models (smooth loads)",
    },
    "limits": {
        "force_min_n": "lower end of the calibrated force range, N",
        "force_max_n": "upper end of the calibrated force range, N",
        "travel_m": "mechanical stop, largest |displacement| in m",
    },
}

#: Physical plausibility of the acquisition: far above any displacement transducer's
#: rate and any UART's speed, low enough that a typo (1e300) is caught.
MAX_SAMPLE_RATE_HZ = 10e6
MAX_BAUDRATE = 20_000_000
_MAX_PROFILE_BYTES = 2**20  # a profile is a page of TOML; more is not a profile
_ISO_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")


# --------------------------------------------------------------------------- helpers


def _show(value: object) -> str:
    """Render a value the way it would look in TOML (strings quoted)."""
    if isinstance(value, str):
        return _toml_string(value)
    return repr(value)


def _fail(table: str, key: str, value: object, rule: str) -> ProfileError:
    """Build the error for ``[table] key = value`` breaking ``rule``."""
    help_text = KEY_HELP.get(table, {}).get(key, "")
    suffix = f" ({help_text})" if help_text else ""
    return ProfileError(f"[{table}] {key} = {_show(value)}: {rule}{suffix}")


def _real(
    table: str,
    key: str,
    value: object,
    *,
    above: float | None = None,
    at_least: float | None = None,
    nonzero: bool = False,
) -> float:
    """Check that ``value`` is a finite real number obeying the bound; return it as float."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise _fail(table, key, value, "must be a number (write it without quotes)")
    try:
        number = float(value)
    except OverflowError:  # a whole number of hundreds of digits
        number = math.inf
    if not math.isfinite(number):
        raise _fail(table, key, value, "must be a finite number")
    if above is not None and not number > above:
        raise _fail(table, key, value, f"must be > {above:g}")
    if at_least is not None and not number >= at_least:
        raise _fail(table, key, value, f"must be >= {at_least:g}")
    if nonzero and number == 0.0:
        raise _fail(table, key, value, "must not be 0")
    return number


def _integer(table: str, key: str, value: object, *, at_least: int) -> int:
    """Check that ``value`` is an integer (not a bool, not a float) >= ``at_least``."""
    if isinstance(value, bool) or not isinstance(value, int):
        raise _fail(table, key, value, "must be a whole number (no quotes, no decimal point)")
    if value < at_least:
        raise _fail(table, key, value, f"must be >= {at_least}")
    return int(value)


def _text(table: str, key: str, value: object) -> str:
    """Check that ``value`` is a string."""
    if not isinstance(value, str):
        raise _fail(table, key, value, "must be a string in double quotes")
    return value


def _set(obj: object, name: str, value: object) -> None:
    """Store a normalised value on a frozen dataclass during ``__post_init__``."""
    object.__setattr__(obj, name, value)


# --------------------------------------------------------------------------- sections


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

    def with_updates(self, **sections: Any) -> CellProfile:
        """Return a copy with whole sections replaced, e.g. ``with_updates(plant=new_plant)``.

        The copy is validated again. Unknown section names raise ProfileError.
        """
        for name in sections:
            if name not in _SECTIONS:
                raise ProfileError(f"no section named {name!r}{_suggest(name, _SECTIONS)}")
        return dataclasses.replace(self, **sections)


_FN_MIN_HZ = 1e-3  # slowest natural frequency accepted (a 17-minute period)
_DISPLACEMENT_MAX_M = 1.0  # larger noise or count: a unit error


# --------------------------------------------------------------------------- reading


def _suggest(word: str, known: Any) -> str:
    """Return ``"; did you mean 'x'?"`` for the closest known word, or ``""``."""
    close = difflib.get_close_matches(word, list(known), n=1, cutoff=0.6)
    return f"; did you mean {close[0]!r}?" if close else ""


def _section_from_table(name: str, table: Mapping[str, Any]) -> Any:
    """Build one section from its TOML table, refusing unknown and missing keys."""
    cls = _SECTIONS[name]
    fields = {f.name: f for f in dataclasses.fields(cls)}
    for key in table:
        if key not in fields:
            raise ProfileError(
                f"[{name}] unknown key {key!r}{_suggest(key, fields)} "
                f"(known keys: {', '.join(fields)})"
            )
    missing = [
        key
        for key, f in fields.items()
        if key not in table
        and f.default is dataclasses.MISSING
        and f.default_factory is dataclasses.MISSING
    ]
    if missing:
        key = missing[0]
        raise ProfileError(f"[{name}] {key} is missing: add it ({KEY_HELP[name][key]})")
    values = dict(table)
    date = values.get("calibration_date")
    is_plain_date = isinstance(date, datetime.date) and not isinstance(date, datetime.datetime)
    if name == "cell" and is_plain_date:
        values["calibration_date"] = date.isoformat()  # an unquoted TOML date is accepted
    return cls(**values)


def profile_from_mapping(data: Mapping[str, Any], origin: str = "<mapping>") -> CellProfile:
    """Validate a parsed TOML document (nested mappings) and return the profile.

    ``origin`` prefixes every error message (normally the file name).
    Raises ProfileError naming the table and key of the first problem found.
    """
    try:
        return _profile_from_mapping(data)
    except ProfileError as exc:
        raise ProfileError(f"{origin}: {exc}") from exc


def _profile_from_mapping(data: Mapping[str, Any]) -> CellProfile:
    if not isinstance(data, Mapping):
        raise ProfileError(f"expected a table of tables, got {type(data).__name__}")
    top_keys = ("format", "version", *_SECTIONS)
    for key in data:
        if key not in top_keys:
            kind = "table" if isinstance(data[key], Mapping) else "key"
            raise ProfileError(
                f"unknown {kind} {key!r}{_suggest(key, top_keys)} "
                f"(known: format, version, {', '.join(f'[{s}]' for s in _SECTIONS)})"
            )
    if "format" not in data:
        raise ProfileError(f'format is missing: add format = "{PROFILE_FORMAT}" at the top')
    if data["format"] != PROFILE_FORMAT:
        raise ProfileError(
            f"format = {_show(data['format'])}: not a cell profile; expected "
            f'format = "{PROFILE_FORMAT}"'
        )
    if "version" not in data:
        raise ProfileError(f"version is missing: add version = {PROFILE_VERSION}")
    version = data["version"]
    if isinstance(version, bool) or not isinstance(version, int):
        raise ProfileError(f"version = {_show(version)}: must be a whole number, e.g. 1")
    if version not in SUPPORTED_VERSIONS:
        readable = ", ".join(str(v) for v in SUPPORTED_VERSIONS)
        hint = "; a newer forcelens is needed to read it" if version > PROFILE_VERSION else ""
        raise ProfileError(
            f"version = {version}: this software reads profile version {readable} only{hint}"
        )
    sections: dict[str, Any] = {}
    for name in _SECTIONS:
        table = data.get(name)
        if table is None:
            if name not in _OPTIONAL_TABLES:
                raise ProfileError(f"table [{name}] is missing: add it")
            table = {}
        if not isinstance(table, Mapping):
            raise ProfileError(f"{name} = {_show(table)}: must be a table, written [{name}]")
        sections[name] = _section_from_table(name, table)
    return CellProfile(**sections)


def load_profile(path: str | os.PathLike[str]) -> CellProfile:
    """Read and validate the profile at ``path``.

    Raises ProfileError (file name first in the message) for bad TOML or bad
    content; OSError if the file cannot be read.
    """
    origin = os.fspath(path)
    st = os.stat(path)  # FileNotFoundError and the like name the path themselves
    if not stat.S_ISREG(st.st_mode):
        raise ProfileError(f"{origin}: not a regular file; a profile is a TOML file")
    if st.st_size > _MAX_PROFILE_BYTES:
        raise ProfileError(
            f"{origin}: {st.st_size} bytes; a profile is at most {_MAX_PROFILE_BYTES} bytes"
        )
    with open(path, "rb") as handle:
        try:
            data = tomllib.load(handle)
        except tomllib.TOMLDecodeError as exc:
            raise ProfileError(f"{origin}: not valid TOML: {exc}") from exc
        except RecursionError:
            raise ProfileError(f"{origin}: TOML nested too deeply to be a profile") from None
    return profile_from_mapping(data, origin=origin)


def default_demo_profile() -> CellProfile:
    """Return the built-in demo profile (an invented cell, ``estimator/data/demo-cell.toml``)."""
    resource = importlib.resources.files("estimator").joinpath("data", "demo-cell.toml")
    text = resource.read_text(encoding="utf-8")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProfileError(f"estimator/data/demo-cell.toml: not valid TOML: {exc}") from exc
    return profile_from_mapping(data, origin="estimator/data/demo-cell.toml")


# --------------------------------------------------------------------------- writing

_ESCAPES = {
    '"': '\\"',
    "\\": "\\\\",
    "\b": "\\b",
    "\t": "\\t",
    "\n": "\\n",
    "\f": "\\f",
    "\r": "\\r",
}


def _toml_string(text: str) -> str:
    """Quote ``text`` as a TOML basic string."""
    out = []
    for char in text:
        if char in _ESCAPES:
            out.append(_ESCAPES[char])
        elif ord(char) < 0x20 or ord(char) == 0x7F:
            out.append(f"\\u{ord(char):04X}")
        else:
            out.append(char)
    return '"' + "".join(out) + '"'


def _toml_value(value: object) -> str:
    """Write one scalar; floats use repr() so they read back bit for bit."""
    if isinstance(value, bool):  # never produced by a valid profile; kept for safety
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ProfileError(f"cannot write the non-finite number {value!r}")
        return repr(value)
    if isinstance(value, str):
        return _toml_string(value)
    raise ProfileError(f"cannot write a {type(value).__name__} to a profile")


_HEADER = f"""\
# forcelens cell profile ({PROFILE_FORMAT}, version {PROFILE_VERSION}).
# Units are SI throughout: kg, m, N, s, Hz, V; N/m for stiffness, N^2/s for
# process noise. Keys ending in _u_<unit> or _u are standard uncertainties
# (coverage factor k=1). Every key is described in docs/cell-profile.md.
"""


def profile_to_toml(profile: CellProfile) -> str:
    """Return the TOML text of ``profile``: header, ``format``, ``version``, one table per section.

    Optional values that are None are left out; each key carries a comment with its unit.
    """
    if not isinstance(profile, CellProfile):
        raise ProfileError(f"expected a CellProfile, got {type(profile).__name__}")
    lines = [_HEADER, f"format = {_toml_string(PROFILE_FORMAT)}", f"version = {PROFILE_VERSION}"]
    for name in _SECTIONS:
        section = getattr(profile, name)
        rows = [
            (f.name, _toml_value(getattr(section, f.name)))
            for f in dataclasses.fields(section)
            if getattr(section, f.name) is not None
        ]
        width = max(len(f"{key} = {text}") for key, text in rows)
        lines.append("")
        lines.append(f"[{name}]")
        for key, text in rows:
            assignment = f"{key} = {text}"
            lines.append(f"{assignment.ljust(width)}  # {KEY_HELP[name][key]}")
    return "\n".join(lines) + "\n"


def save_profile(profile: CellProfile, path: str | os.PathLike[str]) -> None:
    """Write ``profile`` to ``path`` atomically (temporary file in the same folder, then rename).

    The text is parsed back before it is written and must give the same profile.
    An existing file keeps its permission bits; a new one gets 0o644.
    """
    text = profile_to_toml(profile)
    if profile_from_mapping(tomllib.loads(text), origin="<written text>") != profile:
        raise ProfileError("internal error: the written profile does not read back identically")
    target = Path(path)
    try:
        mode = target.stat().st_mode & 0o777
    except FileNotFoundError:
        mode = 0o644
    fd, tmp_name = tempfile.mkstemp(
        dir=target.parent,
        prefix=f".{target.name}.",
        suffix=".tmp",
    )
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as handle:
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
        os.chmod(tmp_name, mode)
        os.replace(tmp_name, target)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp_name)
        raise
