"""The ``flakebook`` command line (argparse), per the shared INTERFACE.md.

Thin: each command parses its options, calls core or store functions and prints. JSON goes to
stdout alone; messages and progress go to stderr. Exit codes: 0 done, 2 bad input or a refused
file, 1 an internal error, 130 cancelled.
"""

from __future__ import annotations

import argparse
import sys

from flakebook import INTERFACE_VERSION, __version__
from flakebook.cli import _common

# Each module has ``register(subparsers)`` that adds its commands; a command's parser sets
# ``func`` to a callable taking the parsed namespace and returning an exit code.
_COMMAND_MODULES = (
    "project",
    "desktop",
    "optics",
    "imaging",
    "spectra",
    "thermal",
    "demo",
    "report",
)


def build_parser() -> argparse.ArgumentParser:
    """The full argument parser with every command."""
    parser = _common.ArgumentParser(
        prog="flakebook",
        description="A notebook for atomically thin flakes: layer number, membranes, thermometry.",
    )
    parser.add_argument(
        "--version",
        action="version",
        version=f"flakebook {__version__} (interface {INTERFACE_VERSION})",
    )
    parser.add_argument("--debug", action="store_true", help="show tracebacks of internal errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    import importlib

    for name in _COMMAND_MODULES:
        module = importlib.import_module(f"flakebook.cli.{name}")
        module.register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit code."""
    _common.quiet_libraries()
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
        if args.command is None:
            # No command: start the desktop program.
            args = parser.parse_args(["open"])
    except SystemExit as exc:  # --help, --version, or a refused option (its message is out)
        return exc.code if isinstance(exc.code, int) else _common.EXIT_INPUT
    args.argv = list(sys.argv[1:] if argv is None else argv)  # for the error log
    return _common.run(args.func, args)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
