"""``flakebook demo DIR``: write the invented demo campaign into a folder."""

from __future__ import annotations

import argparse

from flakebook.cli._common import Progress, cancel_event, emit, message


def register(sub: argparse._SubParsersAction) -> None:
    """Add ``demo``."""
    p = sub.add_parser(
        "demo",
        help="write the demo campaign (an invented scenario) into a folder",
        description="Write the demo project, its micrographs and spectra into DIR. The chips, "
        "flakes and values are invented; the images are rendered from flakebook's own models.",
    )
    p.add_argument("dir", help="folder to write into (created if missing)")
    p.add_argument(
        "--format",
        choices=["json", "table"],
        default=None,
        help="output format (default: table on a terminal, json otherwise)",
    )
    p.set_defaults(func=_demo)


def _demo(args: argparse.Namespace) -> int:
    from flakebook.demo import build_demo

    path = build_demo(args.dir, progress=Progress(), cancel=cancel_event())
    message(f"demo project written: {path}")
    emit(args, {"project": str(path)}, text=str(path))
    return 0
