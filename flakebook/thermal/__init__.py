"""Raman thermometry: coefficients, heat-conduction model, thermal-conductivity inversion and uncertainty.

* :mod:`~flakebook.thermal.series`: chi_T and chi_P from the temperature and power series, with
  their warnings (never calibrated against the Si line);
* :mod:`~flakebook.thermal.beam`: the laser's 1/e^2 radius from an edge scan, a spot image or a
  diffraction estimate;
* :mod:`~flakebook.thermal.model`: the suspended disk's geometry factor (closed form, quadrature)
  and a finite-volume solver (supported annulus, kappa(T), off-centre beam);
* :mod:`~flakebook.thermal.inversion`: kappa from chi_T, chi_P, absorptance and geometry;
* :mod:`~flakebook.thermal.uncertainty`: Monte Carlo interval and variance shares;
* :mod:`~flakebook.thermal.warnings`: plausibility warnings of a result.

Pure numpy/scipy: no Qt, no SQL, no printing.
"""
