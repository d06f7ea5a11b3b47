"""Project commands: new, demo, info, export, pack, relink, recompute, assign, handoff, series."""

from __future__ import annotations

import argparse


def register(sub: argparse._SubParsersAction) -> None:
    """Add the project commands to the parser."""
