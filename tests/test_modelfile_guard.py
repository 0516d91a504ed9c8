"""Hostile and implausible model files are refused cleanly, within bounded memory; signed
models are authentic (a recomputed checksum does not make a changed model acceptable)."""

from __future__ import annotations

import hashlib
import io
import json
import struct
import tracemalloc
import zipfile
import zlib

import numpy as np
import pytest

from bandsolve.calibration.build import build_cls
from bandsolve.calibration.modelfile import _content_hash, load_model, save_model
from bandsolve.cli import main
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import ModelFileError
from bandsolve.labkey import LabKey, load_lab_key
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 61)
PURE = gaussian_bands(AXIS, (480, 560), (40, 45))
KEY = LabKey(b"0123456789abcdef0123456789abcdef")


@pytest.fixture(scope="module")
def model_file(tmp_path_factory):
    d = tmp_path_factory.mktemp("guard")
    rng = np.random.default_rng(4)
    C = rng.uniform(0.1, 1.0, (15, 2))
    cal = SpectralSet(axis=AXIS, values=C @ PURE + 1e-3 * rng.standard_normal((15, 61)),
                      sample_ids=[f"c{i}" for i in range(15)])
    model = build_cls(cal, ConcentrationTable(cal.sample_ids, ("A [mg/L]", "B [mg/L]"), C))
    save_model(model, d / "m.bsm")
    save_model(model, d / "signed.bsm", key=KEY)
    return d


def _members(path) -> dict[str, bytes]:
    with zipfile.ZipFile(path) as zf:
        return {i.filename: zf.read(i) for i in zf.infolist()}


def _forge(src, dst, changes: dict[str, bytes], manifest_edit=None) -> None:
    """What anyone can do: change members and recompute every checksum (no key needed)."""
    members = {**_members(src), **changes}
    manifest = json.loads(members.pop("manifest.json"))
    manifest["members"] = {k: hashlib.sha256(v).hexdigest() for k, v in members.items()}
    manifest["sizes"] = {k: len(v) for k, v in members.items()}
    manifest["checksum"] = _content_hash(manifest["members"])
    if manifest_edit:
        manifest_edit(manifest)
    with zipfile.ZipFile(dst, "w", zipfile.ZIP_DEFLATED) as zf:
        zf.writestr("manifest.json", json.dumps(manifest))
        for name, data in members.items():
            zf.writestr(name, data)


def _npy(array: np.ndarray) -> bytes:
    buf = io.BytesIO()
    np.save(buf, array, allow_pickle=False)
    return buf.getvalue()


def _refused(path, match: str, **kwargs) -> str:
    with pytest.raises(ModelFileError, match=match) as info:
        load_model(path, **kwargs)
    assert "Traceback" not in str(info.value)
    return str(info.value)


