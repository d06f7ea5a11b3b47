"""Shared pieces of the command line: output formats, errors, progress and cancel."""

from __future__ import annotations

import argparse
import csv
import datetime
import io
import json
import math
import os
import re
import signal
import sys
import threading
import traceback
import warnings
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from flakebook.errors import Cancelled, FlakebookError, InputError

# The parsers the window shares live below both (re-exported for the commands).
from flakebook.specs import parse_layer_range, positive_float  # noqa: F401
from flakebook.wording import number_text, probability_text

EXIT_OK = 0
EXIT_INTERNAL = 1
EXIT_INPUT = 2
EXIT_CANCELLED = 130

# A token such as ``-inf``, ``-nan`` or ``-1e-3`` is a value, not an option (argparse takes only
# ``-1`` and ``-1.5`` for negative numbers).
_NUMBER_TOKEN = re.compile(
    r"^-(inf|infinity|nan|\d+\.?\d*[eE][+-]?\d+|\.\d+[eE][+-]?\d+)$", re.IGNORECASE
)


class ArgumentParser(argparse.ArgumentParser):
    """argparse with the interface's messages: a bad value or a missing option is refused in at
    most three lines (the option, what is wrong, what is accepted) with exit 2, not argparse's
    usage text; numbers must be finite."""

    def _parse_optional(self, arg_string):  # noqa: D401 - argparse hook
        if _NUMBER_TOKEN.match(arg_string) and arg_string not in self._option_string_actions:
            return None
        return super()._parse_optional(arg_string)

    def _get_value(self, action, arg_string):
        if action.type in (float, int):
            return _number(action, arg_string)
        return super()._get_value(action, arg_string)

    def error(self, message: str):  # type: ignore[override]
        text = message[len("argument ") :] if message.startswith("argument ") else message
        command = self.prog
        self.exit(
            EXIT_INPUT,
            f"{command}: {text}\n'{command} --help' lists the accepted options\n",
        )


def _accepted(action: argparse.Action, what: str) -> str:
    """``accepted: ...`` for an option's value, from its help and default."""
    helptext = action.help if isinstance(action.help, str) else ""
    helptext = helptext.split(" (default")[0].strip().rstrip(".")
    example = ""
    if isinstance(action.default, int | float) and not isinstance(action.default, bool):
        example = f", e.g. {action.default:g}"
    return f"accepted: {what}" + (f" ({helptext})" if helptext else "") + example


def _number(action: argparse.Action, text: str) -> float | int:
    """A finite float or a whole number for ``action``, or argparse's error with our words."""
    name = "/".join(action.option_strings) or action.metavar or action.dest
    if action.type is int:
        try:
            return int(text)
        except ValueError:
            raise argparse.ArgumentError(
                None,
                f"{name}: {text!r} is not a whole number; {_accepted(action, 'a whole number')}",
            ) from None
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentError(
            None, f"{name}: {text!r} is not a number; {_accepted(action, 'a number')}"
        ) from None
    if not math.isfinite(value):
        raise argparse.ArgumentError(
            None, f"{name}: {text!r} is not a finite number; {_accepted(action, 'a finite number')}"
        )
    return value


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


_PLAIN_NUMBERS = {float, int}


def _clean(value: Any) -> Any:
    """Make a value JSON-safe: NaN and inf become null, numpy scalars plain numbers."""
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        if value and set(map(type, value)) <= _PLAIN_NUMBERS:
            # a list of plain numbers (most of a result's bulk) without a call per item
            try:
                if all(map(math.isfinite, value)):
                    return list(value)
            except OverflowError:  # an int too large for a float: item by item below
                pass
        return [_clean(v) for v in value]
    if hasattr(value, "tolist") and not isinstance(value, str | bytes):
        return _clean(value.tolist())
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def dumps(payload: Any) -> str:
    """JSON text of ``payload`` as the interface writes it (NaN as null)."""
    return json.dumps(_clean(payload), ensure_ascii=False, allow_nan=False)


def _is_probability(column: str) -> bool:
    return column == "probability" or column.startswith("p_") or column.endswith("_probability")


def _fmt_cell(value: Any, column: str = "") -> str:
    """A table cell: probabilities as 0.76 / < 0.01, other numbers to 4 significant figures
    (the table is for reading; JSON and CSV keep full precision)."""
    if value is None:
        return "-"
    if isinstance(value, float | int) and not isinstance(value, bool) and _is_probability(column):
        return probability_text(value)
    if isinstance(value, float):
        return number_text(value)
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
    cells = [[_fmt_cell(r.get(c), c) for c in columns] for r in rows]
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


def quiet_libraries() -> None:
    """Keep OpenCV's own log lines (e.g. a decoder's complaint about a damaged file, which
    flakebook reports in its words) off the terminal, in this process and its workers."""
    os.environ.setdefault("OPENCV_LOG_LEVEL", "SILENT")
    cv2 = sys.modules.get("cv2")
    if cv2 is not None:
        try:
            cv2.utils.logging.setLogLevel(cv2.utils.logging.LOG_LEVEL_SILENT)
        except AttributeError:  # pragma: no cover - older OpenCV
            pass


def log_path() -> Path:
    """Where internal errors are logged: the user's state folder (XDG_STATE_HOME, else
    ~/.local/state; LOCALAPPDATA on Windows), ``flakebook/errors.log``."""
    base = os.environ.get("XDG_STATE_HOME") or (
        os.environ.get("LOCALAPPDATA") if os.name == "nt" else None
    )
    root = Path(base) if base else Path.home() / ".local" / "state"
    return root / "flakebook" / "errors.log"


_LOG_LIMIT = 1_000_000  # bytes kept in the log (the oldest entries go first)


def write_error_log(exc: BaseException, argv: Sequence[str] | None = None) -> Path | None:
    """Append ``exc``'s traceback (with the time, the command line ``argv`` and the version) to
    the error log; returns its path, or None when it cannot be written."""
    from flakebook import __version__

    path = log_path()
    entry = (
        f"--- {datetime.datetime.now().isoformat(timespec='seconds')} flakebook {__version__}\n"
        f"command: flakebook {' '.join(map(str, sys.argv[1:] if argv is None else argv))}\n"
        + "".join(traceback.format_exception(exc))
    )
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        old = path.read_text(encoding="utf-8", errors="replace") if path.exists() else ""
        text = (old + entry)[-_LOG_LIMIT:]
        path.write_text(text, encoding="utf-8")
    except OSError:
        return None
    return path


def run(func: Callable[[argparse.Namespace], int | None], args: argparse.Namespace) -> int:
    """Call a command, mapping errors to the interface's exit codes and short messages.

    Library warnings (numpy's RuntimeWarning and the like) are not shown: results carry their
    own warnings for the user; ``--debug`` shows them."""
    debug = getattr(args, "debug", False)
    if debug:
        return _run(func, args, debug)
    import numpy as np

    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return _run(func, args, debug)


def _run(func, args, debug: bool) -> int:
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
            return EXIT_INTERNAL
        path = write_error_log(exc, getattr(args, "argv", None))
        where = (
            f"the traceback is in {path}; please send it to flakebook's maintainers with the "
            "command you ran"
            if path is not None
            else "the traceback could not be written to a log file"
        )
        message(
            "flakebook: internal error (a fault in flakebook, not in your input): "
            f"{type(exc).__name__}: {short(str(exc), 1)}\n"
            f"{where}\n"
            "run again with --debug to show the traceback here"
        )
        return EXIT_INTERNAL
