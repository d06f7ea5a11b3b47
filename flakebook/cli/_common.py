"""Shared pieces of the command line: output formats, errors, progress and cancel."""

from __future__ import annotations

import argparse
import csv
import io
import json
import math
import signal
import sys
import threading
import traceback
from collections.abc import Callable, Sequence
from typing import Any

from flakebook.errors import Cancelled, FlakebookError, InputError

# The parsers the window shares live below both (re-exported for the commands).
from flakebook.specs import parse_layer_range, positive_float  # noqa: F401

EXIT_OK = 0
EXIT_INTERNAL = 1
EXIT_INPUT = 2
EXIT_CANCELLED = 130


def add_format_option(parser: argparse.ArgumentParser, *, csv_ok: bool = False) -> None:
    """Add ``--format`` (json, table and, for tabular results, csv)."""
    choices = ["json", "table", "csv"] if csv_ok else ["json", "table"]
    parser.add_argument(
        "--format",
        choices=choices,
        default=None,
        help="output format (default: table on a terminal, json otherwise)",
    )


def output_format(args: argparse.Namespace) -> str:
    """The chosen output format, defaulting by whether stdout is a terminal."""
    fmt = getattr(args, "format", None)
    if fmt:
        return fmt
    return "table" if sys.stdout.isatty() else "json"


def _clean(value: Any) -> Any:
    """Make a value JSON-safe: NaN and inf become null, numpy scalars plain numbers."""
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_clean(v) for v in value]
    if hasattr(value, "tolist") and not isinstance(value, str | bytes):
        return _clean(value.tolist())
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def dumps(payload: Any) -> str:
    """JSON text of ``payload`` as the interface writes it (NaN as null)."""
    return json.dumps(_clean(payload), ensure_ascii=False, allow_nan=False)


def _fmt_cell(value: Any) -> str:
    if value is None:
        return "-"
    if isinstance(value, float):
        return f"{value:.6g}"
    if isinstance(value, list | tuple):
        if len(value) > 6:
            return "[" + ", ".join(_fmt_cell(v) for v in value[:6]) + ", ...]"
        return "[" + ", ".join(_fmt_cell(v) for v in value) + "]"
    if isinstance(value, dict):
        return ", ".join(f"{k}={_fmt_cell(v)}" for k, v in value.items())
    return str(value)


def table_text(rows: Sequence[dict[str, Any]], columns: Sequence[str] | None = None) -> str:
    """A plain aligned text table of ``rows`` (dicts), for a terminal."""
    rows = list(rows)
    if not rows:
        return "(none)"
    if columns is None:
        columns = list(rows[0].keys())
    cells = [[_fmt_cell(r.get(c)) for c in columns] for r in rows]
    widths = [max(len(c), *(len(row[i]) for row in cells)) for i, c in enumerate(columns)]
    lines = ["  ".join(c.ljust(w) for c, w in zip(columns, widths))]
    lines.append("  ".join("-" * w for w in widths))
    lines.extend("  ".join(v.ljust(w) for v, w in zip(row, widths)) for row in cells)
    return "\n".join(lines)


def csv_text(rows: Sequence[dict[str, Any]], columns: Sequence[str] | None = None) -> str:
    """CSV text of ``rows``; lists and dicts are written as JSON in their cell."""
    rows = list(rows)
    if columns is None:
        columns = list(rows[0].keys()) if rows else []
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(columns)
    for r in rows:
        out = []
        for c in columns:
            v = _clean(r.get(c))
            if isinstance(v, list | dict):
                v = json.dumps(v)
            out.append("" if v is None else v)
        writer.writerow(out)
    return buf.getvalue()


def emit(
    args: argparse.Namespace,
    payload: dict[str, Any],
    *,
    rows: Sequence[dict[str, Any]] | None = None,
    columns: Sequence[str] | None = None,
    text: str | None = None,
) -> None:
    """Print a result: JSON of ``payload``, or a table/CSV of ``rows`` (or ``text``)."""
    fmt = output_format(args)
    if fmt == "json":
        sys.stdout.write(dumps(payload) + "\n")
    elif fmt == "csv":
        sys.stdout.write(csv_text(rows if rows is not None else [payload], columns))
    else:
        if text is not None:
            sys.stdout.write(text.rstrip("\n") + "\n")
        else:
            sys.stdout.write(table_text(rows if rows is not None else [payload], columns) + "\n")
    sys.stdout.flush()


def message(text: str) -> None:
    """A message for the user, on stderr."""
    sys.stderr.write(text.rstrip("\n") + "\n")
    sys.stderr.flush()


def short(text: str, lines: int = 3) -> str:
    """At most ``lines`` lines of ``text``."""
    parts = [p for p in str(text).strip().splitlines() if p.strip()]
    return "\n".join(parts[:lines]) if parts else "error"


class Progress:
    """Progress on stderr for long operations: ``progress(fraction, text)``."""

    def __init__(self, enabled: bool | None = None) -> None:
        self.enabled = sys.stderr.isatty() if enabled is None else enabled
        self._last = -1

    def __call__(self, fraction: float, text: str = "") -> None:
        if not self.enabled:
            return
        pct = int(round(100 * max(0.0, min(1.0, fraction))))
        if pct == self._last:
            return
        self._last = pct
        bar = "#" * (pct // 4)
        sys.stderr.write(f"\r[{bar:<25}] {pct:3d}% {text[:40]:<40}")
        if pct >= 100:
            sys.stderr.write("\n")
        sys.stderr.flush()


def cancel_event() -> threading.Event:
    """An event that Ctrl-C sets (in addition to raising KeyboardInterrupt)."""
    event = threading.Event()
    previous = signal.getsignal(signal.SIGINT)

    def handler(signum, frame):  # pragma: no cover - exercised by subprocess tests
        event.set()
        signal.signal(signal.SIGINT, previous)
        raise KeyboardInterrupt

    try:
        signal.signal(signal.SIGINT, handler)
    except ValueError:  # not in the main thread
        pass
    return event


def run(func: Callable[[argparse.Namespace], int | None], args: argparse.Namespace) -> int:
    """Call a command, mapping errors to the interface's exit codes and short messages."""
    debug = getattr(args, "debug", False)
    try:
        code = func(args)
        return EXIT_OK if code is None else int(code)
    except InputError as exc:
        message(f"flakebook: {short(str(exc))}")
        return EXIT_INPUT
    except Cancelled:
        message("flakebook: cancelled")
        return EXIT_CANCELLED
    except KeyboardInterrupt:
        message("flakebook: cancelled")
        return EXIT_CANCELLED
    except FlakebookError as exc:
        # Refused files (a newer project, a locked project) and similar: exit 2 as well.
        message(f"flakebook: {short(str(exc))}")
        return EXIT_INPUT
    except BrokenPipeError:  # pragma: no cover
        return EXIT_OK
    except Exception as exc:  # noqa: BLE001 - the one place that catches everything
        if debug:
            traceback.print_exc()
        else:
            message(
                f"flakebook: internal error: {type(exc).__name__}: {short(str(exc), 1)}\n"
                "run again with --debug for details"
            )
        return EXIT_INTERNAL
