"""``flakebook report PROJECT --out FILE.html|FILE.pdf``: the campaign report.

Raman thermometry heats the sample with a laser. Follow your institution's laser-safety rules
and local regulations.
"""

from __future__ import annotations

import argparse

from flakebook.cli._common import add_format_option, emit, message


def register(sub: argparse._SubParsersAction) -> None:
    """Add ``report``."""
    p = sub.add_parser(
        "report",
        help="write the campaign report (HTML with embedded figures, or PDF)",
        description="Write a report of the campaign: summary, thermal conductivity versus "
        "layer number, the catalogue, one card per flake (micrograph, layer evidence, spectra "
        "and fits, holes, thermometry) and the methods actually used.",
    )
    p.add_argument("project", help="the project file")
    p.add_argument("--out", required=True, metavar="FILE", help="FILE.html or FILE.pdf")
    p.add_argument(
        "--select",
        default="all",
        metavar="WHICH",
        help="which flakes: all (default), sample:NAME, tag:TAG or thermal",
    )
    p.add_argument(
        "--paper", choices=("a4", "letter"), default="a4", help="PDF paper size (default a4)"
    )
    add_format_option(p)
    p.set_defaults(func=_report)


def _report(args: argparse.Namespace) -> int:
    from flakebook.render.report import write_report
    from flakebook.report.content import Selection
    from flakebook.store import Project

    selection = Selection.parse(args.select)  # a bad --select fails before the file is opened
    with Project.open(args.project, read_only=True) as project:
        summary = write_report(project, args.out, select=selection, paper=args.paper)
    for problem in summary["problems"]:
        message(f"note: {problem}")
    if not summary["flakes"]:
        message("note: the report holds no flake cards (no flakes in this selection)")
    message(f"report written: {summary['out']}")
    emit(args, summary, text=summary["out"])
    return 0
