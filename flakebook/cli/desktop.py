"""``flakebook open``: the desktop program."""

from __future__ import annotations

import argparse

from flakebook.cli._common import message


def register(sub: argparse._SubParsersAction) -> None:
    """Add ``open``."""
    p = sub.add_parser("open", help="open a project in the desktop program")
    p.add_argument("project", nargs="?", help="the project file (.flakebook)")
    p.add_argument("--snapshot", metavar="FILE.png", help="render the window to a PNG and exit")
    p.add_argument("--show", default=None, help="catalogue | flake:ID | spectra:ID | thermal:ID")
    p.set_defaults(func=_open)


def _open(args: argparse.Namespace) -> int:
    message("flakebook: the desktop program is not built yet; use the commands (flakebook --help)")
    return 0
