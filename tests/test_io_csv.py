"""Delimited-text spectra: layouts, delimiters, decimal commas, folders, chunks, round trips."""

from __future__ import annotations

import string
import warnings
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bandsolve.errors import BandsolveWarning, DataError, FormatError
from bandsolve.io import (
    iter_spectra_chunks,
    read_spectra,
    read_spectra_text,
    write_spectra_csv,
)
from bandsolve.spectra import SpectralSet

from .conftest import dataset

# Expected values below are the numbers typed into each hand-written file (common practice:
# a reader must return what the file says).
EXPECTED = np.array([[0.5, 0.25, 0.125], [1.0, 1.5, 2.0]])
AXIS = np.array([400.0, 410.0, 420.0])


def _write(tmp_path: Path, name: str, text: str) -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


@pytest.mark.parametrize(
    "text",
    [
        "sample,400,410,420\nA,0.5,0.25,0.125\nB,1.0,1.5,2.0\n",
        "sample;400;410;420\nA;0,5;0,25;0,125\nB;1;1,5;2\n",
        "sample\t400\t410\t420\nA\t0.5\t0.25\t0.125\nB\t1.0\t1.5\t2.0\n",
        "sample 400 410 420\nA   0.5 0.25 0.125\nB 1.0 1.5 2.0\n",
        '# exported by hand\n"sample","400","410","420"\n"A",0.5,0.25,0.125\n\nB,1.0,1.5,2.0\n',
    ],
    ids=["comma", "semicolon-decimal-comma", "tab", "whitespace", "quoted-comments"],
)
def test_wide_layout_every_delimiter(tmp_path, text):
    s = read_spectra(_write(tmp_path, "wide.csv", text))
    assert s.sample_ids == ("A", "B")
    np.testing.assert_array_equal(s.axis, AXIS)
    np.testing.assert_array_equal(s.values, EXPECTED)
    assert s.axis_unit == "nm" and s.quantity == "absorbance"


@pytest.mark.parametrize(
    "text",
    [
        "nm,A,B\n400,0.5,1.0\n410,0.25,1.5\n420,0.125,2.0\n",
        "nm;A;B\n420;0,125;2,0\n410;0,25;1,5\n400;0,5;1,0\n",  # descending axis
        "nm\tA\tB\n400\t0,5\t1\n410\t0,25\t1,5\n420\t0,125\t2\n",
    ],
)
def test_transposed_layout(tmp_path, text):
    s = read_spectra(_write(tmp_path, "t.csv", text))
    np.testing.assert_array_equal(s.axis, AXIS)
    np.testing.assert_array_equal(s.values, EXPECTED)


def test_long_layout(tmp_path):
    text = "sample,nm,A\nA,400,0.5\nA,410,0.25\nA,420,0.125\nB,420,2.0\nB,400,1.0\nB,410,1.5\n"
    s = read_spectra(_write(tmp_path, "long.csv", text))
    assert s.sample_ids == ("A", "B")
    np.testing.assert_array_equal(s.values, EXPECTED)


def test_long_layout_refuses_unequal_axes(tmp_path):
    text = "A,400,0.5\nA,410,0.25\nB,400,1.0\nB,411,1.5\n"
    with pytest.raises(FormatError, match=r"sample 'B'.*same axis"):
        read_spectra(_write(tmp_path, "long.csv", text))


@pytest.mark.parametrize("text", ["wavelength,absorbance\n400,0.5\n410,0.25\n420,0.125\n",
                                  "400 0,5\n410 0,25\n420 0,125\n"])
def test_single_spectrum_takes_the_file_stem(tmp_path, text):
    s = read_spectra(_write(tmp_path, "mix-7.txt", text))
    assert s.sample_ids == ("mix-7",)
    np.testing.assert_array_equal(s.values, EXPECTED[:1])


def test_ambiguous_layout_asks_for_layout(tmp_path):
    path = _write(tmp_path, "amb.csv", "x,1,2,3\n1,0.1,0.2,0.3\n2,0.2,0.3,0.4\n")
    with pytest.raises(FormatError, match=r"amb\.csv, row 1.*ambiguous.*--layout wide or "
                                          r"--layout transposed; layout='wide'.*in Python"):
        read_spectra(path)
    s = read_spectra(path, layout="wide", axis_unit="nm")
    assert s.sample_ids == ("1", "2")


def test_header_comments_are_honoured(tmp_path):
    text = ("# quantity: percent transmittance\n# axis_unit: cm-1\n# path_length_cm: 0,5\n"
            "sample,5000,6000\nA,50,10\n")
    s = read_spectra(_write(tmp_path, "h.csv", text))
    assert (s.quantity, s.axis_unit, s.path_length_cm) == ("percent_transmittance", "cm-1", 0.5)
    # A = -log10(T): 10 %T → 1 (IUPAC Gold Book, "absorbance")
    assert s.to_absorbance().values[0, 1] == pytest.approx(1.0)
    # an explicit option wins over the comment line
    with pytest.warns(BandsolveWarning, match="look like percent transmittance"):
        assert read_spectra(tmp_path / "h.csv", quantity="absorbance").quantity == "absorbance"


