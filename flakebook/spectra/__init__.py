"""Spectra: file I/O and units, baselines, peak fits, Raman and PL layer evidence. Pure numpy/scipy."""
