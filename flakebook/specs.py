"""Text specs that the command line and the window both accept (pure Python, no Qt).

- layer numbers: a range ``1-10``, a list ``1,2,5`` or both ``1-3,7`` (:func:`parse_layer_range`);
- values per channel: ``r=0.012,g=0.011,b=0.013`` (:func:`parse_channel_values`);
- a number that must be positive (:func:`positive_float`).

The substrate stack ``SiO2:285,Si`` has its own module, :mod:`flakebook.substrate`; microscope
illumination and channel sets parse themselves (``Illumination.parse``, ``Channels.parse`` in
:mod:`flakebook.optics.microscope`). Bad text raises :class:`~flakebook.errors.InputError` naming
the value, what is wrong and what would be accepted.
"""

from __future__ import annotations

import math

from flakebook.errors import InputError


def parse_layer_range(text: str, *, max_layers: int = 100) -> list[int]:
    """Parse ``--layers`` as a range ``1-10`` or a list ``1,2,5`` (also ``1-3,7``).

    Returns the layer numbers sorted, each once; every one must lie in 1..``max_layers``. An
    empty item (``1,,2``, a trailing comma) is refused, not skipped: it is usually a typing slip.
    """
    accepted = (
        f"accepted: a range like 1-10 or a list like 1,2,5 (whole numbers from 1 to {max_layers})"
    )
    out: list[int] = []
    parts = [part.strip() for part in str(text).split(",")]
    try:
        for part in parts:
            if not part:
                raise ValueError
            if "-" in part:
                lo, hi = (int(p) for p in part.split("-", 1))
                if hi < lo:
                    raise ValueError
                out.extend(range(lo, hi + 1))
            else:
                out.append(int(part))
    except ValueError:
        what = "has an empty item" if "" in parts else "is not a layer range"
        raise InputError(f"--layers {text!r} {what}; {accepted}") from None
    if min(out) < 1 or max(out) > max_layers:
        raise InputError(f"--layers {text!r}: a layer number outside 1 to {max_layers}; {accepted}")
    return sorted(set(out))


def parse_channel_values(text: str, option: str, channels: tuple[str, ...]) -> dict[str, float]:
    """Parse ``r=0.1,g=0.2,b=0.3`` into ``{channel: value}`` (finite numbers).

    ``option`` names the field in messages (``--contrast``, ``Dark offset``); ``channels`` are the
    names the messages offer as an example.
    """
    out: dict[str, float] = {}
    for part in str(text).split(","):
        part = part.strip()
        if not part:
            continue
        if "=" not in part:
            raise InputError(
                f"{option} {text!r}: {part!r} lacks a channel name; accepted: "
                + ",".join(f"{c}=VALUE" for c in channels)
            )
        key, value = (s.strip() for s in part.split("=", 1))
        try:
            out[key] = float(value)
        except ValueError:
            raise InputError(f"{option}: {value!r} for channel {key} is not a number") from None
        if not math.isfinite(out[key]):
            raise InputError(f"{option}: {value!r} for channel {key} is not a finite number")
    if not out:
        raise InputError(
            f"{option} is empty; accepted e.g. " + ",".join(f"{c}=0.1" for c in channels)
        )
    return out


def positive_float(name: str, value: float, *, allow_zero: bool = False) -> float:
    """Check a number option is finite and positive (or zero where allowed)."""
    if not math.isfinite(value) or value < 0 or (value == 0 and not allow_zero):
        need = "zero or a positive number" if allow_zero else "a positive number"
        raise InputError(f"{name} {value!r} is not allowed; accepted: {need}")
    return value
