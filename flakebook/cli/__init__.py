"""The ``flakebook`` command line (argparse), per the shared INTERFACE.md.

Thin: each command parses its options, calls core or store functions and prints. JSON goes to
stdout alone; messages and progress go to stderr. Exit codes: 0 done, 2 bad input or a refused
file, 1 an internal error, 130 cancelled.
"""

from __future__ import annotations

import sys

from flakebook import INTERFACE_VERSION, __version__

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

# The module that registers each command, so that a command's run (and ``--version``) imports
# only its own module (tests/cli/test_startup.py checks this table against the modules).
COMMANDS = {
    "new": "project",
    "info": "project",
    "export": "project",
    "pack": "project",
    "relink": "project",
    "recompute": "project",
    "assign": "project",
    "handoff": "project",
    "open": "desktop",
    "materials": "optics",
    "contrast": "optics",
    "layers": "optics",
    "calibrate": "optics",
    "absorptance": "optics",
    "survey": "imaging",
    "spectrum": "spectra",
    "calibrate-rules": "spectra",
    "kappa": "thermal",
    "series": "thermal",
    "demo": "demo",
    "report": "report",
}


def build_parser(modules: tuple[str, ...] | None = None):
    """The argument parser with every command, or with the commands of ``modules`` only."""
    from flakebook.cli import _common

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

    for name in _COMMAND_MODULES if modules is None else modules:
        module = importlib.import_module(f"flakebook.cli.{name}")
        module.register(sub)
    return parser


def _modules_for(argv: list[str]) -> tuple[str, ...] | None:
    """The command modules a command line needs (None: all of them, to list every command)."""
    for token in argv:
        if token == "--debug":
            continue
        if token.startswith("-"):
            # --version needs no command; --help and anything unknown list them all
            return () if token == "--version" else None
        return (COMMANDS[token],) if token in COMMANDS else None
    return (COMMANDS["open"],)  # no command: the desktop program


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit code."""
    from flakebook.cli import _common

    _common.quiet_libraries()
    args_in = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser(_modules_for(args_in))
    try:
        args = parser.parse_args(args_in)
        if args.command is None:
            # No command: start the desktop program.
            args = parser.parse_args(["open"])
    except SystemExit as exc:  # --help, --version, or a refused option (its message is out)
        return exc.code if isinstance(exc.code, int) else _common.EXIT_INPUT
    args.argv = args_in  # for the error log
    return _common.run(args.func, args)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
