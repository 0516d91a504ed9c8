"""The spectral data layer: SpectralSet checks and operations, concentration tables, align()."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bandsolve.concentrations import ConcentrationTable, align, split_unit
from bandsolve.errors import BandsolveWarning, DataError
from bandsolve.spectra import (
    SpectralSet,
    concat,
    describe_window,
    warn_if_ambiguous_unit,
    window_mask,
)

AXIS = np.arange(400.0, 411.0)  # 400..410 nm, 11 points


def _set(values=None, ids=("a", "b"), axis=AXIS, **kw):
    if values is None:
        values = np.vstack([np.linspace(0.1, 0.2, axis.size), np.linspace(0.3, 0.5, axis.size)])
    return SpectralSet(axis, values, ids, **kw)


def test_resample_refuses_to_extrapolate_and_names_missing_range():
    with pytest.raises(DataError, match=r"410-420 nm is needed.*never extrapolates"):
        _set(source="s.csv").resample(np.arange(405.0, 421.0))
    with pytest.raises(DataError, match=r"390-400 and 410-415"):
        _set().resample(np.arange(390.0, 416.0))


@settings(max_examples=50, deadline=None)
@given(st.floats(-5, 5), st.floats(-5, 5),
       st.lists(st.floats(400.0, 410.0), min_size=2, max_size=30, unique=True))
def test_linear_interpolation_of_a_line_is_exact(slope, intercept, targets):
    line = intercept + slope * (AXIS - 400.0)
    target = np.sort(np.array(targets))
    out = SpectralSet(AXIS, line, ["x"]).resample(target)
    # linear interpolation reproduces a linear function exactly (theory; rounding only)
    np.testing.assert_allclose(out.values[0], intercept + slope * (target - 400.0),
                               rtol=1e-9, atol=1e-9)


def test_descending_axis_is_flipped_with_the_values():
    s = SpectralSet([402.0, 401.0, 400.0], [[3.0, 2.0, 1.0]], ["x"])
    np.testing.assert_array_equal(s.axis, [400.0, 401.0, 402.0])
    np.testing.assert_array_equal(s.values, [[1.0, 2.0, 3.0]])


def test_callers_arrays_stay_writable_and_the_set_keeps_its_copy():
    axis, values = AXIS.copy(), np.ones((1, AXIS.size))
    s = SpectralSet(axis, values, ["x"])
    assert axis.flags.writeable and values.flags.writeable
    axis[0] = 399.0  # must not raise "assignment destination is read-only"
    values[0, 0] = 2.0
    # The set is independent of the caller's arrays.
    assert s.axis[0] == AXIS[0] and s.values[0, 0] == 1.0


def test_read_only_float_values_are_not_copied():
    values = np.ones((3, AXIS.size))
    values.setflags(write=False)  # handed over, as a reader does with what it parsed
    s = SpectralSet(AXIS, values, ["a", "b", "c"])
    # A million spectra must not be held twice between reading and predicting.
    assert np.shares_memory(s.values, values)
    assert not s.values.flags.writeable


@pytest.mark.parametrize("bad", [np.nan, np.inf])
def test_non_finite_values_are_named(bad):
    values = np.ones((2, AXIS.size))
    values[1, 3] = bad
    with pytest.raises(DataError, match=r"f\.csv \(sample 'b'\): value (nan|inf) at 403"):
        _set(values, source="f.csv")


def test_duplicate_and_non_monotonic_axis_are_named():
    with pytest.raises(DataError, match=r"401 appears twice \(points 2 and 3\)"):
        SpectralSet([400.0, 401.0, 401.0, 402.0], np.ones((1, 4)), ["x"])
    with pytest.raises(DataError, match=r"not monotonic: it turns at point 3 \(400\.5\)"):
        SpectralSet([400.0, 401.0, 400.5, 402.0], np.ones((1, 4)), ["x"])


def test_duplicate_ids_are_named():
    with pytest.raises(DataError, match=r"'a' appears twice \(spectra 1 and 3\).*"
                                        r"--replicates average; replicates='average' in Python"):
        _set(np.ones((3, AXIS.size)), ids=["a", "b", "a"])


def test_align_names_missing_ids_both_ways():
    spectra = _set(np.ones((3, AXIS.size)), ids=["m1", "m2", "m3"], source="spec.csv")
    table = ConcentrationTable(["m2", "m1", "m9"], ["dye [mg/L]"], [[1.0], [2.0], [3.0]],
                               source="conc.csv")
    with pytest.raises(DataError) as err:
        align(spectra, table)
    msg = str(err.value)
    assert "'m9'" in msg and "no spectrum in spec.csv" in msg
    assert "'m3'" in msg and "no row in conc.csv" in msg


def test_align_orders_concentrations_like_the_spectra():
    spectra = _set(ids=["m1", "m2"])
    table = ConcentrationTable(["m2", "m1"], ["dye [mg/L]"], [[2.0], [1.0]])
    _, matched = align(spectra, table)
    assert matched.sample_ids == ("m1", "m2")
    np.testing.assert_array_equal(matched.values[:, 0], [1.0, 2.0])


def test_split_unit():
    assert split_unit("dye A [mg/L]") == ("dye A", "mg/L")
    assert split_unit("dye B") == ("dye B", None)


def test_window_with_several_ranges():
    w = _set().window([(400, 402), (408.0, 409.0)])
    np.testing.assert_array_equal(w.axis, [400, 401, 402, 408, 409])
    np.testing.assert_array_equal(window_mask(AXIS, (403, 403)), AXIS == 403)
    with pytest.raises(DataError, match=r"no axis points inside the window 500-600 nm; the "
                                        r"data span 400-410 nm"):
        _set().window((500, 600))
    with pytest.raises(DataError, match=r"window 800-900 nm, 950-990 nm;"):
        _set().window([(800.0, 900.0), (990.0, 950.0)])
    assert describe_window((900, 800.0), "cm-1") == "800-900 cm-1"


def test_average_by_averages_replicates():
    values = np.array([[1.0] * 11, [3.0] * 11, [10.0] * 11])
    avg = _set(values, ids=["r1", "r2", "r3"]).average_by(["A", "B", "A"])
    assert avg.sample_ids == ("A", "B")
    # arithmetic mean (theory): (1 + 10) / 2 = 5.5
    np.testing.assert_allclose(avg.values[:, 0], [5.5, 3.0])
    assert avg.metadata["replicates"] == {"A": 2, "B": 1}


def test_subtract_blank_uses_the_blank_mean():
    blank = _set(np.array([[0.1] * 11, [0.3] * 11]), ids=["b1", "b2"])
    out = _set(np.full((2, 11), 1.0)).subtract_blank(blank)
    np.testing.assert_allclose(out.values, 0.8)  # 1 - mean(0.1, 0.3) (arithmetic)
    other_grid = SpectralSet(AXIS + 0.5, np.zeros((1, 11)), ["b"])
    with pytest.raises(DataError, match="another axis grid"):
        _set().subtract_blank(other_grid)
    other_unit = SpectralSet(AXIS, np.zeros((1, 11)), ["b"], axis_unit="cm-1")
    with pytest.raises(DataError, match="another axis grid"):
        _set().subtract_blank(other_unit)


def test_concat_refuses_mixed_grids_and_path_lengths():
    a = _set(source="one.csv")
    b = SpectralSet(AXIS[:-1], np.ones((1, 10)), ["c"], source="two.csv")
    with pytest.raises(DataError, match=r"two\.csv.*10 points.*one\.csv.*11 points"):
        concat([a, b])
    c = SpectralSet(AXIS, np.ones((1, 11)), ["c"], path_length_cm=0.1, source="three.csv")
    with pytest.raises(DataError, match=r"path length 0\.1 cm differs"):
        concat([a, c])
    both = concat([a, SpectralSet(AXIS, np.ones((1, 11)), ["c"])])
    assert both.sample_ids == ("a", "b", "c")


def test_above_ceiling_per_sample():
    values = np.full((3, 11), 0.5)
    values[1, 4] = 2.3
    values[2, :] = 1.99
    mask = _set(values, ids=["x", "y", "z"]).above_ceiling()
    # 2.0 AU photometric ceiling: common practice
    np.testing.assert_array_equal(mask, [False, True, False])
    np.testing.assert_array_equal(_set(values, ids=["x", "y", "z"]).above_ceiling(1.0),
                                  [False, True, True])
    pct = SpectralSet(AXIS, np.full((1, 11), 0.5), ["t"], quantity="percent_transmittance")
    # 0.5 %T is A = -log10(0.005) = 2.30 > 2 (IUPAC Gold Book definition)
    assert pct.above_ceiling().tolist() == [True]


def test_percent_transmittance_declared_as_absorbance_warns():
    values = np.random.default_rng(1).uniform(20, 95, size=(2, 11))
    with pytest.warns(BandsolveWarning, match="look like percent transmittance"):
        _set(values).check_quantity()


def test_ambiguous_axis_unit_warns_only_when_unit_not_given():
    axis = np.arange(1200.0, 3001.0, 100)
    with pytest.warns(BandsolveWarning, match="could be nm or cm-1"):
        warn_if_ambiguous_unit(axis, False, "f.csv")
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error")
        warn_if_ambiguous_unit(axis, True, "f.csv")
        warn_if_ambiguous_unit(AXIS, False, "f.csv")


def test_subset_by_ids_and_mask():
    s = _set(np.arange(33.0).reshape(3, 11), ids=["a", "b", "c"])
    assert s.subset(["c", "a"]).sample_ids == ("c", "a")
    assert s.subset(np.array([False, True, False])).sample_ids == ("b",)
    with pytest.raises(DataError, match="one entry per spectrum"):
        s.subset(np.array([True, False]))
    with pytest.raises(DataError, match=r"no spectrum for sample\(s\) \['zz'\]"):
        s.subset(["zz"])


def test_concentration_table_missing_value_names_row_and_analyte():
    with pytest.raises(DataError, match=r"row 3 \(sample 'm2'\).*'dye B \[mg/L\]'"):
        ConcentrationTable(["m1", "m2"], ["dye A [mg/L]", "dye B [mg/L]"],
                           [[1.0, 2.0], [3.0, np.nan]])
    table = ConcentrationTable(["m1"], ["dye A [mg/L]"], [[1.0]])
    with pytest.raises(DataError, match="no concentration row"):
        table.subset(["m2"])


def test_convert_axis_reverses_order_for_wavenumbers():
    s = SpectralSet([400.0, 500.0], [[1.0, 2.0]], ["x"]).convert_axis("cm-1")
    # ν̃ = 1e7 / λ[nm] (definition of wavenumber)
    np.testing.assert_allclose(s.axis, [1e7 / 500, 1e7 / 400])
    np.testing.assert_array_equal(s.values, [[2.0, 1.0]])


def test_resample_accepts_wavenumbers_rounded_to_three_decimals():
    nm = np.arange(380.0, 721.0, 2.0)
    # ν̃ = 1e7 / λ[nm] (definition of wavenumber), written to the file with 3 decimals
    wavenumbers = np.round(1e7 / nm, 3)
    line = 0.1 + 0.002 * (1e7 / wavenumbers - 380.0)  # a straight line in nm
    s = SpectralSet(wavenumbers, line, ["x"], axis_unit="cm-1", source="wn.csv")
    back = s.convert_axis("nm")
    # the rounding moves the ends off 380 and 720 by far less than one 2 nm step (arithmetic)
    assert back.axis[0] != 380.0 and back.axis[-1] != 720.0
    out = back.resample(nm)
    np.testing.assert_array_equal(out.axis, nm)
    # linear interpolation of a straight line is exact (theory); clipping moves the ends by
    # under 1e-5 nm, i.e. under 2e-8 AU here
    np.testing.assert_allclose(out.values[0], 0.1 + 0.002 * (nm - 380.0), atol=1e-7)


def test_resample_slack_is_a_hundredth_of_the_end_step():
    target = np.arange(380.0, 391.0, 2.0)  # data step 2 nm → slack 0.02 nm at each end
    inside = SpectralSet(np.arange(380.01, 391.0, 2.0), np.ones((1, 6)), ["x"])
    np.testing.assert_array_equal(inside.resample(target).axis, target)
    short = SpectralSet(np.arange(380.03, 391.0, 2.0), np.ones((1, 6)), ["x"], source="s.csv")
    with pytest.raises(DataError, match=r"s\.csv: spectra cover 380\.03-390\.03 nm but "
                                        r"380-380\.03 nm is needed"):
        short.resample(target)


def test_resample_message_never_prints_an_empty_range():
    # a fine grid (step 0.001 nm, slack 1e-5 nm) that starts 4e-4 nm above the target
    s = SpectralSet(1000.0004 + 0.001 * np.arange(20), np.ones((1, 20)), ["x"])
    with pytest.raises(DataError) as err:
        s.resample(1000.0 + 0.001 * np.arange(10))
    msg = str(err.value)
    assert "1000-1000 " not in msg and "1000-1000.0004 nm is needed" in msg


def test_transmittance_far_above_one_is_refused():
    values = np.full((2, AXIS.size), 0.5)
    values[1] = np.linspace(15.0, 99.0, AXIS.size)  # percent values declared as a fraction
    s = _set(values, quantity="transmittance", source="t.csv")
    with pytest.raises(DataError, match=r"t\.csv \(sample 'b'\): transmittance 15 at 400 nm is "
                                        r"above 1\.05.*--quantity percent_transmittance"):
        s.to_absorbance()
    # slightly above 1 (noise on a 100 % baseline) still converts: A = -log10(T)
    # (IUPAC Gold Book, "absorbance")
    near = _set(np.full((2, AXIS.size), 1.04), quantity="transmittance").to_absorbance()
    np.testing.assert_allclose(near.values, -np.log10(1.04))


def test_percent_transmittance_above_105_is_refused():
    values = np.full((2, AXIS.size), 50.0)
    values[0, 5] = 250.0
    s = _set(values, quantity="percent_transmittance", source="p.csv")
    with pytest.raises(DataError, match=r"p\.csv \(sample 'a'\): percent transmittance 250 at "
                                        r"405 nm is above 105 \(1 such values"):
        s.to_absorbance()
    ok = _set(np.full((2, AXIS.size), 104.0), quantity="percent_transmittance").to_absorbance()
    np.testing.assert_allclose(ok.values, -np.log10(1.04))  # A = -log10(T) (IUPAC Gold Book)


def test_huge_finite_values_are_not_refused():
    # Row sums overflow to infinity, but every value is finite (IEEE 754): no error.
    s = SpectralSet(AXIS, np.full((2, AXIS.size), 1e308), ["a", "b"])
    assert np.isfinite(s.values).all()


@settings(max_examples=50, deadline=None)
@given(st.integers(1, 6), st.integers(0, AXIS.size - 1), st.sampled_from([np.nan, np.inf, -np.inf]),
       st.booleans())
def test_non_finite_found_wherever_it_is(n, column, bad, plant):
    values = np.ones((n, AXIS.size))
    if plant:
        values[n - 1, column] = bad
    ids = [f"s{i}" for i in range(n)]
    # Theory (IEEE 754): NaN and ±inf are the non-finite values; each one must be refused.
    if plant:
        with pytest.raises(DataError, match=f"value {bad} at "):
            SpectralSet(AXIS, values, ids)
    else:
        SpectralSet(AXIS, values, ids)


def test_repeated_and_empty_ids_still_named():
    with pytest.raises(DataError, match=r"sample id 'b' appears twice \(spectra 2 and 3\)"):
        SpectralSet(AXIS, np.ones((3, AXIS.size)), ["a", "b", "b"])
    with pytest.raises(DataError, match="spectrum 2 has an empty sample id"):
        SpectralSet(AXIS, np.ones((2, AXIS.size)), ["a", "  "])
