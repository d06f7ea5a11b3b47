"""Words and numbers as a user reads them, shared by the command line, the window and reports.

Pure Python (no Qt, no numpy needed). DESIGN.md "Text a user reads": methods are named with their
published source, counts in plain words, and numbers to the digits their uncertainty supports:

- :func:`value_with_error`: ``0.46912 ± 0.00015`` (the error to 2 significant figures, the value
  to the same decimal place);
- :func:`probability_text`: ``0.76``, ``< 0.01``, ``> 0.99`` (:func:`probability_phrase`:
  ``p = 0.76``, ``p > 0.99``);
- :func:`count_text` and :func:`record_count_text`: ``1 sample``, ``24 appearances of flakes``;
- :func:`layers_text`: ``3L``, and ``>15L`` for the "more than N_max" bin;
- :data:`CONTRAST_DEFINITION`: the one wording of the optical contrast.

JSON keeps full precision; these are for tables, messages and labels only.
"""

from __future__ import annotations

import math

#: The one wording of optical contrast (DESIGN.md conventions).
CONTRAST_DEFINITION = (
    "optical contrast C = (R_reference - R_flake)/R_reference per channel, the reference being "
    "the bare substrate in the same image; positive when the flake is darker"
)

#: How a camera channel's contrast integrates over its band (said beside the definition where a
#: band is used).
CONTRAST_BAND_NOTE = (
    "over a channel's band, R is weighted by the illumination spectrum I and the channel "
    "sensitivity S: C = 1 - ∫R_flake I S / ∫R_reference I S"
)

#: The name of the level a camera reads with no light, subtracted once from every pixel.
DARK_OFFSET = "dark offset"

# Plain nouns (singular, plural) of the project's record kinds.
RECORD_NOUNS: dict[str, tuple[str, str]] = {
    "sample": ("sample", "samples"),
    "image": ("image", "images"),
    "flake": ("flake", "flakes"),
    "appearance": ("appearance of a flake", "appearances of flakes"),
    "terrace": ("terrace", "terraces"),
    "hole": ("hole", "holes"),
    "flake_hole": ("flake-hole pair", "flake-hole pairs"),
    "spectrum": ("spectrum", "spectra"),
    "beam_profile": ("beam profile", "beam profiles"),
    "evidence": ("piece of layer evidence", "pieces of layer evidence"),
    "assignment": ("layer assignment", "layer assignments"),
    "thermometry_series": ("thermometry series", "thermometry series"),
    "thermometry_result": ("thermal-conductivity result", "thermal-conductivity results"),
    "external_result": ("result from an outside analysis", "results from outside analyses"),
    "calibration": ("calibration", "calibrations"),
}


def count_text(n: int, singular: str, plural: str | None = None) -> str:
    """``1 sample``, ``2 samples``, ``0 samples`` (``plural`` defaults to singular + s)."""
    word = singular if n == 1 else (plural or singular + "s")
    return f"{n} {word}"


def record_count_text(kind: str, n: int) -> str:
    """A count of project records in plain words: ``24 appearances of flakes``."""
    singular, plural = RECORD_NOUNS.get(kind, (kind.replace("_", " "), None))  # type: ignore[assignment]
    return count_text(n, singular, plural)


def number_text(value: float | int | None, digits: int = 4) -> str:
    """A number without a known uncertainty, to ``digits`` significant figures (``-`` for
    None or NaN); whole numbers stay whole."""
    if value is None:
        return "-"
    if isinstance(value, bool):
        return str(value)
    if isinstance(value, int):
        return str(value)
    v = float(value)
    if math.isnan(v):
        return "-"
    if math.isinf(v):
        return "inf" if v > 0 else "-inf"
    return f"{v:.{digits}g}"


def value_with_error(
    value: float, error: float | None, unit: str = "", *, signed: bool = False
) -> str:
    """``value ± error`` with the error to 2 significant figures and the value to the same
    decimal place: ``0.46912 ± 0.00015``, ``285.3 ± 2.1 nm``, ``(1.230 ± 0.045)e-07``.

    Without a usable error (None, 0, NaN) the value is given to 4 significant figures. ``signed``
    writes a ``+`` before positive values (contrasts)."""
    suffix = f" {unit}" if unit else ""
    sign = "+" if signed else ""
    if value is None or not math.isfinite(float(value)):
        return "-" + suffix
    value = float(value)
    if error is None or not math.isfinite(float(error)) or float(error) <= 0:
        return f"{value:{sign}.4g}{suffix}"
    error = float(error)
    exp = math.floor(math.log10(error))
    decimals = 1 - exp  # two significant figures of the error
    if round(error, decimals) >= 10 ** (exp + 1):  # 9.96 -> 10: one figure fewer
        decimals -= 1
    magnitude = math.floor(math.log10(abs(value))) if value != 0 else exp
    if decimals > 6 or magnitude >= 6 or decimals < -5:
        # A common power of ten: (m ± e)e+NN.
        power = magnitude if value != 0 else exp
        places = max(decimals + power, 0)
        m, e = value / 10**power, error / 10**power
        return f"({m:{sign}.{places}f} ± {e:.{places}f})e{power:+03d}{suffix}"
    if decimals <= 0:
        step = 10 ** (-decimals)
        v, e = round(value / step) * step, round(error / step) * step
        return f"{v:{sign}.0f} ± {e:.0f}{suffix}"
    return f"{value:{sign}.{decimals}f} ± {error:.{decimals}f}{suffix}"


def probability_text(p: float | None) -> str:
    """A probability to 2 decimals: ``0.76``; ``< 0.01`` and ``> 0.99`` at the ends (``-`` for
    None or NaN). Posteriors are not known better than that."""
    if p is None:
        return "-"
    p = float(p)
    if math.isnan(p):
        return "-"
    if p < 0.005:
        return "< 0.01"
    if p > 0.995:
        return "> 0.99"
    return f"{p:.2f}"


def probability_phrase(p: float | None, name: str = "p") -> str:
    """``p = 0.76``, ``p > 0.99``, ``p < 0.01`` (``p unknown`` for None or NaN)."""
    text = probability_text(p)
    if text == "-":
        return f"{name} unknown"
    return f"{name} {text}" if text[0] in "<>" else f"{name} = {text}"


def layers_text(n: int | None, max_layers: int) -> str:
    """A layer number as text: ``3L``; ``>15L`` for the bin N_max + 1 ("more than N_max")."""
    if n is None:
        return "-"
    n = int(n)
    return f">{max_layers}L" if n > max_layers else f"{n}L"