# ---------------------------------------------------------------------- bombs and bounds
def _zip_with_bomb(path, members: dict[str, bytes], bomb: str, n_bytes: int,
                   declared: int | None = None) -> None:
    """A zip written by hand: ``members`` deflated, plus ``bomb``: ``n_bytes`` zeros deflated
    from one repeated full-flush block (so making it costs little time or memory)."""
    block = 1 << 20
    comp = zlib.compressobj(9, zlib.DEFLATED, -15)
    unit = comp.compress(b"\0" * block) + comp.flush(zlib.Z_FULL_FLUSH)
    tail = zlib.compressobj(9, zlib.DEFLATED, -15).flush(zlib.Z_FINISH)
    entries, offset = [], 0
    with open(path, "wb") as out:
        items = [(n, zlib.compressobj(6, zlib.DEFLATED, -15), d) for n, d in members.items()]
        for name, comp_one, data in [*items, (bomb, None, None)]:
            if data is not None:
                payload_len = None
                body = comp_one.compress(data) + comp_one.flush()
                size, crc = len(data), zlib.crc32(data)
            else:
                repeats = n_bytes // block
                payload_len = repeats * len(unit) + len(tail)
                size, crc = declared if declared is not None else n_bytes, 0
            raw = name.encode()
            clen = len(body) if data is not None else payload_len
            header = struct.pack("<IHHHHHIIIHH", 0x04034B50, 20, 0, 8, 0, 0, crc, clen, size,
                                 len(raw), 0)
            out.write(header + raw)
            if data is not None:
                out.write(body)
            else:
                for _ in range(n_bytes // block):
                    out.write(unit)
                out.write(tail)
            entries.append((raw, crc, clen, size, offset))
            offset += len(header) + len(raw) + clen
        start = offset
        for raw, crc, clen, size, at in entries:
            out.write(struct.pack("<IHHHHHHIIIHHHHHII", 0x02014B50, 20, 20, 0, 8, 0, 0, crc,
                                  clen, size, len(raw), 0, 0, 0, 0, 0, at) + raw)
        length = out.tell() - start
        out.write(struct.pack("<IHHHHIIH", 0x06054B50, 0, 0, len(entries), len(entries),
                              length, start, 0))


def test_zip_bomb_is_refused_from_declared_sizes_in_bounded_memory(model_file, tmp_path):
    bomb = tmp_path / "bomb.bsm"
    # 3 GiB of zeros deflate to about 3 MB: the "3 MB model with a multi-GiB member".
    _zip_with_bomb(bomb, _members(model_file / "m.bsm"), "arrays/extra.npy", 3 << 30)
    assert 2 << 20 < bomb.stat().st_size < 5 << 20
    tracemalloc.start()
    try:
        message = _refused(bomb, "decompression bomb|declare")
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 200 << 20, peak  # the bound: < 200 MB while refusing
    assert "arrays/extra.npy" in message


def test_member_that_understates_its_size_stops_at_the_declared_size(model_file, tmp_path):
    liar = tmp_path / "liar.bsm"
    members = _members(model_file / "m.bsm")
    manifest = json.loads(members["manifest.json"])
    del manifest["sizes"]  # as in files written before sizes were listed: read to the end
    members["manifest.json"] = json.dumps(manifest).encode()
    _zip_with_bomb(liar, members, "arrays/extra.npy", 64 << 20, declared=1000)
    tracemalloc.start()
    try:
        _refused(liar, "damaged")
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 50 << 20, peak


def test_members_not_as_the_manifest_lists_them_are_refused(model_file, tmp_path):
    forged = tmp_path / "f.bsm"
    _forge(model_file / "m.bsm", forged, {},
           manifest_edit=lambda m: m["sizes"].update({"model.json": 12}))
    _refused(forged, "does not match its checksum")


@pytest.mark.parametrize("name,data,match", [
    ("model.json", "{\"method\": \"cls\", \"name\": \"\xe9\"}".encode("latin-1"), "not UTF-8"),
    ("model.json", b"[" * 100_000 + b"]" * 100_000, "nested"),
    ("model.json", b"{\"a\":" * 60 + b"1" + b"}" * 60, "nested"),
])
def test_non_utf8_and_deeply_nested_json_are_refused(model_file, tmp_path, name, data, match):
    forged = tmp_path / "f.bsm"
    _forge(model_file / "m.bsm", forged, {name: data})
    _refused(forged, match)


def test_absurd_declared_shape_and_object_arrays_are_refused(model_file, tmp_path):
    members = _members(model_file / "m.bsm")
    name = next(n for n in members if n.endswith("pure_spectra.npy"))
    good = members[name]
    header_len = len(good) - np.load(io.BytesIO(good)).nbytes
    header = good[:header_len].decode("latin-1")
    shape = header[header.index("'shape': ") + 9: header.index(")", header.index("'shape'")) + 1]
    huge = header.replace(shape, "(1000000000000,)".ljust(len(shape)))
    forged = tmp_path / "shape.bsm"
    _forge(model_file / "m.bsm", forged, {name: huge.encode("latin-1") + good[header_len:]})
    _refused(forged, "declares shape")
    forged = tmp_path / "object.bsm"
    text = header.replace("'<f8'", "'|O' ")
    _forge(model_file / "m.bsm", forged, {name: text.encode("latin-1") + good[header_len:]})
    _refused(forged, "not numbers|not a plain array")


# ---------------------------------------------------------------------- plausibility
def _limits_edit(residual):
    def edit(doc):
        doc["limits"]["models"][0]["residual"] = residual
    return edit


@pytest.mark.parametrize("residual", [1e9, {"__float__": "inf"}, 0.0, -1.0])
def test_implausible_limits_are_refused(model_file, tmp_path, residual):
    doc = json.loads(_members(model_file / "m.bsm")["model.json"])
    _limits_edit(residual)(doc)
    forged = tmp_path / "f.bsm"
    _forge(model_file / "m.bsm", forged, {"model.json": json.dumps(doc).encode()})
    _refused(forged, "residual limit")


def test_nan_limit_loads_as_no_limit_and_only_a_signature_tells_a_forgery(model_file,
                                                                          tmp_path):
    # A model from too few standards has no residual limit (NaN): accepted. A NaN written by
    # someone else is caught by the signature (documented in modelfile_guard).
    doc = json.loads(_members(model_file / "signed.bsm")["model.json"])
    _limits_edit({"__float__": "nan"})(doc)
    forged = tmp_path / "f.bsm"
    _forge(model_file / "signed.bsm", forged, {"model.json": json.dumps(doc).encode()})
    assert np.isnan(load_model(forged).limits.models[0].residual)
    _refused(forged, "signature does not match", key=KEY)


def test_non_finite_fitted_arrays_are_refused(model_file, tmp_path):
    members = _members(model_file / "m.bsm")
    name = next(n for n in members if n.endswith("pure_spectra.npy"))
    values = np.load(io.BytesIO(members[name])).copy()
    values.flat[3] = np.nan
    forged = tmp_path / "f.bsm"
    _forge(model_file / "m.bsm", forged, {name: _npy(values)})
    _refused(forged, "NaN or infinite")


# ---------------------------------------------------------------------- authenticity
def test_signed_model_loads_with_its_key_and_a_forgery_does_not(model_file, tmp_path):
    signed = model_file / "signed.bsm"
    assert load_model(signed, key=KEY).analytes == ("A [mg/L]", "B [mg/L]")
    assert load_model(signed).analytes  # without a key the signature is not needed
    members = _members(signed)
    name = next(n for n in members if n.endswith("pure_spectra.npy"))
    scaled = np.load(io.BytesIO(members[name])) * 1.1  # plausible, but not our model
    forged = tmp_path / "scaled.bsm"
    _forge(signed, forged, {name: _npy(scaled)})
    assert load_model(forged).analytes  # integrity alone cannot tell (documented)
    _refused(forged, "signature does not match", key=KEY)
    _refused(model_file / "m.bsm", "not signed", key=KEY)
    _refused(signed, "another key", key=LabKey(b"another key, also 32 bytes long!"))


def test_expected_checksum_refuses_any_other_model(model_file, tmp_path):
    checksum = json.loads(_members(model_file / "m.bsm")["manifest.json"])["checksum"]
    assert load_model(model_file / "m.bsm", expect={checksum})
    _refused(model_file / "m.bsm", "not an approved model", expect={"ab" * 32})


def test_key_sources_and_short_keys(tmp_path):
    (tmp_path / "k").write_text("  " + "k" * 20 + "\n")
    assert load_lab_key(tmp_path / "k", environ={}).secret == b"k" * 20
    assert load_lab_key(None, environ={"BANDSOLVE_LAB_KEY": "e" * 16}).secret == b"e" * 16
    assert load_lab_key(None, environ={}) is None
    with pytest.raises(Exception, match="at least 16"):
        load_lab_key(None, environ={"BANDSOLVE_LAB_KEY": "short"})
    assert "k" * 20 not in repr(load_lab_key(tmp_path / "k", environ={}))


def test_cli_signs_verifies_and_checks_approved_models(model_file, tmp_path, capsys,
                                                      monkeypatch):
    from bandsolve.io import write_concentrations_csv, write_spectra_csv

    monkeypatch.delenv("BANDSOLVE_LAB_KEY", raising=False)
    monkeypatch.delenv("BANDSOLVE_LAB_KEY_FILE", raising=False)
    rng = np.random.default_rng(5)
    C = rng.uniform(0.1, 1.0, (15, 2))
    cal = SpectralSet(axis=AXIS, values=C @ PURE + 1e-3 * rng.standard_normal((15, 61)),
                      sample_ids=[f"c{i}" for i in range(15)])
    write_spectra_csv(cal, tmp_path / "cal.csv")
    write_concentrations_csv(ConcentrationTable(cal.sample_ids, ("A [mg/L]", "B [mg/L]"), C),
                             tmp_path / "conc.csv")
    (tmp_path / "lab.key").write_text("s" * 40)
    assert main(["build", "--spectra", str(tmp_path / "cal.csv"), "--concentrations",
                 str(tmp_path / "conc.csv"), "--out", str(tmp_path / "m.bsm"), "--key-file",
                 str(tmp_path / "lab.key")]) == 0
    checksum = json.loads(_members(tmp_path / "m.bsm")["manifest.json"])["checksum"]
    base = ["predict", str(tmp_path / "m.bsm"), str(tmp_path / "cal.csv"), "--out",
            str(tmp_path / "r.csv")]
    assert main([*base, "--key-file", str(tmp_path / "lab.key"), "--expect-model",
                 checksum]) == 0
    (tmp_path / "approved.txt").write_text(f"# approved 2026\n{'cd' * 32}\n")
    assert main([*base, "--approved-models", str(tmp_path / "approved.txt")]) == 2
    (tmp_path / "other.key").write_text("o" * 40)
    monkeypatch.setenv("BANDSOLVE_LAB_KEY_FILE", str(tmp_path / "other.key"))
    assert main(base) == 2  # a configured key (environment) must have signed the model
    err = capsys.readouterr().err
    assert "not an approved model" in err and "another key" in err
