"""bandsolve: resolve overlapping UV-Vis absorption bands into concentrations.

Multicomponent calibration by classical least squares (CLS) and partial least squares (PLS),
with cross-validation, figures of merit, outlier diagnostics and batch prediction.
"""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("bandsolve")
except PackageNotFoundError:  # running from a source tree without installation
    __version__ = "0.0.0+unknown"

__all__ = ["__version__"]
