"""Replicate agreement against reported SEs (bandsolve.evaluate.repeatability)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from bandsolve.errors import DataError
from bandsolve.evaluate.repeatability import repeatability

from .conftest import dataset


def _table(rng, groups: int, n: int, sd_over_se: float, se: float = 0.01) -> pd.DataFrame:
    c = 1.0 + rng.normal(0, sd_over_se * se, (groups, n))
    return pd.DataFrame({"sample": [f"s{g}_rep{i}" for g in range(groups) for i in range(n)],
                         "a": c.ravel(), "a SE": se, "a low95": 0.0, "a high95": 2.0})


def test_statistic_and_p_value_are_the_chi_square_test_of_a_variance():
    # NIST/SEMATECH e-Handbook §1.3.5.8: X = (n − 1)s²/σ0², upper tail of χ²_{n−1}; the
    # reference is numpy's sample variance and scipy.stats.chi2.
    rng = np.random.default_rng(1)
    frame = _table(rng, 3, 4, 1.5)
    frame["a SE"] = rng.uniform(0.008, 0.012, len(frame))
    res = repeatability(frame, r"~(s\d+)_rep")
    for g, row in zip(range(3), res.table.itertuples(index=False), strict=True):
        c = frame["a"].to_numpy()[4 * g:4 * g + 4]
        se2 = np.mean(frame["a SE"].to_numpy()[4 * g:4 * g + 4] ** 2)
        x = 3 * np.var(c, ddof=1) / se2
        assert row.p == pytest.approx(stats.chi2.sf(x, 3), rel=1e-12)
        assert row.mean == pytest.approx(c.mean(), rel=1e-14)


@settings(max_examples=40, deadline=None)
@given(st.integers(0, 10**6), st.floats(1e-3, 1e3))
def test_order_of_rows_and_concentration_units_do_not_change_the_verdict(seed, scale):
    rng = np.random.default_rng(seed)
    frame = _table(rng, 4, 3, 2.0)
    base = repeatability(frame, r"~(s\d+)_rep").table.set_index("sample")
    moved = frame.sample(frac=1.0, random_state=seed % 1000).copy()
    moved[["a", "a SE"]] *= scale
    other = repeatability(moved, r"~(s\d+)_rep").table.set_index("sample").loc[base.index]
    np.testing.assert_allclose(other["p"], base["p"], rtol=1e-8)
    assert list(other["disagree"]) == list(base["disagree"])


def test_replicates_scattering_as_their_se_says_rarely_disagree_and_wider_ones_do():
    # 400 samples of 5 replicates. With SD = SE the share flagged is at most the upper end
    # of the exact binomial 99.9 % range of α = 0.01 (scipy.stats.binom); with SD = 4 SE
    # the test's power is P(χ²_4 > 13.28/16) = 0.93 (scipy.stats.chi2), so at least 0.85.
    rng = np.random.default_rng(2)
    honest = repeatability(_table(rng, 400, 5, 1.0), r"~(s\d+)_rep").table["disagree"]
    assert honest.sum() <= stats.binom.ppf(0.9995, 400, 0.01)
    assert stats.chi2.sf(stats.chi2.ppf(0.99, 4) / 16, 4) > 0.9
    wide = repeatability(_table(rng, 400, 5, 4.0), r"~(s\d+)_rep").table["disagree"]
    assert wide.mean() >= 0.85


def test_single_measurements_are_counted_not_tested_and_bad_keys_are_named():
    frame = pd.DataFrame({"sample": ["x_rep1", "x_rep2", "y_rep1"], "a": [1.0, 1.1, 2.0],
                          "a SE": [0.1, 0.1, 0.1]})
    res = repeatability(frame, r"~(.*)_rep")
    assert res.single == 1 and list(res.table["sample"]) == ["x"]
    with pytest.raises(DataError, match="y_rep1"):
        repeatability(frame, r"~(x)_rep")
    with pytest.raises(DataError, match="not a valid regular expression"):
        repeatability(frame, r"~(.*_rep")
    assert list(repeatability(frame, {"x_rep1": "x", "x_rep2": "x", "y_rep1": "y"})
                .table["sample"]) == ["x"]
    with pytest.raises(DataError, match="results table"):
        repeatability(frame.drop(columns=["a SE"]), r"~(.*)_rep")


def test_real_replicates_of_one_mixture_show_a_change_between_measurements(tmp_path):
    # Five replicate spectra of one real mixture (three aromatics in ethanol; Jia et al., data
    # in shared/datasets, MIT licence). The three analytes' results rise and fall together
    # from replicate to replicate (about 3 %), as a path-length change would make them;
    # methoxychalcone, whose SE is smallest relative to its level, scatters about twice its
    # SE and is flagged; the other two scatter less than their SE.
    from bandsolve.cli import main

    folder = dataset("three-aromatics-ethanol")
    model, out = tmp_path / "m.bsm", tmp_path / "r.csv"
    assert main(["build", "--method", "cls", "--spectra", str(folder / "standards_spectra.csv"),
                 "--concentrations", str(folder / "standards_concentrations.csv"),
                 "--out", str(model), "--quiet"]) == 0
    assert main(["predict", str(model), str(folder / "mixture_replicates_spectra.csv"),
                 "--out", str(out), "--quiet"]) == 0
    res = repeatability(pd.read_csv(out), r"~(.*)_rep\d+")
    flagged = dict(zip(res.table["analyte"], res.table["disagree"], strict=True))
    assert flagged == {"methoxychalcone [mol/L]": True, "anisaldehyde [mol/L]": False,
                       "acetophenone [mol/L]": False}
    values = pd.read_csv(out)[list(flagged)].to_numpy()
    ratios = values / values.mean(axis=0)
    assert np.corrcoef(ratios.T).min() > 0.8  # the common factor between measurements
    assert main(["repeatability", str(out), "--sample", r"~(.*)_rep\d+",
                 "--fail-on-flags"]) == 4


def test_command_writes_the_table_and_json(tmp_path, capsys):
    from bandsolve.cli import main

    rng = np.random.default_rng(3)
    src, table = tmp_path / "r.json", tmp_path / "t.csv"
    src.write_text(json.dumps(_table(rng, 3, 3, 1.0).to_dict(orient="records")))
    assert main(["repeatability", str(src), "--sample", r"~(s\d+)_", "--out", str(table),
                 "--json"]) == 0
    shown = json.loads(capsys.readouterr().out)
    written = pd.read_csv(table)
    assert len(written) == len(shown["rows"]) == 3
    assert main(["repeatability", str(src), "--sample", "no-tilde"]) == 2
