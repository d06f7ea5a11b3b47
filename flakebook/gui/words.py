"""How the window writes counts and numbers for people: plain-word counts ("2 samples,
14 images"), a value with its uncertainty rounded to the digits the uncertainty supports, and
probabilities to two decimals (DESIGN.md: numbers are shown to the digits their uncertainty
supports). No Qt: the reports can use it too.
"""

from __future__ import annotations

import math

from flakebook.wording import CONTRAST_DEFINITION, probability_text, record_count_text

__all__ = ["CONTRAST_DEFINITION", "p_text", "plural", "probability", "value_error"]


def plural(n: int, word: str) -> str:
    """``plural(1, "image") == "1 image"``, ``plural(14, "image") == "14 images"``; record kinds
    such as ``"flake_hole"`` in the words of flakebook.wording ("24 flake-hole pairs")."""
    return record_count_text(word, n)


def _digits_of(err: float, sig: int = 2) -> int:
    """Decimal places that give ``err`` ``sig`` significant figures."""
    return sig - 1 - math.floor(math.log10(abs(err)))


def value_error(value: float, error: float | None, unit: str = "", sig: int = 2) -> str:
    """``"0.762 ± 0.012"``: the error to ``sig`` significant figures and the value to the same
    decimal place (common practice, e.g. the rounding rule of the Particle Data Group's review
    uses one or two significant figures of the error). Very large or small numbers are written
    with a shared power of ten: ``"(9.2 ± 0.3) × 10⁻⁵"``. No error: the value to 3 significant
    figures."""
    suffix = f" {unit}" if unit else ""
    if value is None or not math.isfinite(value):
        return "–"
    if error is None or not math.isfinite(error) or error <= 0:
        return f"{value:.3g}{suffix}"
    exp = math.floor(math.log10(max(abs(value), abs(error))))
    if exp >= 5 or exp <= -4:
        scale = 10.0**exp
        inner = value_error(value / scale, error / scale, sig=sig)
        return f"({inner}) × 10{_superscript(exp)}{suffix}"
    d = _digits_of(error, sig)
    if d <= 0:
        q = 10 ** (-d)
        return f"{round(value / q) * q:.0f} ± {round(error / q) * q:.0f}{suffix}"
    return f"{value:.{d}f} ± {error:.{d}f}{suffix}"


def probability(p: float | None) -> str:
    """A probability to two decimals; ``"< 0.01"`` and ``"> 0.99"`` at the ends
    (flakebook.wording.probability_text; ``"–"`` when unknown)."""
    text = probability_text(p)
    return "–" if text == "-" else text


def _superscript(n: int) -> str:
    table = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")
    return str(n).translate(table)


def p_text(p: float | None, name: str = "P") -> str:
    """``"P = 0.76"``, ``"P > 0.99"`` or ``"P < 0.01"`` (``name`` in place of P)."""
    text = probability(p)
    return f"{name} {text}" if text[0] in "<>" else f"{name} = {text}"
