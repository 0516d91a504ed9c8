"""bandsolve: resolve overlapping UV-Vis absorption bands into concentrations.

Multicomponent calibration by classical least squares (CLS) and partial least squares (PLS),
with cross-validation, figures of merit, outlier diagnostics and batch prediction.

The everyday functions are importable from here (``from bandsolve import read_spectra,
build_pls, load_model``); each is imported on first use (PEP 562), so ``import bandsolve``
and ``bandsolve --version`` stay fast.
"""

from __future__ import annotations

import importlib
from importlib.metadata import PackageNotFoundError, version
from typing import Any

try:
    __version__ = version("bandsolve")
except PackageNotFoundError:  # running from a source tree without installation
    __version__ = "0.0.0+unknown"

#: Public name → module that defines it (imported on first use).
_API = {
    "read_spectra": "bandsolve.io",
    "read_concentrations": "bandsolve.io",
    "read_absorptivities": "bandsolve.io",
    "SpectralSet": "bandsolve.spectra",
    "ConcentrationTable": "bandsolve.concentrations",
    "group_labels": "bandsolve.concentrations",
    "build_cls": "bandsolve.calibration.build",
    "build_cls_from_absorptivities": "bandsolve.calibration.build",
    "build_pls": "bandsolve.calibration.build_pls",
    "Calibration": "bandsolve.calibration.model",
    "save_model": "bandsolve.calibration.modelfile",
    "load_model": "bandsolve.calibration.modelfile",
    "calibration_merit": "bandsolve.calibration.merit",
    "assess": "bandsolve.evaluate.assess",
    "compare_methods": "bandsolve.evaluate.compare",
    "predict_inputs": "bandsolve.batch.predict",
    "CLSRegressor": "bandsolve.cls",
    "PLSRegressor": "bandsolve.pls",
}

__all__ = ["__version__", *_API]


def __getattr__(name: str) -> Any:
    module = _API.get(name)
    if module is None:
        raise AttributeError(f"module 'bandsolve' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(__all__)
