"""A file streamed in blocks is read exactly as the same file read whole (issue: large files
were read differently from small ones).

Generated wide tables (delimiters, decimal commas, quoted ids with delimiters and doubled
quotes per RFC 4180, non-ASCII ids in UTF-8, Latin-1 and UTF-16, repeated ids, bad cells,
ragged rows, comments, blank and indented lines, CRLF, a missing final line end, files cut
inside their last number) are read whole and streamed with block budgets that put a block
boundary after every row, at random places and nowhere; the accept/refuse decision, the
error type and the numbers must be identical. The expected values are those typed into each
generated file (common practice: a reader returns what the file says), checked against
Python's own ``float`` (correctly rounded, IEEE 754-2008) for accepted files.

The tests marked slow run 5,000 cases each; ``BANDSOLVE_STREAM_CASES`` sets the count of the
quick ones. ``--hypothesis-show-statistics`` shows how many files were accepted or refused.
"""

from __future__ import annotations

import os
import tempfile
import warnings
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from bandsolve.errors import BandsolveError, BandsolveWarning
from bandsolve.io.csv_spectra import iter_spectra_chunks, read_spectra_file

_CASES = settings(max_examples=int(os.environ.get("BANDSOLVE_STREAM_CASES", "40")),
                  deadline=None, suppress_health_check=list(HealthCheck))

_IDS = st.sampled_from(["s1", "s2", "A", "mix 3", "µg-1", "é", "a,b", 'he "x"', "x;y",
                        "=1", "  pad  ", "sample", "#5", "٣"])
_BAD = st.sampled_from(["", "nan", "inf", "1e999", "x", "1_0", "٣", "0x10", "1.5.2", "--1",
                        '"0.5"', " 0.5 ", "+.5", "5.", "1E-3", "-0"])


def _quote(cell: str, delimiter: str) -> str:
    needs = any(ch in cell for ch in (delimiter, '"')) or cell != cell.strip() or (
        delimiter == " " and " " in cell)
    return '"' + cell.replace('"', '""') + '"' if needs else cell


@st.composite
def wide_files(draw):
    delimiter = draw(st.sampled_from([",", ";", "\t", " "]))
    decimal = "," if delimiter in ";\t" and draw(st.booleans()) else "."
    p = draw(st.integers(1, 4))
    n = draw(st.integers(1, 12))
    axis = sorted(draw(st.lists(st.integers(200, 900), min_size=p, max_size=p, unique=True)))

    def number(x: float) -> str:
        text = draw(st.sampled_from([repr(x), f"{x:.3f}", f"{x:.6e}", f"{x:g}"]))
        return text.replace(".", ",") if decimal == "," else text

    lines = ["sample" + delimiter + delimiter.join(str(a) for a in axis)]
    if draw(st.booleans()):
        lines.insert(0, "# quantity: absorbance")
    for _ in range(n):
        cells = [_quote(draw(_IDS) + draw(st.sampled_from(["", "", str(draw(st.integers(0, 9)))])),
                        delimiter)]
        cells += [number(draw(st.floats(-2, 2, allow_nan=False))) for _ in range(p)]
        roll = draw(st.integers(0, 60))
        if roll == 0:
            cells[draw(st.integers(1, p))] = draw(_BAD)
        elif roll == 1:
            cells.pop()
        elif roll == 2:
            cells.append("1")
        line = delimiter.join(cells)
        extra = draw(st.integers(0, 30))
        if extra == 0:
            lines.append("")
        elif extra == 1:
            lines.append("# a comment")
        elif extra == 2:
            line = "  " + line
        lines.append(line)
    newline = draw(st.sampled_from(["\n", "\n", "\r\n"]))
    text = newline.join(lines) + newline
    end = draw(st.integers(0, 6))
    if end == 0:
        text = text.rstrip("\r\n")  # no final line end
    elif end == 1:
        text = text.rstrip("\r\n")[:-draw(st.integers(1, 3))]  # cut inside the last number
    encoding = draw(st.sampled_from(["utf-8", "utf-8", "utf-8-sig", "latin-1", "utf-16"]))
    return text.encode(encoding, errors="replace")


def _outcome(read):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", BandsolveWarning)
        try:
            spectra = read()
        except BandsolveError as exc:
            return type(exc).__name__, str(exc).split(":")[0]
    return spectra


def _whole(path):
    return read_spectra_file(path, layout="wide")


def _streamed(path, budget, chunk_size):
    chunks = list(iter_spectra_chunks(path, chunk_size, layout="wide", budget=budget))
    return chunks


