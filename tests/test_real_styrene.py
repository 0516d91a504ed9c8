"""Real UV-Vis data: styrene oxidation mixtures (shared/datasets, MIT licence).

Source: public repository of Sobolev et al. (robot-assisted reaction mapping), see
shared/datasets/styrene-oxidation/SOURCE.md. The published per-sample fits come from another
method (a linear-kernel regression on 220–350 nm after background subtraction) and are not
ground truth; agreement with them is a cross-check, not an accuracy figure. Skipped when absent.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from bandsolve.calibration.build import build_cls
from bandsolve.io import read_concentrations, read_spectra

from .conftest import dataset, left_out_standards_covered


def test_cls_agrees_with_the_published_unmixing_of_the_main_components():
    folder = dataset("styrene-oxidation")
    standards = read_spectra(folder / "standards_spectra.csv")
    table = read_concentrations(folder / "standards_concentrations.csv")
    mixtures = read_spectra(folder / "reaction_mixtures_spectra.csv")
    published = pd.read_csv(folder / "published_unmixing_results.csv").set_index("sample")
    # Same range as the published fit; an offset term stands in for its background step.
    cal = build_cls(standards, table, window=[(220, 350)], baseline="offset", ceiling=5.0)
    ours = cal.predict(mixtures).set_index("sample")
    assert len(ours) == 756
    for label, column in zip(table.analytes[:2], published.columns[:2], strict=True):
        x, y = ours[label], published[column].reindex(ours.index)
        assert np.corrcoef(x, y)[0, 1] >= 0.99, label  # styrene, styrene oxide
        assert float(np.median(np.abs(x - y))) < 0.03, label  # mmol/L, vs 0.07–0.39 range


def test_left_out_standards_are_covered_as_a_95_percent_interval_promises():
    # Each of the 16 real standards (blank included) left out in turn, the model rebuilt from
    # the rest: 48 results with a stated truth. The count inside the 95 % intervals must not be
    # below the 1 % point of Binomial(48, 0.95) (scipy.stats.binom).
    from scipy import stats

    folder = dataset("styrene-oxidation")
    spectra = read_spectra(folder / "standards_spectra.csv")
    table = read_concentrations(folder / "standards_concentrations.csv")
    inside = left_out_standards_covered(spectra, table)
    assert inside.sum() >= stats.binom.ppf(0.01, inside.size, 0.95), inside.mean()
