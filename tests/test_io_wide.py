"""Rows of a wide table travel to a worker without their text and are read back identically."""

from __future__ import annotations

import codecs
import tempfile
import warnings
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bandsolve.batch.tasks import cut_tasks
from bandsolve.calibration.blocks import EVAL_ROWS
from bandsolve.errors import BandsolveError, BandsolveWarning, FormatError
from bandsolve.io.csv_spectra import WideRows, open_spectra_text

from .test_io_stream_equivalence import wide_files


def _table(rows: int) -> str:
    rng = np.random.default_rng(12345)
    lines = ["sample,400,410,420,430"]
    lines += [f"s{i}," + ",".join(f"{v:.6f}" for v in rng.uniform(0, 1, 4)) for i in range(rows)]
    return "\n".join(lines) + "\n"


def _tasks_of(path):
    # Blocks of about 5 kB, regrouped into tasks of one evaluation block: the block at the
    # boundary is cut in two, and both halves must know where they are in the file.
    with open_spectra_text(path, axis_unit="nm", budget=5000) as opened:
        return list(cut_tasks(iter(opened), 1))


@pytest.mark.parametrize("variant", ["plain", "bom", "comments", "utf16", "crlf"])
def test_detached_rows_read_back_bit_for_bit(tmp_path, variant):
    text = _table(EVAL_ROWS + 50)
    if variant == "comments":  # a comment and a blank line make the reader rebuild the block
        text = text.replace("\ns5,", "\n# note\n\ns5,")
    if variant == "crlf":
        text = text.replace("\n", "\r\n")
    data = text.encode("utf-8")
    if variant == "bom":
        data = codecs.BOM_UTF8 + data
    if variant == "utf16":
        data = codecs.BOM_UTF16_LE + text.encode("utf-16-le")
    path = tmp_path / "w.csv"
    path.write_bytes(data)
    tasks = _tasks_of(path)
    assert [len(t) for t in tasks] == [EVAL_ROWS, 50]
    for task in tasks:
        light = task.detached()
        if variant == "plain":  # the file's own bytes: nothing of the text travels
            assert all(not b.data for b in light.blocks)
        if variant == "utf16":  # transcoded text cannot be read back from the file: it travels
            assert all(b.data for b in light.blocks)
        whole, back = task.spectra(), light.spectra()
        assert back.sample_ids == whole.sample_ids
        assert np.array_equal(back.values.view(np.int64), whole.values.view(np.int64))
        assert back.metadata == whole.metadata


def test_a_file_changed_between_the_two_reads_is_refused(tmp_path):
    path = tmp_path / "w.csv"
    path.write_text(_table(EVAL_ROWS + 50))
    light = _tasks_of(path)[1].detached()
    path.write_text(_table(EVAL_ROWS + 50).replace("0.", "9."))  # same length, other bytes
    with pytest.raises(FormatError, match="the file changed while it was read"):
        light.spectra()


def _parsed(rows: WideRows):
    try:
        spectra = rows.spectra()
    except BandsolveError as exc:
        return type(exc).__name__, str(exc)
    return spectra.sample_ids, spectra.values.view(np.int64).tolist()


@settings(max_examples=60, deadline=None, suppress_health_check=list(HealthCheck))
@given(wide_files(), st.integers(1, 200))
def test_generated_files_parse_the_same_detached(data, budget):
    # The generated tables of the stream-equivalence tests (encodings, quotes, comments, CRLF,
    # bad cells, cut last lines), in blocks of a random budget: every block gives the same
    # spectra, or the same error, whether its text travelled or was read back from the file.
    with tempfile.TemporaryDirectory() as folder, warnings.catch_warnings():
        warnings.simplefilter("ignore", BandsolveWarning)
        path = Path(folder) / "spectra.csv"
        path.write_bytes(data)
        try:
            with open_spectra_text(path, layout="wide", budget=budget) as opened:
                for rows in opened:
                    assert _parsed(rows.detached()) == _parsed(rows)
        except BandsolveError:
            pass  # refused before any rows (header, layout, encoding): nothing travels
