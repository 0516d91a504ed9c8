"""Rules every text reader shares, for a file read whole and the same file streamed: quoted
cells (RFC 4180), encodings, repeated ids anywhere in a file, cut files, endless lines,
notes in a folder of spectra, and fingerprints taken from the bytes read."""

from __future__ import annotations

import hashlib
import tracemalloc
import warnings

import numpy as np
import pytest

from bandsolve.errors import BandsolveWarning, DataError, FormatError
from bandsolve.io import iter_spectra_chunks, read_spectra
from bandsolve.io._source import MAX_LINE_BYTES
from bandsolve.io.csv_spectra import read_spectra_file
from bandsolve.io.fingerprint import open_hashed


def _both(path, **kwargs):
    """The file read whole, and streamed with a block boundary after every row."""
    whole = read_spectra(path, **kwargs)
    chunks = list(iter_spectra_chunks(path, 2, budget=1, **kwargs))
    return whole, chunks


def _ids(chunks):
    return [s for c in chunks for s in c.sample_ids]


def test_quoted_ids_with_delimiters_and_doubled_quotes(tmp_path):
    # RFC 4180 (Shafranovich 2005) §2 rules 6-7: quotes protect delimiters; "" is one quote
    path = tmp_path / "q.csv"
    path.write_text('sample,400,410\n"mix 1, day 2",0.5,0.25\n"he said ""x""",1,2\n'
                    'plain,3,4\n', encoding="utf-8")
    whole, chunks = _both(path)
    assert whole.sample_ids == ("mix 1, day 2", 'he said "x"', "plain")
    assert _ids(chunks) == list(whole.sample_ids)
    np.testing.assert_array_equal(whole.values, [[0.5, 0.25], [1, 2], [3, 4]])


def test_unclosed_quote_is_refused_with_its_row(tmp_path):
    path = tmp_path / "q.csv"
    path.write_text('sample,400,410\nA,1,2\n"B,3,4\nC,5,6\n', encoding="utf-8")
    for read in (lambda: read_spectra(path), lambda: list(iter_spectra_chunks(path, 1))):
        with pytest.raises(FormatError, match=r"row 3.*not closed"):
            read()


@pytest.mark.parametrize("codec", ["utf-16", "utf-16-be"])
def test_utf16_with_byte_order_mark_is_read(tmp_path, codec):
    # The byte-order mark U+FEFF tells UTF-16 and its byte order (Unicode Standard §23.8)
    text = "sample,400,410\nµg-1,0.5,0.25\nµg-2,1,2\n"
    data = text.encode(codec)
    if codec == "utf-16-be":
        data = b"\xfe\xff" + data
    path = tmp_path / "u16.csv"
    path.write_bytes(data)
    whole, chunks = _both(path)
    assert whole.sample_ids == ("µg-1", "µg-2") and _ids(chunks) == ["µg-1", "µg-2"]


def test_utf16_without_byte_order_mark_is_refused_precisely(tmp_path):
    path = tmp_path / "u16.csv"
    path.write_bytes("sample,400,410\nA,0.5,0.25\n".encode("utf-16-le"))
    with pytest.raises(FormatError, match="UTF-16 text without a byte-order mark"):
        read_spectra(path)


def test_latin1_ids_stay_distinct_and_mixed_encodings_are_refused(tmp_path):
    # Latin-1 (ISO/IEC 8859-1) maps every byte to one character, so two ids that differ in
    # a byte stay different (the old streamed path replaced both by U+FFFD)
    path = tmp_path / "l1.csv"
    path.write_bytes("sample,400\nµ1é,1\nµ1è,2\n".encode("latin-1"))
    whole, chunks = _both(path)
    assert whole.sample_ids == ("µ1é", "µ1è") and _ids(chunks) == ["µ1é", "µ1è"]
    mixed = tmp_path / "mixed.csv"
    mixed.write_bytes("sample,400\nµ1,1\n".encode() + "µ2,2\n".encode("latin-1"))
    for read in (lambda: read_spectra(mixed), lambda: list(iter_spectra_chunks(mixed, 1))):
        with pytest.raises(FormatError, match=r"row 3: .*mixes text encodings"):
            read()