@pytest.mark.slow
@_CASES
@given(wide_files(), st.integers(1, 200), st.integers(1, 7))
def test_streamed_and_whole_reads_agree(data, budget, chunk_size):
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "spectra.csv"
        path.write_bytes(data)
        whole = _outcome(lambda: _whole(path))
        event(f"whole file: {whole[0] if isinstance(whole, tuple) else 'accepted'}")
        for size in (1, budget, 1 << 20):  # a block boundary after every row; random; none
            streamed = _outcome(lambda size=size: _streamed(path, size, chunk_size))
            if isinstance(whole, tuple) or isinstance(streamed, tuple):
                assert isinstance(whole, tuple) and isinstance(streamed, tuple), (whole,
                                                                                  streamed)
                assert whole[0] == streamed[0]
                continue
            assert sum(c.n_samples for c in streamed) == whole.n_samples
            assert all(c.n_samples <= chunk_size for c in streamed)
            np.testing.assert_array_equal(np.vstack([c.values for c in streamed]),
                                          whole.values)
            assert [s for c in streamed for s in c.sample_ids] == list(whole.sample_ids)
            for c in streamed:
                np.testing.assert_array_equal(c.axis, whole.axis)


_LONG = settings(max_examples=5000, deadline=None, suppress_health_check=list(HealthCheck))


@pytest.mark.slow
@_LONG
@given(wide_files(), st.integers(1, 200), st.integers(1, 7))
def test_streamed_and_whole_reads_agree_5000_cases(data, budget, chunk_size):
    test_streamed_and_whole_reads_agree.hypothesis.inner_test(data, budget, chunk_size)


_CELL_CHARS = st.sampled_from([*"0123456789.,;+-eE \t\"'#xµ٣_", "nan", "inf", "1e999", '""'])
_NUMBERS = st.floats(-1e6, 1e6, allow_nan=False).flatmap(
    lambda x: st.sampled_from([repr(x), f"{x:.3e}", f"{x:.2f}", f" {x:g} ", f'"{x}"']))
_CELLS = st.one_of(_NUMBERS, _NUMBERS, st.lists(_CELL_CHARS, max_size=6).map("".join),
                   st.lists(_CELL_CHARS, max_size=3).map("".join).flatmap(
                       lambda t: _NUMBERS.map(lambda x: x + t)))


@_CASES
@given(st.sampled_from([",", ";", "\t", None]), st.booleans(),
       st.lists(_CELLS, min_size=1, max_size=4))
def test_compiled_engine_never_accepts_what_the_careful_parser_refuses(delimiter, comma, cells):
    # the compiled engine is only a fast path: whatever it accepts, the careful parser must
    # accept with the same ids and bit-identical numbers (Python float: correctly rounded)
    from bandsolve.errors import FormatError
    from bandsolve.io._source import Block
    from bandsolve.io._text import Dialect, data_text
    from bandsolve.io._wide import WideTable, _careful, _compiled, _data_rows

    decimal = "," if comma and delimiter != "," else "."
    width = len(cells)
    table = WideTable("t.csv", Dialect(delimiter, decimal), tuple(f"c{k}" for k in
                                                                   range(width - 1)),
                      np.arange(width - 1.0), 1)
    line = (delimiter or " ").join(cells)
    if not data_text(line):  # blank and comment lines never reach the row parser
        return
    data = line.encode() + b"\n"
    block = _data_rows(data, 2, "utf-8", Block(data, 2))  # as the readers hand rows over
    fast = _compiled(table, block) if width > 1 else None
    if fast is None or not all(fast[1]):  # parse_rows sends these to the careful parser
        event("compiled engine refused")
        return
    event("compiled engine accepted")
    try:
        slow = _careful(table, block, None)
    except FormatError as exc:
        pytest.fail(f"compiled engine accepted {line!r}, careful parser refused: {exc}")
    np.testing.assert_array_equal(fast[0], slow[0])
    assert [s.strip() for s in fast[1]] == [s.strip() for s in slow[1]]


@pytest.mark.slow
@_LONG
@given(st.sampled_from([",", ";", "\t", None]), st.booleans(),
       st.lists(_CELLS, min_size=1, max_size=4))
def test_compiled_engine_agrees_5000_cases(delimiter, comma, cells):
    inner = test_compiled_engine_never_accepts_what_the_careful_parser_refuses.hypothesis
    inner.inner_test(delimiter, comma, cells)
