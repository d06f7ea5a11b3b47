"""Figures and PDFs drawn offscreen with Qt (reports, exports, flake cards)."""
