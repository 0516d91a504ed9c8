"""Shared test helpers: simulated overlapping bands and the path to the shared datasets."""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest
from hypothesis import settings

# The suite gates every commit, so property tests draw the same examples on every run
# ("repeatable"); `pytest --hypothesis-profile explore` draws fresh ones while developing.
settings.register_profile("repeatable", derandomize=True, database=None)
settings.register_profile("explore")
settings.load_profile("repeatable")


def _datasets() -> Path:
    """``shared/datasets`` beside the checkout (or beside any folder above it: worktrees)."""
    here = Path(__file__).resolve().parents[1]
    for folder in here.parents:
        if (folder / "shared" / "datasets").is_dir():
            return folder / "shared" / "datasets"
    return here.parent / "shared" / "datasets"


DATASETS = _datasets()


def gaussian_bands(axis: np.ndarray, centres, widths) -> np.ndarray:
    """Unit-height Gaussian bands, one row per (centre, width): broad overlapping UV-Vis bands."""
    pairs = zip(centres, widths, strict=True)
    return np.vstack([np.exp(-0.5 * ((axis - c) / w) ** 2) for c, w in pairs])


@pytest.fixture
def three_bands():
    """Axis (nm) and pure spectra (3 × p, AU per unit concentration) with heavy overlap."""
    axis = np.linspace(400.0, 700.0, 151)
    return axis, gaussian_bands(axis, (480, 530, 590), (40, 45, 40))


def dataset(name: str) -> Path:
    """Folder of a shared dataset, or skip the test when the datasets are not present."""
    folder = DATASETS / name
    if not folder.is_dir():
        pytest.skip(f"shared dataset {name} not available at {folder}")
    return folder


def two_analyte_model(axis: np.ndarray, pure: np.ndarray, rng: np.random.Generator,
                      n: int = 12):
    """A CLS model of analytes A and B [mg/L] from ``n`` invented mixtures (1 mAU noise)."""
    from bandsolve.calibration.build import build_cls
    from bandsolve.concentrations import ConcentrationTable
    from bandsolve.spectra import SpectralSet

    conc = rng.uniform(0.1, 1.0, (n, 2))
    cal = SpectralSet(axis=axis, values=conc @ pure + 1e-3 * rng.standard_normal((n, axis.size)),
                      sample_ids=[f"c{i}" for i in range(n)])
    return build_cls(cal, ConcentrationTable(cal.sample_ids, ("A [mg/L]", "B [mg/L]"), conc))


def left_out_standards_covered(spectra, table) -> np.ndarray:
    """Whether each left-out standard's 95 % interval holds its stated concentration (one
    value per standard and analyte)."""
    inside = []
    for sid in table.sample_ids:
        keep = [s for s in table.sample_ids if s != sid]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # the reduced set's own build warnings
            from bandsolve.calibration.build import build_cls

            cal = build_cls(spectra.subset(keep), table.subset(keep))
        res = cal.predict(spectra.subset([sid]))
        truth = np.asarray(table.subset([sid]).values, dtype=float)[0]
        inside += [res[f"{a} low95"][0] <= truth[k] <= res[f"{a} high95"][0]
                   for k, a in enumerate(table.analytes)]
    return np.array(inside)
