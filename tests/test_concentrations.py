"""Concentration tables: cross-validation groups keyed by sample id, in the API and its users."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from bandsolve.calibration.build_pls import build_pls
from bandsolve.concentrations import ConcentrationTable, group_labels, groups_in_order
from bandsolve.errors import DataError
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 61)
PURE = gaussian_bands(AXIS, (480, 530, 590), (40, 45, 40))


def _data(n: int = 20):
    rng = np.random.default_rng(7)
    C = rng.uniform(0.1, 1.0, (n, 3))
    ids = [f"d{i % 4}-m{i:02d}" for i in range(n)]
    spectra = SpectralSet(AXIS, C @ PURE + 0.002 * rng.standard_normal((n, AXIS.size)), ids)
    day = [f"day{i % 4}" for i in range(n)]
    table = ConcentrationTable(ids, ("a", "b", "c"), C, labels={"day": day})
    return spectra, table


def test_group_labels_from_a_column_or_a_pattern_are_keyed_by_sample_id():
    _, table = _data()
    by_column = group_labels(table, "day")
    by_pattern = group_labels(table, "~^(d\\d)-")
    assert list(by_column.index) == list(table.sample_ids)
    assert by_column["d1-m05"] == "day1" and by_pattern["d1-m05"] == "d1"
    with pytest.raises(DataError, match="no label column 'week'"):
        group_labels(table, "week")
    with pytest.raises(DataError, match="does not match the group pattern"):
        group_labels(table, "~^x")


def test_groups_in_order_follows_the_ids_not_the_position():
    groups = {"a": 1, "b": 2, "c": 3}
    np.testing.assert_array_equal(groups_in_order(groups, ["c", "a"]), [3, 1])
    with pytest.raises(DataError, match="not a list"):
        groups_in_order([1, 2, 3], ["a", "b", "c"])
    with pytest.raises(DataError, match=r"1 sample\(s\) have no group: 'c'.*unknown samples 'x'"):
        groups_in_order({"a": 1, "b": 2, "x": 3}, ["a", "b", "c"])


def test_build_pls_groups_do_not_depend_on_the_order_they_are_given_in():
    # The same labels keyed by id, shuffled, must give the same folds and so the same curve.
    spectra, table = _data()
    groups = group_labels(table, "day")
    shuffled = groups.sample(frac=1.0, random_state=3)
    assert list(shuffled.index) != list(groups.index)
    a = build_pls(spectra, table, cv="groups", groups=groups, max_components=4)
    b = build_pls(spectra, table, cv="groups", groups=dict(shuffled), max_components=4)
    np.testing.assert_array_equal(a.selection.models[0].rmsecv, b.selection.models[0].rmsecv)
    with pytest.raises(DataError, match="not a list"):
        build_pls(spectra, table, cv="groups", groups=list(groups), max_components=4)


def test_compare_methods_takes_groups_keyed_by_sample_id():
    from bandsolve.evaluate.compare import compare_methods

    spectra, table = _data()
    groups = pd.Series(group_labels(table, "day")).iloc[::-1]
    result = compare_methods(spectra, table, cv="groups", groups=groups, baseline="none",
                             max_components=4, n_permutations=99)
    assert result.n_calibration == 20
    with pytest.raises(DataError, match="have no group"):
        compare_methods(spectra, table, cv="groups", groups=groups.iloc[1:], baseline="none",
                        max_components=4, n_permutations=99)
