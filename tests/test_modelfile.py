"""Model files: bit-identical round trips and refusal of damaged, newer or pickled files."""

from __future__ import annotations

import hashlib
import io
import json
import os
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from bandsolve.calibration.build import build_cls, build_cls_from_absorptivities
from bandsolve.calibration.build_pls import build_pls
from bandsolve.calibration.modelfile import SCHEMA_VERSION, load_model, model_checksum, save_model
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import ModelFileError
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 121)
PURE = gaussian_bands(AXIS, (480, 530, 590), (40, 45, 40))
LABELS = ("A [mg/L]", "B [mg/L]", "C [mg/L]")


def _training(n: int = 24, rs: int = 1):
    rng = np.random.default_rng(rs)
    C = rng.uniform(0.1, 1.0, (n, 3))
    X = C @ PURE + 0.002 * rng.standard_normal((n, AXIS.size))
    ids = [f"cal{i}" for i in range(n)]
    return (SpectralSet(axis=AXIS, values=X, sample_ids=ids, axis_unit="nm"),
            ConcentrationTable(sample_ids=ids, analytes=LABELS, values=C))


def _routine(n: int = 40, rs: int = 2) -> SpectralSet:
    rng = np.random.default_rng(rs)
    X = rng.uniform(0, 1.2, (n, 3)) @ PURE + 0.002 * rng.standard_normal((n, AXIS.size))
    return SpectralSet(axis=AXIS, values=X, sample_ids=[f"r{i}" for i in range(n)])


def _models():
    spectra, table = _training()
    absorptivities = SpectralSet(axis=AXIS, values=PURE, sample_ids=list(LABELS),
                                 quantity="absorptivity")
    return {
        "cls": build_cls(spectra, table, intercept=True, baseline="offset"),
        "cls_absorptivities": build_cls_from_absorptivities(absorptivities, 1.0),
        "pls2": build_pls(spectra, table, cv="contiguous:4", max_components=5),
        "pls1": build_pls(spectra, table, cv="contiguous:4", max_components=5, mode="pls1"),
    }


MODELS = _models()


@pytest.mark.parametrize("name", sorted(MODELS))
def test_round_trip_gives_bit_identical_predictions(tmp_path, name):
    cal = MODELS[name]
    path = tmp_path / "model.bsm"
    checksum = save_model(cal, path)
    back = load_model(path)
    routine = _routine()
    # Exact equality (check_exact): a model file must reproduce every bit (common practice
    # for frozen calibrations: the same numbers every time).
    pd.testing.assert_frame_equal(back.predict(routine), cal.predict(routine), check_exact=True)
    assert back.provenance["model_checksum"] == checksum == model_checksum(cal)
    assert [type(e).__name__ for e in back.estimators] == [
        type(e).__name__ for e in cal.estimators]


def test_save_is_atomic_and_leaves_no_temporary_files(tmp_path):
    path = tmp_path / "model.bsm"
    save_model(MODELS["cls"], path)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["model.bsm"]


def _members(path) -> dict[str, bytes]:
    with zipfile.ZipFile(path) as zf:
        return {i.filename: zf.read(i) for i in zf.infolist()}


def _write_zip(path, members: dict[str, bytes]) -> None:
    with zipfile.ZipFile(path, "w") as zf:
        for name, data in members.items():
            zf.writestr(name, data)


def _manifest_for(members: dict[str, bytes], version: int = SCHEMA_VERSION) -> bytes:
    hashes = {k: hashlib.sha256(v).hexdigest() for k, v in members.items()}
    digest = hashlib.sha256()
    for name in sorted(hashes):
        digest.update(f"{name}\0{hashes[name]}\n".encode())
    return json.dumps({"format": "bandsolve-model", "schema_version": version,
                       "members": hashes, "checksum": digest.hexdigest()}).encode()


@pytest.fixture
def saved(tmp_path):
    path = tmp_path / "model.bsm"
    save_model(MODELS["cls"], path)
    return path


