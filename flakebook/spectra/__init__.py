"""Spectra: file I/O and units, baselines, peak fits, Raman and PL layer evidence. Pure numpy/scipy."""

#: Baseline methods of flakebook.spectra.processing.estimate_baseline (pybaselines' names); here
#: so that the command line lists them without importing numpy.
BASELINE_METHODS = (
    "imodpoly",
    "modpoly",
    "poly",
    "masked_poly",
    "asls",
    "arpls",
    "airpls",
    "snip",
)
