"""The software version, as installed."""

from importlib import metadata


def software_version() -> str:
    """Return the installed forcelens version, or ``"0+unknown"`` when not installed."""
    try:
        return metadata.version("forcelens")
    except metadata.PackageNotFoundError:
        return "0+unknown"
