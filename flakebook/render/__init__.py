"""Figures and PDFs drawn offscreen with Qt (reports, exports, flake cards)."""

from flakebook import _qtguard

_qtguard.apply()
