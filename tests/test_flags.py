"""The flags column: codes in check order, joined by ';', empty when nothing is raised."""

from __future__ import annotations

from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from bandsolve.calibration.results import _flag_column
from bandsolve.flags import FLAG_CODES, join_flags, split_flags


@settings(max_examples=60, deadline=None)
@given(arrays(bool, st.tuples(st.integers(1, 40), st.integers(1, 12))))
def test_flag_column_equals_row_by_row_join(masks):
    # Reference: the definition, one row at a time (join_flags keeps first-seen order).
    codes = [f"code{j}" for j in range(masks.shape[1])]
    checks = [(masks[:, j], codes[j]) for j in range(masks.shape[1])]
    got = _flag_column(masks.shape[0], checks)
    expected = [join_flags(c for c, on in zip(codes, row, strict=True) if on) for row in masks]
    assert list(got) == expected
    for text, row in zip(got, masks, strict=True):
        assert split_flags(text) == [c for c, on in zip(codes, row, strict=True) if on]


def test_every_flag_code_is_explained():
    for code, text in FLAG_CODES.items():
        assert code and ";" not in code and len(text) > 20


def test_flag_column_is_reachable_as_a_dataframe_attribute(three_bands):
    # pandas documents DataFrame.flags as its own attribute (pandas >= 1.2, "Flags"), so a
    # column of that name is shadowed: results.flags would not return the codes.
    import numpy as np
    import pandas as pd

    from bandsolve.calibration.build import build_cls
    from bandsolve.concentrations import ConcentrationTable
    from bandsolve.flags import FLAG_COLUMN
    from bandsolve.spectra import SpectralSet

    assert FLAG_COLUMN not in dir(pd.DataFrame)
    axis, K = three_bands
    rng = np.random.default_rng(12345)
    C = rng.uniform(0.1, 1.0, (12, 3))
    X = C @ K + rng.normal(0, 1e-3, (12, axis.size))
    ids = [f"s{i}" for i in range(12)]
    model = build_cls(SpectralSet(axis, X, ids),
                      ConcentrationTable(ids, ("a [mg/L]", "b [mg/L]", "c [mg/L]"), C))
    results = model.predict(SpectralSet(axis, X[:2], ids[:2]))
    assert list(results.flag_codes) == list(results[FLAG_COLUMN])
    assert "flags" not in results.columns


def test_flag_bits_follow_the_flag_codes():
    # One bit per code, 1 << its place in FLAG_CODES; the values 0.1.0 wrote into flag maps
    # (its batch.images table: residual 1, t2 2, leverage 4, ceiling 8, above_range 16,
    # below_range 32, negative 64, no_se 128) keep their meaning.
    import numpy as np

    from bandsolve.flags import FLAG_BITS, flag_bits

    assert list(FLAG_BITS) == list(FLAG_CODES)
    assert sorted(FLAG_BITS.values()) == [2**i for i in range(len(FLAG_CODES))]
    assert FLAG_BITS == {"residual": 1, "t2": 2, "leverage": 4, "ceiling": 8,
                         "above_range": 16, "below_range": 32, "negative": 64, "no_se": 128,
                         "unchecked": 256}  # added after 0.1.0, so it comes last
    got = flag_bits(["", "residual", "t2;above_range:dye A;negative:dye B", "no_se"])
    np.testing.assert_array_equal(got, [0, 1, 2 + 16 + 64, 128])
    assert got.dtype == np.uint16 and max(FLAG_BITS.values()) < 2**16


def _absent_analyte_model(three_bands, seed):
    import numpy as np

    from bandsolve.calibration.build import build_cls
    from bandsolve.concentrations import ConcentrationTable
    from bandsolve.spectra import SpectralSet

    axis, K = three_bands
    rng = np.random.default_rng(seed)
    C = rng.uniform(0.0, 1.0, (8, 3))
    ids = [f"s{i}" for i in range(8)]
    model = build_cls(SpectralSet(axis, C @ K + rng.normal(0, 2e-3, (8, axis.size)), ids),
                      ConcentrationTable(ids, ("a", "b", "c"), C))
    return model, rng


def test_concentration_flags_are_one_sided_t_tests_at_the_model_alpha(three_bands):
    # negative when ĉ + t_{1−α,ν}·SE < 0, with ν the interval's degrees of freedom; the
    # reference quantile is scipy.stats.t (Student 1908), not the code's own.
    import numpy as np
    from scipy import stats

    from bandsolve.flags import split_flags
    from bandsolve.spectra import SpectralSet

    model, rng = _absent_analyte_model(three_bands, 3)
    axis, K = three_bands
    C = np.column_stack([np.zeros(400), rng.uniform(0.2, 0.8, (400, 2))])  # a is absent
    spectra = SpectralSet(axis, C @ K + rng.normal(0, 2e-3, (400, axis.size)),
                          [f"u{i}" for i in range(400)])
    res = model.predict(spectra)
    detail = model.detail(model.prepare(spectra)[0])
    assert model.flag_alpha == 0.01
    threshold = -stats.t.ppf(1 - 0.01, detail.dof[0]) * res["a SE"].to_numpy()
    flagged = np.array(["negative:a" in split_flags(t) for t in res["flag_codes"]])
    assert np.array_equal(flagged, res["a"].to_numpy() < threshold)
    assert flagged.any() or (res["a"].to_numpy() < 0).sum() > 100  # the test has teeth


def test_negative_flag_false_alarm_rate_on_absent_analytes_is_at_most_alpha(three_bands):
    # An absent analyte is flagged negative in at most a share α of clean samples: pooled over
    # 40 calibrations (the share varies with each calibration's K̂ error), below the upper end
    # of the exact binomial 99.9 % range of α = 0.01 (Clopper & Pearson 1934). The former
    # fixed 2 SE margin fails it on the same results: its one-sided level is P(T_ν < −2),
    # 0.023 for large ν and 0.051 for ν = 5 (scipy.stats.t).
    import numpy as np
    from scipy import stats

    from bandsolve.flags import split_flags
    from bandsolve.spectra import SpectralSet

    hits = two_se = total = 0
    for seed in range(40):
        model, rng = _absent_analyte_model(three_bands, 100 + seed)
        axis, K = three_bands
        C = np.column_stack([np.zeros(200), rng.uniform(0.2, 0.8, (200, 2))])
        res = model.predict(SpectralSet(axis, C @ K + rng.normal(0, 2e-3, (200, axis.size)),
                                        [f"u{i}" for i in range(200)]))
        hits += sum("negative:a" in split_flags(t) for t in res["flag_codes"])
        two_se += int((res["a"] < -2 * res["a SE"]).sum())
        total += len(res)
    high = stats.binom.ppf(0.9995, total, 0.01) / total
    assert hits / total <= high, hits / total
    assert two_se / total > high  # the test tells the rules apart
