"""Model files: one zip archive of JSON metadata and ``.npy`` arrays, checksummed.

Loading never executes code from the file: there is no pickle anywhere. Arrays are read with
``numpy.load(allow_pickle=False)``, estimator classes come from a fixed list, and every
member's SHA-256 is checked against the manifest before anything is used.

Layout (schema 1; schema 2 when a transfer record is present)::

    manifest.json   format name, schema version, SHA-256 of every other member, content hash
    model.json      the calibration: method, analytes, axis, settings, limits, provenance,
                    estimator parameters and fitted attributes (arrays by reference), and
                    for a model moved to another instrument its ``transfer`` record
    arrays/NAME.npy numeric arrays
"""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
import math
import os
import zipfile
from pathlib import Path
from typing import Any

import numpy as np

from bandsolve.calibration.model import Calibration
from bandsolve.cls import CLSRegressor
from bandsolve.errors import ModelFileError
from bandsolve.io.atomic import atomic_write
from bandsolve.preprocess import SpectralPreprocessor
from bandsolve.transfer import Transfer

__all__ = ["SCHEMA_VERSION", "save_model", "load_model", "sha256_file", "model_checksum"]

#: Newest schema this version reads. Schema 2 adds the optional ``transfer`` record; files
#: without one are still written as schema 1, so older readers keep reading them, while a
#: transferred model is refused by a reader that would ignore its transfer map.
SCHEMA_VERSION = 2
FORMAT_NAME = "bandsolve-model"


def _estimator_classes() -> dict[str, type]:
    from bandsolve.pls import PLSRegressor

    return {"CLSRegressor": CLSRegressor, "PLSRegressor": PLSRegressor,
            "SpectralPreprocessor": SpectralPreprocessor}


