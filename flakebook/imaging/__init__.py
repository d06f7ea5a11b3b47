"""Micrographs: image I/O and scale, background, segmentation, per-region contrast and holes. Pure numpy/scipy/OpenCV."""
