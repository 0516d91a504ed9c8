"""Concentration and absorptivity tables: reading, errors, writing, round trips."""

from __future__ import annotations

import string
import warnings
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import BandsolveWarning, DataError, FormatError
from bandsolve.io import read_absorptivities, read_concentrations, write_concentrations_csv

from .conftest import dataset


def _write(tmp_path: Path, text: str, name: str = "c.csv") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


@pytest.mark.parametrize("text", [
    "sample,dye A [mg/L],dye B [mg/L]\nm1,1.5,0\nm2,2.25,3\n",
    "# made by hand\nsample;dye A [mg/L];dye B [mg/L]\nm1;1,5;0\nm2;2,25;3\n",
    "sample\tdye A [mg/L]\tdye B [mg/L]\nm1\t1.5\t0\nm2\t2.25\t3\n",
])
def test_concentrations_every_delimiter(tmp_path, text):
    table = read_concentrations(_write(tmp_path, text))
    # expected: the numbers typed into the file (common practice)
    assert table.sample_ids == ("m1", "m2")
    assert table.analytes == ("dye A [mg/L]", "dye B [mg/L]")
    assert table.units == ("mg/L", "mg/L") and table.names == ("dye A", "dye B")
    np.testing.assert_array_equal(table.values, [[1.5, 0.0], [2.25, 3.0]])


def test_empty_cell_names_row_and_column(tmp_path):
    text = "# c\nsample,dye A [mg/L],dye B [mg/L]\nm1,1,2\nm2,,3\n"
    with pytest.raises(FormatError, match=r"c\.csv, row 4 \(sample 'm2'\): concentration in "
                                          r"column 'dye A \[mg/L\]' is empty"):
        read_concentrations(_write(tmp_path, text))


def test_repeated_sample_names_both_lines(tmp_path):
    text = "sample,dye [mg/L]\nm1,1\nm2,2\nm1,3\n"
    with pytest.raises(FormatError, match=r"row 4 \(sample 'm1'\).*lines 2 and 4"):
        read_concentrations(_write(tmp_path, text))


def test_unlabelled_analyte_column(tmp_path):
    with pytest.raises(FormatError, match="column 3 has no analyte label"):
        read_concentrations(_write(tmp_path, "sample,dye [mg/L],\nm1,1,2\n"))


def test_absorptivities_keep_the_analyte_label_and_unit(tmp_path):
    text = ("# unit: L/(mol cm)\ncomponent,400,410,420\ndye A [mol/L],12000,15000,9000\n"
            "dye B [mol/L],100,2000,30000\n")
    k = read_absorptivities(_write(tmp_path, text, "eps.csv"))
    assert k.quantity == "absorptivity" and k.metadata["unit"] == "L/(mol cm)"
    assert k.sample_ids == ("dye A [mol/L]", "dye B [mol/L]")
    np.testing.assert_array_equal(k.values[1], [100.0, 2000.0, 30000.0])


_LABEL = st.text(string.ascii_letters + string.digits + " -_[]/", min_size=1,
                 max_size=14).filter(lambda s: s == s.strip())


@pytest.mark.filterwarnings("ignore:.*state no unit:bandsolve.errors.BandsolveWarning")
@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(_LABEL, min_size=1, max_size=5, unique=True),
       st.lists(_LABEL, min_size=1, max_size=4, unique=True), st.data())
def test_concentration_round_trip(tmp_path, ids, analytes, data):
    values = data.draw(st.lists(
        st.lists(st.floats(0, 1e6, allow_subnormal=False), min_size=len(analytes),
                 max_size=len(analytes)), min_size=len(ids), max_size=len(ids)))
    table = ConcentrationTable(ids, analytes, values)
    write_concentrations_csv(table, tmp_path / "rt.csv")
    back = read_concentrations(tmp_path / "rt.csv")
    # exact: 17 significant digits identify a double (IEEE 754-2008, §5.12.2)
    assert back.sample_ids == table.sample_ids and back.analytes == table.analytes
    np.testing.assert_array_equal(back.values, table.values)


def test_writer_refuses_labels_that_would_not_survive(tmp_path):
    table = ConcentrationTable(["a,b"], ["dye [mg/L]"], [[1.0]])
    with pytest.raises(FormatError, match="cannot be written to CSV unchanged"):
        write_concentrations_csv(table, tmp_path / "x.csv")
    assert not (tmp_path / "x.csv").exists()