def test_one_flipped_byte_is_refused(saved):
    raw = bytearray(saved.read_bytes())
    with zipfile.ZipFile(saved) as zf:
        info = zf.getinfo("model.json")
    # The member's data start after its 30-byte local header, name and extra field
    # (PKWARE APPNOTE.TXT 6.3, section 4.3.7).
    start = info.header_offset + 30 + len(info.filename) + len(info.extra)
    raw[start + info.compress_size // 2] ^= 0x01
    saved.write_bytes(bytes(raw))
    with pytest.raises(ModelFileError, match="damaged content"):
        load_model(saved)


def test_edited_member_with_valid_archive_fails_the_checksum(saved, tmp_path):
    members = _members(saved)
    doc = json.loads(members["model.json"])
    doc["ceiling"] = 99.0  # a plausible edit that keeps the archive itself valid
    members["model.json"] = json.dumps(doc).encode()
    edited = tmp_path / "edited.bsm"
    _write_zip(edited, members)
    with pytest.raises(ModelFileError, match="does not match its checksum"):
        load_model(edited)


@pytest.mark.parametrize("keep", [0.5, 0.95])
def test_truncated_file_is_refused(saved, keep):
    raw = saved.read_bytes()
    saved.write_bytes(raw[: int(len(raw) * keep)])
    with pytest.raises(ModelFileError, match="truncated"):
        load_model(saved)


def test_newer_schema_is_refused_with_upgrade_advice(saved, tmp_path):
    members = _members(saved)
    content = {k: v for k, v in members.items() if k != "manifest.json"}
    newer = tmp_path / "newer.bsm"
    _write_zip(newer, {"manifest.json": _manifest_for(content, SCHEMA_VERSION + 1), **content})
    with pytest.raises(ModelFileError, match=rf"schema {SCHEMA_VERSION + 1}.*upgrade"):
        load_model(newer)


class _Marker:
    """Unpickling this would create a folder: proof that code ran."""

    def __init__(self, target: str) -> None:
        self.target = target

    def __reduce__(self):
        return (os.mkdir, (self.target,))


def test_pickled_object_is_refused_without_running_it(saved, tmp_path):
    marker = tmp_path / "code-ran"
    payload = np.empty(1, dtype=object)
    payload[0] = _Marker(str(marker))
    buf = io.BytesIO()
    np.save(buf, payload, allow_pickle=True)
    content = {k: v for k, v in _members(saved).items() if k != "manifest.json"}
    content["arrays/x.npy"] = buf.getvalue()
    evil = tmp_path / "pickled.bsm"
    _write_zip(evil, {"manifest.json": _manifest_for(content), **content})
    with pytest.raises(ModelFileError, match="pickled object"):
        load_model(evil)
    assert not marker.exists()


def test_not_a_model_file(tmp_path):
    other = tmp_path / "other.bsm"
    _write_zip(other, {"readme.txt": b"hello"})
    with pytest.raises(ModelFileError, match="manifest"):
        load_model(other)
    with pytest.raises(ModelFileError, match="no such model file"):
        load_model(tmp_path / "absent.bsm")


# ---------------------------------------------------------------------- files of 0.1.0
# Copies of models/rinse-cls.bsm and models/rinse-pls.bsm as bandsolve 0.1.0 wrote them
# (schema 1: estimator attributes stored as they were named in memory).
OLD_FILES = {m: Path(__file__).parent / "data" / f"model-0.1.0-{m}.bsm" for m in ("cls", "pls")}
ROUTINE = Path(__file__).resolve().parents[1] / "examples" / "rinse-water" / "routine"


def _stored(path: Path) -> tuple[dict, dict[str, np.ndarray]]:
    """model.json and the arrays of a model file, read with zipfile/json/numpy only."""
    with zipfile.ZipFile(path) as zf:
        doc = json.loads(zf.read("model.json"))
        arrays = {n[len("arrays/"):]: np.load(io.BytesIO(zf.read(n)), allow_pickle=False)
                  for n in zf.namelist() if n.startswith("arrays/")}
    return doc, arrays


@pytest.mark.parametrize("method", sorted(OLD_FILES))
def test_model_of_0_1_0_loads_and_predicts_as_a_resaved_file(tmp_path, method):
    from bandsolve.io import read_spectra

    old = load_model(OLD_FILES[method])
    resaved = tmp_path / "resaved.bsm"
    save_model(old, resaved)
    with zipfile.ZipFile(OLD_FILES[method]) as zf:
        assert json.loads(zf.read("manifest.json"))["schema_version"] == 1
    with zipfile.ZipFile(resaved) as zf:
        assert json.loads(zf.read("manifest.json"))["schema_version"] == SCHEMA_VERSION
    new = load_model(resaved)
    for path in sorted(ROUTINE.glob("*.csv")):
        spectra = read_spectra(path)
        a, b = old.predict(spectra), new.predict(spectra)
        pd.testing.assert_frame_equal(a, b, check_exact=True)  # bit-identical
    for name in ("limits", "selection", "merit"):  # repr: NaN limits compare equal
        assert repr(getattr(new, name)) == repr(getattr(old, name))


def test_cls_model_of_0_1_0_predicts_least_squares_on_its_stored_spectra():
    # ĉ = least-squares solution of [K; baseline rows]ᵀ c = x − bg (Haaland & Thomas 1988),
    # computed with numpy from the arrays in the file, without bandsolve.
    from bandsolve.io import read_spectra

    doc, arrays = _stored(OLD_FILES["cls"])
    state = doc["estimators"][0]["state"]
    aug = arrays[state["augmented_spectra_"]["__array__"]]
    bg = arrays[state["background_"]["__array__"]]
    axis = arrays[doc["axis"]["__array__"]]
    cal = load_model(OLD_FILES["cls"])
    for path in sorted(ROUTINE.glob("*.csv")):
        spectra = read_spectra(path)
        assert np.array_equal(spectra.axis, axis)  # on the model grid: no resampling
        expected = np.linalg.lstsq(aug.T, (spectra.values - bg).T, rcond=None)[0].T
        got = cal.predict(spectra)[list(doc["analytes"])].to_numpy()
        np.testing.assert_allclose(got, expected[:, :len(doc["analytes"])], rtol=1e-9,
                                   atol=1e-12)


def test_pls_model_of_0_1_0_predicts_with_its_stored_regression_vectors():
    # ŷ = x b + b0 with the stored regression coefficients (de Jong 1993), computed with numpy.
    from bandsolve.io import read_spectra

    doc, arrays = _stored(OLD_FILES["pls"])
    state = doc["estimators"][0]["state"]
    coef = arrays[state["coef_"]["__array__"]]
    intercept = arrays[state["intercept_"]["__array__"]]
    cal = load_model(OLD_FILES["pls"])
    for path in sorted(ROUTINE.glob("*.csv")):
        spectra = read_spectra(path)
        expected = spectra.values @ coef.T + intercept
        got = cal.predict(spectra)[list(doc["analytes"])].to_numpy()
        np.testing.assert_allclose(got, expected, rtol=1e-9, atol=1e-12)