def test_a_repeated_id_far_apart_is_found_when_streamed(tmp_path):
    rows = "".join(f"s{i},{i},{i + 1}\n" for i in range(300))
    path = tmp_path / "dup.csv"
    path.write_text("sample,400,410\n" + rows + "s7,0,0\n")
    expected = r"sample id 's7' appears twice \(row 9 and row 302\)"
    with pytest.raises(DataError, match=expected):
        read_spectra(path)
    for budget in (1, 50, 1 << 20):
        with pytest.raises(DataError, match=expected):
            list(iter_spectra_chunks(path, 10, budget=budget))


def test_a_short_last_row_is_an_error_and_a_missing_line_end_a_warning(tmp_path):
    rows = "".join(f"s{i},0.{i},0.{i + 1}\n" for i in range(20))
    short = tmp_path / "short.csv"
    short.write_text("sample,400,410\n" + rows + "s20,1\n")
    for read in (lambda: read_spectra(short), lambda: list(iter_spectra_chunks(short, 3))):
        with pytest.raises(FormatError, match="row 22: 2 cells where the table has 3"):
            read()
    cut = tmp_path / "cut.csv"
    cut.write_text("sample,400,410\n" + rows + "s20,1,0.12")  # cut inside its last number
    for read in (lambda: read_spectra(cut).n_samples,
                 lambda: sum(c.n_samples for c in iter_spectra_chunks(cut, 3, budget=1))):
        with pytest.warns(BandsolveWarning, match="row 22: the last line has no line end"):
            assert read() == 21


def test_an_endless_line_is_refused_with_bounded_memory(tmp_path):
    path = tmp_path / "endless.csv"
    with open(path, "wb") as handle:
        handle.write(b"sample,400\n")
        for _ in range(48):
            handle.write(b"1," * (1 << 19))  # 48 MB without a line end
    tracemalloc.start()
    try:
        with pytest.raises(FormatError, match="row 2: the line is longer than"):
            read_spectra(path)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    # at most the line limit plus a few read buffers are held (the limit is the design bound)
    assert peak < 3 * MAX_LINE_BYTES


def test_a_note_in_a_folder_is_not_called_a_stray_delimiter(tmp_path):
    path = tmp_path / "notes.csv"
    path.write_text("Measured on Monday, room 2\nLamp warmed up, cuvette rinsed\n"
                    "Standards from the new lot, see the log\n")
    with pytest.raises(FormatError, match="not a table of spectra") as err:
        read_spectra(path)
    assert "stray delimiter" not in str(err.value)


def test_fingerprint_is_of_the_bytes_read(tmp_path):
    # reference: hashlib.sha256 of the file's bytes (FIPS 180-4)
    path = tmp_path / "s.csv"
    path.write_text("sample,400,410\nA,0.5,0.25\nB,1,2\n")
    with open_hashed(path) as handle:
        spectra = read_spectra_file(handle, source=str(path))
        assert handle.complete
        assert handle.hexdigest() == hashlib.sha256(path.read_bytes()).hexdigest()
    assert spectra.sample_ids == ("A", "B")


def test_comments_after_the_table_start_do_not_set_options(tmp_path):
    # header comments count only before the table, so streaming cannot miss a late one
    path = tmp_path / "late.csv"
    path.write_text("sample,400,410\nA,0.5,0.25\n# quantity: transmittance\nB,0.4,0.2\n")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", BandsolveWarning)
        whole, chunks = _both(path)
    assert whole.quantity == "absorbance" and chunks[0].quantity == "absorbance"


def test_standard_input_is_decoded_like_a_file(monkeypatch):
    # Latin-1 on standard input used to end in an internal error (UnicodeDecodeError)
    import io
    import sys

    from bandsolve.cli.predict_cmd import _read_stdin

    data = "sample,400\nµ1,0.5\n".encode("latin-1")
    monkeypatch.setattr(sys, "stdin", io.TextIOWrapper(io.BytesIO(data), encoding="utf-8"))
    assert _read_stdin() == "sample,400\nµ1,0.5\n"
