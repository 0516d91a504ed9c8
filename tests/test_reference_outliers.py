"""Reference-value outliers: a mislabelled standard is listed with its sample id.

Expected values: the Bonferroni normal quantile from scipy (Bonferroni 1936; Cook & Weisberg
1982 for studentized cross-validated residuals); the swapped labels are constructed here.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from bandsolve.calibration.build import build_cls
from bandsolve.calibration.build_pls import build_pls
from bandsolve.concentrations import ConcentrationTable
from bandsolve.evaluate.assess import assess
from bandsolve.reference_outliers import reference_outliers
from bandsolve.spectra import SpectralSet
from tests.conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 121)
K = gaussian_bands(AXIS, (480, 530, 590), (40, 45, 40))
LABELS = ("A [mg/L]", "B [mg/L]", "C [mg/L]")


def test_threshold_is_the_bonferroni_normal_quantile():
    rng = np.random.default_rng(1)
    z = rng.standard_normal((40, 2))
    limit = stats.norm.isf(0.05 / (2 * 80))  # Bonferroni over 80 values
    z[7, 1] = 1.05 * limit * 1.4826 * np.median(np.abs(z[:, 1])) + 0.5  # clearly beyond
    z[3, 0] = 0.9 * limit  # inside
    found = reference_outliers(z, np.ones(2), [f"s{i}" for i in range(40)], ["a", "b"])
    assert [(o.sample, o.analyte) for o in found] == [("s7", "b")]


def _mislabelled(rng, n=30):
    C = rng.uniform(0.1, 1.0, (n, 3))
    A = C @ K + rng.normal(0, 0.002, (n, AXIS.size))
    stated = C.copy()
    stated[4, 1] *= 1.6  # mis-pipetted: 60 % more B written down than prepared
    ids = [f"std{i}" for i in range(n)]
    return SpectralSet(AXIS, A, ids), ConcentrationTable(ids, LABELS, stated)


@pytest.mark.parametrize("method", ["cls", "pls"])
def test_mislabelled_standard_is_listed_at_build(method):
    spectra, table = _mislabelled(np.random.default_rng(2))
    cal = (build_cls(spectra, table) if method == "cls"
           else build_pls(spectra, table, components=3, cv="interleaved:5"))
    listed = {(o["sample"], o["analyte"]) for o in cal.provenance["reference_outliers"]}
    assert ("std4", "B [mg/L]") in listed and len(listed) <= 2


def test_mislabelled_validation_sample_is_listed_by_assess():
    rng = np.random.default_rng(3)
    C = rng.uniform(0.1, 1.0, (25, 3))
    ids = [f"c{i}" for i in range(25)]
    cal = build_cls(SpectralSet(AXIS, C @ K + rng.normal(0, 0.002, (25, AXIS.size)), ids),
                    ConcentrationTable(ids, LABELS, C))
    spectra, table = _mislabelled(rng)
    result = assess(cal, spectra, table)
    assert [(o.sample, o.analyte) for o in result.outliers][:1] == [("std4", "B")]
    assert "std4" in result.summary() and result.to_dict()["reference_outliers"]
