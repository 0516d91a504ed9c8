"""The error every result of one CLS calibration shares (K̂'s own estimation error)."""

from __future__ import annotations

import numpy as np
import pytest

from bandsolve.calibration.build import build_cls
from bandsolve.cls import CLSRegressor
from bandsolve.concentrations import ConcentrationTable
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 121)
K = gaussian_bands(AXIS, (470, 540, 610), (38, 38, 38))
LEVELS = (0.2, 0.4, 0.6, 0.8, 1.0)
C = np.vstack([np.eye(3)[k] * v for k in range(3) for v in LEVELS])
SIGMA = 0.003


def _calibration(rng) -> tuple[SpectralSet, ConcentrationTable]:
    ids = [f"s{i}" for i in range(len(C))]
    A = C @ K + rng.normal(0, SIGMA, (len(C), AXIS.size))
    return SpectralSet(AXIS, A, ids), ConcentrationTable(ids, ["a", "b", "c"], C)


def test_mid_range_leverage_is_the_haaland_thomas_h_at_the_centre():
    # Reference: h = c̃ᵀ(CᵀC)⁻¹c̃ (Haaland & Thomas 1988) by numpy at the centre of the
    # calibrated ranges, 0..1 for each analyte (the other analytes' standards are its blanks).
    cal = build_cls(*_calibration(np.random.default_rng(1)))
    mid = np.full(3, 0.5)
    h = mid @ np.linalg.inv(C.T @ C) @ mid
    assert cal.shared_error["mid_range_leverage"] == pytest.approx(h, rel=1e-12)
    assert cal.shared_error["share"] == pytest.approx(h / (1 + h), rel=1e-12)
    assert "Error shared by every result" in cal.summary()
    assert cal.describe()["shared_error"] == cal.shared_error


def test_absorptivity_model_states_no_shared_error():
    from bandsolve.calibration.build import build_cls_from_absorptivities

    eps = SpectralSet(AXIS, K, ["a", "b", "c"], quantity="absorptivity")
    with pytest.warns(Warning):
        cal = build_cls_from_absorptivities(eps, 1.0)
    assert cal.shared_error is None and "Error shared" not in cal.summary()


def test_shared_share_is_the_between_calibration_share_of_the_error():
    # Theory: a mid-range result's error is K̂'s error (fixed within a calibration) plus the
    # sample's own noise, with variances in the ratio h : 1 (Haaland & Thomas 1988). The
    # one-way ANOVA intra-class correlation of the errors of 20 replicate spectra in each of
    # 300 calibrations estimates h/(1 + h) (Searle, Casella & McCulloch 1992).
    rng = np.random.default_rng(7)
    mid = np.full(3, 0.5)
    h = mid @ np.linalg.inv(C.T @ C) @ mid
    errors = []
    for _ in range(300):
        A = C @ K + rng.normal(0, SIGMA, (len(C), AXIS.size))
        est = CLSRegressor().fit(A, C)
        X = mid @ K + rng.normal(0, SIGMA, (20, AXIS.size))
        errors.append(est.predict(X)[:, 0] - 0.5)
    e = np.asarray(errors)
    within = e.var(axis=1, ddof=1).mean()
    between = e.mean(axis=1).var(ddof=1) - within / e.shape[1]
    icc = between / (between + within)
    assert icc == pytest.approx(h / (1 + h), abs=0.06), (icc, h / (1 + h))
