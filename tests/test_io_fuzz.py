"""Property-based robustness: any bytes or text given to a reader give a result or one of the
project's own errors with a message, never another exception and never a hang."""

from __future__ import annotations

import tempfile
import warnings
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bandsolve.errors import BandsolveError, BandsolveWarning
from bandsolve.io import (
    iter_spectra_chunks,
    read_absorptivities,
    read_concentrations,
    read_spectra,
    read_spectra_text,
)

FUZZ = settings(max_examples=120, deadline=2000,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])

# Text built from the pieces real files are made of, so the fuzzing reaches past the sniffer.
_CSV_PIECES = st.sampled_from(
    ["sample", "nm", "A", "s1", "400", "401", "402", "0.5", "0,5", "-1", "1e3", "nan", "inf",
     "1e999", "", " ", ",", ";", "\t", "\n", "\r\n", "#", "# quantity: %T\n",
     "# axis_unit: cm-1\n", "# path_length_cm: -1\n", '"', "é", "\x00"]
)
_JCAMP_PIECES = st.sampled_from(
    ["##TITLE=x\n", "##JCAMP-DX=4.24\n", "##XUNITS=NANOMETERS\n", "##XUNITS=1/CM\n",
     "##YUNITS=ABSORBANCE\n", "##YUNITS=TRANSMITTANCE\n", "##XFACTOR=1\n", "##YFACTOR=0.5\n",
     "##FIRSTX=400\n", "##LASTX=404\n", "##NPOINTS=5\n", "##NPOINTS=99999999999\n",
     "##FIRSTY=0\n", "##XYDATA=(X++(Y..Y))\n", "##XYPOINTS=(XY..XY)\n", "##END=\n",
     "400", "402", "@", "A", "J", "j", "%", "T", "s", "S9999999", "0", "5", " ", ",", "?",
     "\n", "$$ c", "1E+400", "e", "-"]
)


def _text(pieces):
    return st.lists(pieces, max_size=40).map("".join)


_VALID_JCAMP = (
    "##TITLE=mix 1\n##JCAMP-DX=4.24\n##XUNITS=NANOMETERS\n##YUNITS=ABSORBANCE\n"
    "##XFACTOR=1\n##YFACTOR=0.001\n##FIRSTX=400\n##LASTX=409\n##NPOINTS=10\n"
    "##FIRSTY=0\n##XYDATA=(X++(Y..Y))\n400@KT%T\n404DKJ%LK\n409A2\n##END=\n"
)
_VALID_CSV = "# quantity: absorbance\nsample;400;401;402\ns1;0,5;0,25;1\ns2;1;2;3\n"
_EDIT_CHARS = st.sampled_from([*"0123456789.,;#@%?JjTsSAa-+eE \t\n", "##END=\n"])


def _mutated(valid: str):
    """A valid file with a few random deletions, insertions and replacements."""
    edits = st.lists(st.tuples(st.integers(0, len(valid)), st.integers(0, 3), _EDIT_CHARS),
                     max_size=4)

    def apply(changes):
        text = valid
        for pos, width, piece in changes:
            pos = min(pos, len(text))
            text = text[:pos] + piece + text[pos + width:]
        return text

    return edits.map(apply)


def _check(read, data: bytes, suffix: str) -> None:
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / f"fuzz{suffix}"
        path.write_bytes(data)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", BandsolveWarning)
            try:
                read(path)
            except BandsolveError as exc:
                assert str(exc).strip()


_INPUT = st.one_of(st.binary(max_size=300), _text(_CSV_PIECES).map(str.encode),
                   _mutated(_VALID_CSV).map(str.encode),
                   st.text(max_size=200).map(lambda t: t.encode("utf-8", "surrogatepass")))


@pytest.mark.slow
@FUZZ
@given(_INPUT)
def test_text_spectra_reader(data):
    _check(read_spectra, data, ".csv")


@pytest.mark.slow
@FUZZ
@given(_INPUT, st.sampled_from(["wide", "transposed", "long", "single"]))
def test_text_spectra_reader_each_layout(data, layout):
    _check(lambda p: read_spectra(p, layout=layout, replicates="average"), data, ".txt")


@FUZZ
@given(st.one_of(st.binary(max_size=300), _text(_JCAMP_PIECES).map(str.encode),
                 _mutated(_VALID_JCAMP).map(str.encode)))
def test_jcamp_reader(data):
    _check(read_spectra, data, ".jdx")


@pytest.mark.slow
@FUZZ
@given(_INPUT)
def test_table_readers(data):
    _check(read_concentrations, data, ".csv")
    _check(read_absorptivities, data, ".csv")


@pytest.mark.slow
@FUZZ
@given(_INPUT, st.integers(1, 4))
def test_chunked_reader(data, chunk_size):
    _check(lambda p: list(iter_spectra_chunks(p, chunk_size)), data, ".csv")


@FUZZ
@given(_text(_CSV_PIECES))
def test_text_in_memory(text):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", BandsolveWarning)
        try:
            read_spectra_text(text)
        except BandsolveError as exc:
            assert str(exc).strip()


def test_unmutated_bases_are_valid(tmp_path):
    # guards the fuzzing: with no edits the base files read cleanly (values by hand from the
    # JCAMP-DX character tables of McDonald & Wilks 1988)
    (tmp_path / "ok.jdx").write_text(_VALID_JCAMP)
    s = read_spectra(tmp_path / "ok.jdx")
    assert s.values[0].tolist() == pytest.approx(
        [0.0, 0.002, 0.004, 0.004, 0.004, 0.006, 0.007, 0.007, 0.01, 0.012])
    (tmp_path / "ok.csv").write_text(_VALID_CSV)
    assert read_spectra(tmp_path / "ok.csv").n_samples == 2


def test_missing_file_is_a_format_error(tmp_path):
    with pytest.raises(BandsolveError, match="cannot read the file"):
        read_spectra(tmp_path / "absent.csv")
