"""The `forcelens` command line.

Each sub-command lives in its own module under `ui.commands` and exposes
``register(subparsers)``. Modules import heavy dependencies (Qt, SciPy) only
inside their run functions, so ``forcelens --help`` stays fast and never loads Qt.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
from collections.abc import Sequence

from ui.version import software_version

#: Sub-command modules, in the order ``--help`` lists them.
COMMAND_MODULES = (
    "demo",
    "live",
    "dashboard",
    "replay",
    "verify",
    "report",
    "audit",
    "impact",
    "runs",
    "export",
    "ports",
    "calibrate",
    "identify",
    "tune",
    "check",
    "simulate",
    "profile",
)


def build_parser() -> argparse.ArgumentParser:
    """Return the top-level parser with every sub-command registered."""
    parser = argparse.ArgumentParser(
        prog="forcelens",
        description=(
            "Live force, with its uncertainty, from a spring-mass-damper cell read by a "
            "displacement transducer over a serial line."
        ),
        epilog=(
            "Caution: force testing stores energy. Respect the cell's rated capacity, keep "
            "clear of pinch points and of parts that may fly, and follow your laboratory's "
            "procedures and local codes. forcelens does not replace accredited calibration."
        ),
    )
    parser.add_argument("--version", action="version", version=f"forcelens {software_version()}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMAND_MODULES:
        module = importlib.import_module(f"ui.commands.{name}")
        module.register(subparsers)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``forcelens`` console script; returns the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    #: the command line as given, for commands that record how they were run
    args.argv = list(sys.argv[1:] if argv is None else argv)
    if not getattr(args, "run", None):
        parser.print_help()
        return 2
    try:
        status = int(args.run(args) or 0)
        sys.stdout.flush()  # a closed pipe shows here, not at interpreter exit
        return status
    except KeyboardInterrupt:
        print("\ninterrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # the reader of our output went away (``forcelens runs | head``): stop quietly;
        # later writes to stdout go nowhere (Python's documented way, "Note on SIGPIPE")
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 1
    except (ValueError, OSError) as exc:
        # Our own error families subclass these; their messages name the problem.
        print(f"forcelens {args.command}: error: {exc}", file=sys.stderr)
        return 1
    except Exception as exc:  # a fault of forcelens: one line, the details in a file
        from ui.crash import EXIT_CRASH, fault_text

        line = fault_text(exc, args.argv, software_version())
        print(f"forcelens {args.command}: {line}", file=sys.stderr)
        return EXIT_CRASH


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