def sha256_file(path: str | os.PathLike[str]) -> str:
    """Hex SHA-256 of a file's bytes, read in 1 MiB blocks."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


# ---------------------------------------------------------------------- encoding
class _Encoder:
    """Turns nested values into JSON, moving arrays into named ``.npy`` members."""

    def __init__(self) -> None:
        self.arrays: dict[str, np.ndarray] = {}

    def encode(self, value: Any, key: str) -> Any:
        if isinstance(value, np.ndarray):
            if value.dtype == object:
                raise ModelFileError(f"cannot store {key}: object arrays are not allowed")
            name = f"{key}.npy"
            self.arrays[name] = np.ascontiguousarray(value)
            return {"__array__": name}
        if isinstance(value, dict):
            return {str(k): self.encode(v, f"{key}.{k}") for k, v in value.items()}
        if isinstance(value, list | tuple):
            return [self.encode(v, f"{key}.{i}") for i, v in enumerate(value)]
        if isinstance(value, np.generic):
            value = value.item()
        if isinstance(value, float) and not math.isfinite(value):
            return {"__float__": repr(value)}
        if value is None or isinstance(value, bool | int | float | str):
            return value
        raise ModelFileError(f"cannot store {key} of type {type(value).__name__} in a model file")

    def estimator(self, est: Any, key: str) -> dict[str, Any]:
        name = type(est).__name__
        if name not in _estimator_classes():
            raise ModelFileError(f"cannot store an estimator of type {name}")
        params = est.get_params(deep=False)
        state = {k: v for k, v in vars(est).items() if k not in params}
        return {"class": name, "params": self.encode(params, f"{key}.params"),
                "state": self.encode(state, f"{key}.state")}


def _decode(value: Any, arrays: dict[str, np.ndarray]) -> Any:
    if isinstance(value, dict):
        if set(value) == {"__array__"}:
            try:
                return arrays[value["__array__"]]
            except KeyError:
                raise ModelFileError(f"model file lacks array {value['__array__']}") from None
        if set(value) == {"__float__"}:
            return float(value["__float__"])
        return {k: _decode(v, arrays) for k, v in value.items()}
    if isinstance(value, list):
        return [_decode(v, arrays) for v in value]
    return value


def _rebuild_estimator(record: dict[str, Any], arrays: dict[str, np.ndarray]) -> Any:
    classes = _estimator_classes()
    cls = classes.get(record.get("class"))
    if cls is None:
        raise ModelFileError(f"unknown estimator class {record.get('class')!r} in model file")
    est = cls(**_decode(record["params"], arrays))
    for attr, value in _decode(record["state"], arrays).items():
        setattr(est, attr, value)
    return est


# ---------------------------------------------------------------------- save / load
def _content(cal: Calibration) -> tuple[bytes, dict[str, bytes]]:
    enc = _Encoder()
    doc = {
        "method": cal.method,
        "analytes": list(cal.analytes),
        "axis": enc.encode(np.asarray(cal.axis), "axis"),
        "axis_unit": cal.axis_unit,
        "calibrated_range": enc.encode(np.asarray(cal.calibrated_range), "calibrated_range"),
        "settings": enc.encode(cal.settings, "settings"),
        "path_length_cm": cal.path_length_cm,
        "ceiling": cal.ceiling,
        "limits": enc.encode(cal.limits, "limits"),
        "selection": enc.encode(cal.selection, "selection"),
        "merit": enc.encode(cal.merit, "merit"),
        "provenance": enc.encode(cal.provenance, "provenance"),
        "preprocessor": enc.estimator(cal.preprocessor, "preprocessor"),
        "estimators": [enc.estimator(e, f"estimator{i}") for i, e in enumerate(cal.estimators)],
    }
    if cal.transfer is not None:  # only transferred models carry it: other checksums unchanged
        doc["transfer"] = enc.encode(dataclasses.asdict(cal.transfer), "transfer")
    model_json = json.dumps(doc, indent=1, sort_keys=True, allow_nan=False).encode()
    members = {"model.json": model_json}
    for name, arr in enc.arrays.items():
        buf = io.BytesIO()
        np.save(buf, arr, allow_pickle=False)
        members[f"arrays/{name}"] = buf.getvalue()
    return model_json, members


def _content_hash(hashes: dict[str, str]) -> str:
    digest = hashlib.sha256()
    for name in sorted(hashes):
        digest.update(f"{name}\0{hashes[name]}\n".encode())
    return digest.hexdigest()


def model_checksum(cal: Calibration) -> str:
    """The content checksum a model file of ``cal`` carries (independent of zip details)."""
    _, members = _content(cal)
    return _content_hash({k: hashlib.sha256(v).hexdigest() for k, v in members.items()})


def save_model(cal: Calibration, path: str | os.PathLike[str]) -> str:
    """Write ``cal`` to ``path`` atomically; returns the content checksum (hex SHA-256)."""
    _, members = _content(cal)
    hashes = {k: hashlib.sha256(v).hexdigest() for k, v in members.items()}
    checksum = _content_hash(hashes)
    manifest = {"format": FORMAT_NAME, "schema_version": 2 if cal.transfer is not None else 1,
                "checksum_algorithm": "sha256", "members": hashes, "checksum": checksum}
    with atomic_write(path, "wb") as handle:
        with zipfile.ZipFile(handle, "w", compression=zipfile.ZIP_DEFLATED) as zf:
            zf.writestr("manifest.json", json.dumps(manifest, indent=1, sort_keys=True))
            for name, data in members.items():
                zf.writestr(name, data)
    return checksum


def load_model(path: str | os.PathLike[str]) -> Calibration:
    """Read and verify a model file.

    Raises
    ------
    ModelFileError
        When the file is not a model file, is truncated or damaged, fails its checksum,
        claims a newer schema than this version reads, or carries a pickled object.
    """
    path = Path(path)
    try:
        with zipfile.ZipFile(path) as zf:
            members = {info.filename: zf.read(info) for info in zf.infolist()}
    except FileNotFoundError:
        raise ModelFileError(f"{path}: no such model file") from None
    except zipfile.BadZipFile as exc:
        if "CRC" in str(exc):
            raise ModelFileError(f"{path}: damaged content: {exc} (a changed byte); the file "
                                 "was altered or corrupted in transfer, use the original"
                                 ) from None
        raise ModelFileError(f"{path}: truncated or not a bandsolve model file (no complete "
                             f"archive directory at its end: {exc}); copy the whole file "
                             "again") from None
    except (OSError, EOFError, ValueError) as exc:
        raise ModelFileError(f"{path}: truncated or unreadable model file ({exc}); copy the "
                             "whole file again") from None
    except Exception as exc:  # zlib.error and friends from a damaged archive
        raise ModelFileError(f"{path}: damaged content ({exc}); the file was altered or "
                             "corrupted in transfer, use the original") from None
    manifest = _read_manifest(path, members)
    expected = manifest.get("members", {})
    actual = {k: hashlib.sha256(v).hexdigest() for k, v in members.items() if k != "manifest.json"}
    if set(actual) != set(expected):
        raise ModelFileError(f"{path}: members differ from the manifest; the file was altered")
    bad = [k for k in actual if actual[k] != expected[k]]
    if bad or _content_hash(actual) != manifest.get("checksum"):
        raise ModelFileError(
            f"{path}: content does not match its checksum ({', '.join(bad) or 'manifest'}); "
            "the file is damaged or was altered: use the original model file"
        )
    arrays = {}
    for name, data in members.items():
        if name.startswith("arrays/"):
            try:
                arrays[name[len("arrays/"):]] = np.load(io.BytesIO(data), allow_pickle=False)
            except ValueError as exc:
                raise ModelFileError(
                    f"{path}: {name} carries a pickled object or is not a plain array ({exc}); "
                    "model files never contain code, so it is refused"
                ) from None
    try:
        doc = json.loads(members["model.json"])
        return Calibration(
            method=doc["method"], analytes=tuple(doc["analytes"]),
            axis=_decode(doc["axis"], arrays), axis_unit=doc["axis_unit"],
            preprocessor=_rebuild_estimator(doc["preprocessor"], arrays),
            estimators=[_rebuild_estimator(e, arrays) for e in doc["estimators"]],
            calibrated_range=_decode(doc["calibrated_range"], arrays),
            settings=_decode(doc["settings"], arrays), path_length_cm=doc["path_length_cm"],
            ceiling=doc["ceiling"], limits=_decode(doc["limits"], arrays),
            selection=_decode(doc["selection"], arrays), merit=_decode(doc["merit"], arrays),
            provenance=dict(_decode(doc["provenance"], arrays),
                            model_checksum=manifest["checksum"]),
            transfer=(Transfer(**_decode(doc["transfer"], arrays)) if "transfer" in doc
                      else None),
        )
    except (KeyError, TypeError, json.JSONDecodeError) as exc:
        raise ModelFileError(f"{path}: model description incomplete ({exc})") from None


def _read_manifest(path: Path, members: dict[str, bytes]) -> dict[str, Any]:
    try:
        manifest = json.loads(members["manifest.json"])
    except (KeyError, json.JSONDecodeError, UnicodeDecodeError):
        raise ModelFileError(f"{path}: no readable manifest; not a bandsolve model file") from None
    if manifest.get("format") != FORMAT_NAME:
        raise ModelFileError(f"{path}: not a bandsolve model file")
    version = manifest.get("schema_version")
    if not isinstance(version, int) or version > SCHEMA_VERSION:
        raise ModelFileError(
            f"{path}: written with model schema {version}, but this bandsolve reads schema "
            f"{SCHEMA_VERSION} or older; upgrade bandsolve to use it"
        )
    return manifest
