"""Input fingerprints are taken from the bytes the readers consumed, not from the file later."""

from __future__ import annotations

import hashlib
import os

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from bandsolve.batch.ledger import LedgerRecorder, list_inputs
from bandsolve.batch.predict import run_batch
from bandsolve.calibration.build import build_cls
from bandsolve.concentrations import ConcentrationTable
from bandsolve.io import iter_spectra_chunks, read_spectra, write_spectra_csv
from bandsolve.io.fingerprint import Fingerprints, open_hashed, read_input_bytes
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 61)
PURE = gaussian_bands(AXIS, (480, 560), (40, 45))


def _set(n: int, rs: int, prefix: str) -> SpectralSet:
    rng = np.random.default_rng(rs)
    return SpectralSet(axis=AXIS, values=rng.uniform(0.1, 1.0, (n, 2)) @ PURE,
                       sample_ids=[f"{prefix}{i}" for i in range(n)])


def _sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()  # hashlib: the FIPS 180-4 reference


@settings(max_examples=60, deadline=None)
@given(st.binary(max_size=200_000))
def test_hashing_reader_gives_the_digest_of_the_bytes(tmp_path_factory, data):
    path = tmp_path_factory.mktemp("fp") / "f.bin"
    path.write_bytes(data)
    with Fingerprints() as seen:
        assert read_input_bytes(path) == data
    got = seen.get(path)
    assert (got.sha256, got.n_bytes, got.complete) == (_sha(data), len(data), True)


def test_partial_read_is_marked_incomplete(tmp_path):
    path = tmp_path / "f.bin"
    path.write_bytes(b"x" * 100_000)
    with Fingerprints() as seen:
        with open_hashed(path) as handle:
            handle.read(10)
    assert not seen.get(path).complete


def test_whole_file_and_streamed_reads_fingerprint_the_file(tmp_path):
    path = tmp_path / "s.csv"
    write_spectra_csv(_set(25, 1, "s"), path)
    with Fingerprints() as seen:
        read_spectra(path)
    assert seen.get(path).sha256 == _sha(path.read_bytes())
    with Fingerprints() as seen:
        chunks = list(iter_spectra_chunks(path, 7))
    assert sum(c.n_samples for c in chunks) == 25
    assert seen.get(path).sha256 == _sha(path.read_bytes()) and seen.get(path).complete


class _ReplaceAfterRead:
    """A sink that swaps an input file for other content once its rows arrive."""

    def __init__(self, path, replacement: bytes) -> None:
        self.path, self.replacement = path, replacement

    def begin_input(self, position, item):
        pass

    def write(self, frame):
        tmp = f"{self.path}.new"
        with open(tmp, "wb") as handle:
            handle.write(self.replacement)
        os.replace(tmp, self.path)

    def discard_input(self):
        pass

    def commit_input(self):
        pass


def test_file_replaced_mid_run_is_recorded_with_the_content_that_was_predicted(tmp_path):
    cal = _set(12, 2, "c")
    conc = ConcentrationTable(cal.sample_ids, ("A [mg/L]", "B [mg/L]"),
                              np.random.default_rng(2).uniform(0.1, 1.0, (12, 2)))
    noise = 1e-3 * np.random.default_rng(11).standard_normal((12, AXIS.size))
    model = build_cls(SpectralSet(axis=AXIS, values=conc.values @ PURE + noise,
                                  sample_ids=cal.sample_ids), conc)
    path = tmp_path / "batch.csv"
    write_spectra_csv(_set(5, 3, "b"), path)
    original = path.read_bytes()
    other = tmp_path / "other.csv"
    write_spectra_csv(_set(5, 4, "o"), other)
    ledger = tmp_path / "l.sqlite"
    rec = LedgerRecorder(ledger, model)
    summary = run_batch(model, [str(path)], [rec, _ReplaceAfterRead(path, other.read_bytes())])
    rec.finish(summary.inputs, summary.failures)
    rec.close()
    recorded = list_inputs(ledger, 1)["sha256"].iloc[0]
    assert recorded == _sha(original) != _sha(path.read_bytes())
