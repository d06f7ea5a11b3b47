"""Raman thermometry: coefficients, heat-conduction model, thermal-conductivity inversion and uncertainty."""
