"""flakebook: a notebook for atomically thin flakes, from micrograph to thermal conductivity.

The core packages (optics, imaging, spectra, thermal, evidence) are plain numpy/scipy and can be
used from a notebook without the desktop program or a project file.
"""

__version__ = "0.1.0"
#: Version of the command-line and JSON contract (shared INTERFACE.md).
INTERFACE_VERSION = 1

__all__ = ["__version__", "INTERFACE_VERSION"]
