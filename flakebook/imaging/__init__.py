"""Micrographs: image I/O and scale, background, segmentation, per-region contrast and holes.

Pure numpy/scipy/OpenCV (no Qt, no SQL, no printing). Modules:

- ``io``: :func:`~flakebook.imaging.io.read_image` (PNG, JPEG, TIFF, BMP; 8/16 bit; RGB or mono)
  into a :class:`~flakebook.imaging.io.Micrograph` of linear intensity (sRGB undone per
  IEC 61966-2-1 for 8-bit images), with saturation mask and header checks before decoding.
- ``scale``: micrometres per pixel from an objective preset (``resources/objectives.json``) or a
  line of known length.
- ``background``: dark offset (once) and flat field (robust polynomial surface fitted to the bare
  substrate, or a blank reference image).
- ``segment``: bare substrate, flakes and terraces (:func:`~flakebook.imaging.segment.segment`),
  built from ``contrast`` (dominant-colour substrate, C = 1 - I / I_substrate, correlated-noise
  errors, region measurement), ``modes`` (terrace classes by mean shift) and ``rims`` (bare
  holes, suspended parts, hole rims, outlines traced near holes at full resolution).
- ``holes``: detection by the Hough transform and small round spots, and the entry point for
  ``hole_fit`` (sub-pixel circle fits), ``lattice`` (the hole lattice, hidden holes) and
  ``coverage`` (coverage of holes by flake outlines, editing by hand).
- ``records``: the frozen results (Region, Flake, Segmentation, Hole, Lattice, Coverage).
- ``terraces``: suspended and supported regions joined into terraces; ``linking``: which known
  flake a region in another image of the chip is.
- ``survey``: all of the above plus the layer likelihood of each terrace from
  ``flakebook.optics`` (:func:`~flakebook.imaging.survey.survey_image`).

Pixel coordinates: origin at the top-left pixel's centre, x to the right, y down (INTERFACE.md).
"""
