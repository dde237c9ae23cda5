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

The package: `keys` (the vocabulary and limits), `checks` (one value at a time),
`sections` (the dataclasses), `read`, `write` and `toml_text` (scalars as written).
"""

from __future__ import annotations

from estimator.errors import ProfileError
from estimator.profile.keys import (
    ALLOWED_FRAMINGS,
    ALLOWED_LINE_COLUMNS,
    ALLOWED_PARITIES,
    ALLOWED_STOP_BITS,
    KEY_HELP,
    PROFILE_FORMAT,
    PROFILE_VERSION,
    SUPPORTED_VERSIONS,
)
from estimator.profile.read import default_demo_profile, load_profile, profile_from_mapping
from estimator.profile.sections import (
    AcquisitionSection,
    CellInfo,
    CellProfile,
    LimitsSection,
    ObserverSection,
    PlantSection,
    TransducerSection,
)
from estimator.profile.write import profile_to_toml, save_profile

__all__ = [
    "ALLOWED_FRAMINGS",
    "ALLOWED_LINE_COLUMNS",
    "ALLOWED_PARITIES",
    "ALLOWED_STOP_BITS",
    "KEY_HELP",
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
