"""Micrographs: image I/O and scale, background, segmentation, per-region contrast and holes.

Pure numpy/scipy/OpenCV (no Qt, no SQL, no printing). Modules:

- ``io``: :func:`~flakebook.imaging.io.read_image` (PNG, JPEG, TIFF, BMP; 8/16 bit; RGB or mono)
  into a :class:`~flakebook.imaging.io.Micrograph` of linear intensity (sRGB undone per
  IEC 61966-2-1 for 8-bit images), with saturation mask and header checks before decoding.
- ``scale``: micrometres per pixel from an objective preset (``resources/objectives.json``) or a
  line of known length.
- ``background``: dark offset (once) and flat field (robust polynomial surface fitted to the bare
  substrate, or a blank reference image).
- ``segment``: bare substrate (dominant colour), flakes, terraces (mean shift on the contrast
  vectors), outlines, per-terrace contrast C = 1 - I / I_substrate with a standard error that
  allows for correlated pixel noise.
- ``holes``: Hough detection and sub-pixel circle fits, the hole lattice, hidden holes, coverage
  of holes by flake outlines, editing by hand.
- ``survey``: all of the above plus the layer likelihood of each terrace from
  ``flakebook.optics`` (:func:`~flakebook.imaging.survey.survey_image`).

Pixel coordinates: origin at the top-left pixel's centre, x to the right, y down (INTERFACE.md).
"""
