"""The software version, as installed, and the library versions a replay depends on."""

from collections.abc import Mapping
from importlib import metadata

__all__ = ["library_changes", "software_version"]


def software_version() -> str:
    """Return the installed forcelens version, or ``"0+unknown"`` when not installed."""
    try:
        return metadata.version("forcelens")
    except metadata.PackageNotFoundError:
        return "0+unknown"


def library_changes(recorded: Mapping[str, str] | None) -> list[str]:
    """Libraries installed now in another version than ``recorded`` (run.json
    ``libraries``), as ``"numpy 2.4.6 (run: 2.3.1)"``; empty when the run kept none."""
    from daq.runs.layout import library_versions  # NumPy: not at `forcelens --help`

    now = library_versions()
    return [
        f"{name} {now.get(name, 'not installed')} (run: {version})"
        for name, version in (recorded or {}).items()
        if now.get(name, "not installed") != version
    ]