def test_bad_cells_are_named_by_line_and_column(tmp_path):
    text = "# comment\nsample,400,410\nA,0.1,0.2\nB,0.3,oops\n"
    with pytest.raises(FormatError, match=r"bad\.csv, row 4.*column '410'.*'oops'"):
        read_spectra(_write(tmp_path, "bad.csv", text))
    with pytest.raises(FormatError, match=r"row 4 \(sample 'B'\): value in column '410' is "
                                          r"empty"):
        read_spectra(_write(tmp_path, "bad.csv", "# c\nsample,400,410\nA,0.1,0.2\nB,0.3,\n"))
    with pytest.raises(FormatError, match=r"row 3: axis value \(cell 1\) 'x' is not a finite"):
        read_spectra(_write(tmp_path, "bad.csv", "nm,A\n400,0.1\nx,0.2\n"), layout="transposed")
    with pytest.raises(FormatError, match=r"row 3: 2 cells where the table has 3"):
        read_spectra(_write(tmp_path, "bad.csv", "sample,400,410\nA,0.1,0.2\nB,0.3\n"))


def test_nan_cell_names_the_sample_in_wide_and_long_layouts(tmp_path):
    wide = "sample,400,410\nA,0.1,0.2\nmix-7,nan,0.3\n"
    with pytest.raises(FormatError, match=r"w\.csv, row 3 \(sample 'mix-7'\): value in column "
                                          r"'400' 'nan' is not a finite number"):
        read_spectra(_write(tmp_path, "w.csv", wide))
    long = "sample,nm,A\nA,400,0.1\nA,410,0.2\nmix-7,400,0.1\nmix-7,410,inf\n"
    with pytest.raises(FormatError, match=r"row 5 \(sample 'mix-7'\): value in column 'signal'"):
        read_spectra(_write(tmp_path, "l.csv", long), layout="long")


def test_duplicate_ids_error_or_average(tmp_path):
    path = _write(tmp_path, "r.csv", "sample,400,410\nA,1,2\nB,0,0\nA,3,4\n")
    with pytest.raises(DataError, match=r"'A' appears twice \(row 2 and row 4\).*"
                                        r"--replicates average; replicates='average' in Python"):
        read_spectra(path)
    s = read_spectra(path, replicates="average")
    assert s.sample_ids == ("A", "B")
    np.testing.assert_array_equal(s.values[0], [2.0, 3.0])  # arithmetic mean (theory)


def test_percent_transmittance_in_absorbance_file_warns(tmp_path):
    path = _write(tmp_path, "t.csv", "sample,400,410,420\nA,80,60,40\nB,90,70,50\n")
    with pytest.warns(BandsolveWarning, match="percent transmittance"):
        read_spectra(path)


def test_unstated_ambiguous_unit_warns(tmp_path):
    path = _write(tmp_path, "u.csv", "sample,1500,2000,2500\nA,0.1,0.2,0.3\n")
    with pytest.warns(BandsolveWarning, match="could be nm or cm-1"):
        s = read_spectra(path)
    assert s.axis_unit == "nm" and s.metadata["axis_unit_from"] == "default"
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert read_spectra(path, axis_unit="cm-1").axis_unit == "cm-1"


def test_read_from_text_for_stdin():
    s = read_spectra_text("sample,400,410\nA,1,2\n")
    assert s.source == "<stdin>" and s.sample_ids == ("A",)


def test_folder_of_single_spectra(tmp_path):
    folder = tmp_path / "run"
    folder.mkdir()
    _write(folder, "s2.csv", "400,0.2\n410,0.3\n")
    _write(folder, "s1.csv", "nm,A\n400,0.1\n410,0.4\n")
    _write(folder, "notes.md", "not a spectrum\n")
    s = read_spectra(folder, pattern="*.csv")
    assert s.sample_ids == ("s1", "s2")
    np.testing.assert_array_equal(s.values, [[0.1, 0.4], [0.2, 0.3]])
    _write(folder, "s3.csv", "400,0.2\n420,0.3\n")
    with pytest.raises(DataError, match=r"s3\.csv.*differs from .*s1\.csv"):
        read_spectra(folder, pattern="*.csv")
    with pytest.raises(FormatError, match="no spectra files match"):
        read_spectra(folder, pattern="*.jdx")


