"""Thin-film optics: materials, transfer-matrix stacks, microscope channels, contrast, absorptance and layer likelihoods. Pure numpy/scipy."""