def test_real_three_aromatics_concentrations():
    path = dataset("three-aromatics-ethanol") / "standards_concentrations.csv"
    table = read_concentrations(path)
    # three analytes in mol/L, 15 rows (dataset SOURCE.md)
    assert table.units == ("mol/L", "mol/L", "mol/L")
    assert table.values.shape == (15, 3)
    assert table.values.max() == pytest.approx(4e-4)  # 400 µmol/L top standard (SOURCE.md)


def test_negative_concentration_names_file_row_sample_and_column(tmp_path):
    text = "sample,dye A [mg/L],dye B [mg/L]\ncal-01,6,7.5\ncal-07,3,-3.0\n"
    # a concentration is an amount per volume, never below zero (common practice)
    with pytest.raises(DataError, match=r"neg\.csv, row 3 \(sample 'cal-07'\): concentration -3 "
                                        r"in column 'dye B \[mg/L\]' is negative"):
        read_concentrations(_write(tmp_path, text, "neg.csv"))


def test_columns_without_unit_warn_once_naming_them(tmp_path):
    text = "sample,dye A,dye B [mg/L],dye C\nm1,1,2,3\n"
    with pytest.warns(BandsolveWarning) as record:
        table = read_concentrations(_write(tmp_path, text, "u.csv"))
    assert len(record) == 1
    msg = str(record[0].message)
    assert "'dye A', 'dye C'" in msg and "'dye A [mg/L]'" in msg and "dye B" not in msg
    assert table.units == (None, "mg/L", None)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        read_concentrations(_write(tmp_path, "sample,dye A [g/L]\nm1,1\n", "ok.csv"))


GROUPED = ("sample,dye A [mg/L],batch,dye B [mg/L]\ncal-01,6,day0,7.5\ncal-02,9,day1,2.5\n"
           "cal-03,3,day0,0\n")


def test_label_columns_are_read_as_text_and_left_out_of_the_analytes(tmp_path):
    table = read_concentrations(_write(tmp_path, GROUPED, "g.csv"), label_columns=["batch"])
    # expected: the cells typed into the file (common practice)
    assert table.analytes == ("dye A [mg/L]", "dye B [mg/L]")
    np.testing.assert_array_equal(table.values, [[6, 7.5], [9, 2.5], [3, 0]])
    assert table.labels == {"batch": ("day0", "day1", "day0")}
    sub = table.subset(["cal-03", "cal-01"])
    assert sub.labels == {"batch": ("day0", "day0")}
    assert sub.analytes == table.analytes
    # numeric-looking labels stay text
    nums = GROUPED.replace("day", "")
    assert read_concentrations(_write(tmp_path, nums, "n.csv"),
                               label_columns=("batch",)).labels["batch"] == ("0", "1", "0")


def test_text_column_not_named_as_labels_says_how_to_read_it(tmp_path):
    with pytest.raises(FormatError, match=r"g\.csv: column 'batch' holds text \('day0' in line "
                                          r"2\).*--cv groups:batch.*label_columns=\['batch'\]"):
        read_concentrations(_write(tmp_path, GROUPED, "g.csv"))


def test_missing_or_empty_label_column_is_refused(tmp_path):
    with pytest.raises(FormatError, match=r"g\.csv, row 1: no column 'Batch' to read labels "
                                          r"from; the columns are 'dye A \[mg/L\]', 'batch'"):
        read_concentrations(_write(tmp_path, GROUPED, "g.csv"), label_columns=["Batch"])
    holed = GROUPED.replace("day1", "")
    with pytest.raises(FormatError, match=r"row 3 \(sample 'cal-02'\): label column 'batch' is "
                                          r"empty"):
        read_concentrations(_write(tmp_path, holed, "h.csv"), label_columns=["batch"])


def test_table_keeps_its_positional_api_and_checks_labels():
    table = ConcentrationTable(["m1", "m2"], ["dye [mg/L]"], [[1.0], [2.0]], "c.csv")
    assert table.source == "c.csv" and table.labels == {}
    with pytest.raises(DataError, match=r"label column 'day' has 1 entries for 2 samples"):
        ConcentrationTable(["m1", "m2"], ["dye [mg/L]"], [[1.0], [2.0]], labels={"day": ["d0"]})
    with pytest.raises(DataError, match=r"'dye \[mg/L\]' is named both as an analyte"):
        ConcentrationTable(["m1"], ["dye [mg/L]"], [[1.0]], labels={"dye [mg/L]": ["x"]})
