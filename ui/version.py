"""The software version, as installed, and the library versions a replay depends on."""

from collections.abc import Mapping
from importlib import metadata

__all__ = ["library_changes", "platform_changes", "platform_text", "software_version"]


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


def platform_text(description: Mapping[str, object]) -> str:
    """The interpreter and platform a run was recorded on, as people read it
    (``"Python 3.11.7 (CPython) on Linux-6.8-x86_64-with-glibc2.36"``); "" when the run
    (recorded before it was kept) has none."""
    facts = description.get("platform")
    if not isinstance(facts, Mapping) or "python" not in facts:
        return ""
    text = f"Python {facts['python']}"
    if facts.get("implementation"):
        text += f" ({facts['implementation']})"
    if facts.get("system"):
        text += f" on {facts['system']}"
    return text


def platform_changes(recorded: Mapping[str, str] | None) -> list[str]:
    """The Python version or the processor architecture now, where it differs from
    ``recorded`` (run.json ``platform``), as ``"Python 3.12.1 (run: 3.11.7)"``; empty when
    the run kept none. (The operating system's version is not compared: it does not
    compute the estimates.)"""
    from daq.runs.layout import platform_facts

    now = platform_facts()
    names = {"python": "Python", "machine": "machine"}
    return [
        f"{said} {now[key]} (run: {recorded[key]})"
        for key, said in names.items()
        if key in (recorded or {}) and recorded[key] != now[key]  # type: ignore[index]
    ]
