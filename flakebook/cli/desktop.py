"""``flakebook open``: the desktop program."""

from __future__ import annotations

import argparse


def register(sub: argparse._SubParsersAction) -> None:
    """Add ``open``."""
    p = sub.add_parser("open", help="open a project in the desktop program")
    p.add_argument("project", nargs="?", help="the project file (.flakebook)")
    p.add_argument(
        "--snapshot",
        metavar="FILE.png",
        help="render the window offscreen to a PNG and exit (opens the project read-only)",
    )
    p.add_argument(
        "--show",
        default=None,
        help="the view to render: image | catalogue | flake:ID | spectra:ID | thermal:ID | "
        "kappa | chip:SAMPLE (the sample's chip map) | map:ID (a stored Raman map)",
    )
    p.add_argument("--read-only", action="store_true", help="open the project read-only")
    p.set_defaults(func=_open)


def _open(args: argparse.Namespace) -> int:
    from flakebook.gui.app import run

    return run(args.project, snapshot=args.snapshot, show=args.show, read_only=args.read_only)