def test_a_folder_means_every_spectra_file_below_it(tmp_path):
    # One meaning in every command: files searched recursively, each read as it would be
    # alone; single spectra named by their path in the folder, tables keep their own ids.
    folder = tmp_path / "run"
    (folder / "day2").mkdir(parents=True)
    _write(folder, "mix-1.csv", "400,0.1\n410,0.2\n")
    _write(folder / "day2", "mix-1.csv", "400,0.3\n410,0.4\n")
    _write(folder / "day2", "batch.csv", "sample,400,410\nr1,0.5,0.6\nr2,0.7,0.8\n")
    _write(folder, "notes.md", "not a spectrum\n")
    s = read_spectra(folder)
    assert s.sample_ids == ("r1", "r2", "day2/mix-1", "mix-1")  # sorted by path
    np.testing.assert_array_equal(s.values, [[0.5, 0.6], [0.7, 0.8], [0.3, 0.4], [0.1, 0.2]])
    from bandsolve.io import expand_inputs

    assert [Path(f).relative_to(folder).as_posix() for f in expand_inputs([str(folder)])] == [
        "day2/batch.csv", "day2/mix-1.csv", "mix-1.csv"]


def test_chunks_stream_a_wide_file(tmp_path):
    rng = np.random.default_rng(3)
    values = rng.uniform(0, 1, size=(25, 6))
    spectra = SpectralSet(np.arange(300.0, 306.0), values, [f"s{i}" for i in range(25)])
    path = tmp_path / "big.csv"
    write_spectra_csv(spectra, path)
    chunks = list(iter_spectra_chunks(path, 10))
    assert [c.n_samples for c in chunks] == [10, 10, 5]
    np.testing.assert_array_equal(np.vstack([c.values for c in chunks]), values)
    assert chunks[2].sample_ids[0] == "s20"


def test_transposed_writer_round_trip(tmp_path):
    spectra = SpectralSet(AXIS, EXPECTED, ["A", "B"], path_length_cm=1.0)
    write_spectra_csv(spectra, tmp_path / "t.csv", layout="transposed")
    back = read_spectra(tmp_path / "t.csv")
    np.testing.assert_array_equal(back.values, EXPECTED)
    assert back.path_length_cm == 1.0


_IDS = st.text(string.ascii_letters + string.digits + "-_ .", min_size=1, max_size=12).filter(
    lambda s: s == s.strip())


@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    st.integers(1, 6).flatmap(lambda n: st.tuples(
        st.lists(_IDS, min_size=n, max_size=n, unique=True),
        st.lists(st.floats(100.0, 1000.0), min_size=2, max_size=8, unique=True),
        st.data(),
    ))
)
@pytest.mark.slow
def test_round_trip_write_read_is_exact(tmp_path, case):
    ids, axis, data = case
    axis = np.sort(np.array(axis))
    values = data.draw(st.lists(st.lists(st.floats(-1e6, 1e6, allow_subnormal=False),
                                         min_size=axis.size, max_size=axis.size),
                                min_size=len(ids), max_size=len(ids)))
    spectra = SpectralSet(axis, values, ids, axis_unit="nm")
    path = tmp_path / "rt.csv"
    write_spectra_csv(spectra, path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", BandsolveWarning)
        back = read_spectra(path, layout="wide")
    # exact: 17 significant digits identify a double (IEEE 754-2008, §5.12.2)
    assert back.sample_ids == spectra.sample_ids
    np.testing.assert_array_equal(back.axis, spectra.axis)
    np.testing.assert_array_equal(back.values, spectra.values)


def test_real_three_aromatics_spectra():
    path = dataset("three-aromatics-ethanol") / "standards_spectra.csv"
    s = read_spectra(path)
    # 220-600 nm at 1 nm steps, 15 spectra (dataset SOURCE.md)
    assert (s.axis[0], s.axis[-1], s.n_points, s.n_samples) == (220.0, 600.0, 381, 15)
    assert s.axis_unit == "nm" and s.quantity == "absorbance"


def test_readers_hand_their_parsed_array_over_read_only_without_a_copy(tmp_path):
    from bandsolve.io._build import Options, build

    parsed = np.arange(6.0).reshape(2, 3)
    spectra = build(np.array([400.0, 410.0, 420.0]), parsed, ["a", "b"], ["row 2", "row 3"],
                    Options(axis_unit="nm"), "x.csv")
    # The set is a view of what the reader parsed (no second copy), which nobody can change.
    assert np.shares_memory(spectra.values, parsed)
    assert not parsed.flags.writeable
    path = tmp_path / "w.csv"
    path.write_text("sample,400,410,420\n" + "".join(f"s{i},1,2,{i}\n" for i in range(5)))
    whole = read_spectra(path, axis_unit="nm")
    assert not whole.values.flags.owndata and not whole.values.flags.writeable
    assert whole.values[:, 2].tolist() == [0, 1, 2, 3, 4]
