"""The cell profile's vocabulary: its format and version, the values some keys allow, one
help line per key (for error messages, the writer's comments and docs/cell-profile.md),
and the limits of what is physically plausible."""

from __future__ import annotations

import re

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
_FN_MIN_HZ = 1e-3  # slowest natural frequency accepted (a 17-minute period)
_DISPLACEMENT_MAX_M = 1.0  # larger noise or count: a unit error
