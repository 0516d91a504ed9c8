"""Fingerprints hashed from the bytes actually read (FIPS 180-4 SHA-256 via hashlib)."""

from __future__ import annotations

import hashlib
import io

from hypothesis import given, settings
from hypothesis import strategies as st

from bandsolve.io.fingerprint import HashingReader, open_hashed


@settings(max_examples=60, deadline=None)
@given(st.binary(max_size=5000), st.lists(st.integers(1, 700), min_size=1, max_size=20))
def test_digest_equals_hashlib_over_the_bytes_returned(data, sizes):
    # reference: hashlib.sha256 of the same bytes (FIPS 180-4), whatever the read sizes
    reader = io.BufferedReader(HashingReader(io.BytesIO(data)), buffer_size=64)
    got = b""
    for n in sizes:
        got += reader.read(n)
    got += reader.read()
    assert got == data
    assert reader.raw.complete
    assert reader.raw.hexdigest() == hashlib.sha256(data).hexdigest()


def test_partial_read_covers_only_what_was_read(tmp_path):
    path = tmp_path / "x.csv"
    path.write_bytes(b"sample,400\nA,1\n")
    with open_hashed(path) as reader:
        head = reader.read(7)
        assert not reader.complete
        assert reader.hexdigest() == hashlib.sha256(head).hexdigest()
        rest = reader.read_all()
        assert reader.complete
        assert reader.hexdigest() == hashlib.sha256(path.read_bytes()).hexdigest()
    assert head + rest == path.read_bytes()
