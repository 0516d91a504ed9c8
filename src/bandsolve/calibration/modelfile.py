"""Model files: one zip archive of JSON metadata and ``.npy`` arrays, checksummed.

Loading never executes code from the file: there is no pickle anywhere. Arrays are read with
``numpy.load(allow_pickle=False)``, estimator classes come from a fixed list, and every
member's SHA-256 is checked against the manifest before anything is used.

Layout (schema 6; schema 5 files, whose validated intervals have no proportional part, schema 4
files and schema 3 files, without the ``interval`` record, read the same way; a limit's
recorded method says whether it is set on Q or on Q/(1 + h))::

    manifest.json   format name, schema version, SHA-256 of every other member, content hash
    model.json      the calibration's fields by name (see FIELDS); typed records (limits,
                    selection, merit, ...) as their ``to_dict()``; each estimator as its class,
                    parameters and named fitted state (``state_record()``); arrays by reference
    arrays/NAME.npy numeric arrays, named after the field that holds them

Schemas 1 (bandsolve 0.1.0) and 2 (1 plus an instrument ``transfer`` record) stored each
estimator's ``vars()`` and untyped dictionaries; :func:`_calibration_v1` reads them, nothing
writes them.
"""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
import math
import os
import zipfile
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from bandsolve.calibration.detail import CLS_LEVERAGE_FACTOR, LEVERAGE_FACTOR
from bandsolve.calibration.interval import IntervalBasis
from bandsolve.calibration.model import Calibration
from bandsolve.calibration.modelfile_guard import (
    check_authentic,
    check_plausible,
    load_array,
    load_json,
    read_members,
    sign,
)
from bandsolve.calibration.records import EstimatorLimits, Limits, Selection
from bandsolve.cls import CLSRegressor
from bandsolve.errors import ModelFileError
from bandsolve.io.atomic import atomic_write
from bandsolve.labkey import LabKey
from bandsolve.merit import FiguresOfMerit
from bandsolve.pls import PLSRegressor
from bandsolve.preprocess import SpectralPreprocessor
from bandsolve.transfer import Transfer

__all__ = ["FIELDS", "RECORDS", "SCHEMA_VERSION", "save_model", "load_model", "sha256_file",
           "model_checksum"]

#: Version of the layout written. Raise it whenever a field is added (older bandsolve versions
#: then refuse the file instead of ignoring a field that changes the results).
#: 5: a PLS Q limit may be set on Q/(1 + h) (``detail.Q_PER_LEVERAGE``), which a reader of
#: schema 4 would compare with Q itself, so such readers must refuse the file.
#: 6: a validated ``interval`` may carry a proportional model error (``relative_error``),
#: which a reader of schema 5 would drop, giving too narrow intervals at high levels.
#: 7: a CLS model may carry a band-shaped residual test (``band_basis``, ``band_limit``) with
#: its omnibus residual limit at α/2, and a validated ``interval`` may be pooled with the
#: calibration's error model of runs (``calibration_dof``, t on ν_c + ν_v); a reader of
#: schema 6 would drop the band test and use the wrong t.
SCHEMA_VERSION = 7
FORMAT_NAME = "bandsolve-model"

#: Plain fields of :class:`Calibration` (numbers, strings, arrays, dictionaries of those).
FIELDS = ("method", "analytes", "axis", "axis_unit", "calibrated_range", "settings",
          "path_length_cm", "ceiling", "provenance")
#: Fields holding typed records: name → class with ``to_dict``/``from_dict``. A record absent
#: from an older file loads as None. To add one, see DEVELOPERS.md ("Adding to the model").
RECORDS: dict[str, Any] = {"limits": Limits, "selection": Selection, "merit": FiguresOfMerit,
                           "transfer": Transfer, "interval": IntervalBasis}

_ESTIMATORS: dict[str, Any] = {c.__name__: c for c in (CLSRegressor, PLSRegressor,
                                                         SpectralPreprocessor)}


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
        if isinstance(value, Mapping):
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
        if name not in _ESTIMATORS:
            raise ModelFileError(f"cannot store an estimator of type {name}")
        return {"class": name, "params": self.encode(est.get_params(deep=False), f"{key}.params"),
                "state": self.encode(est.state_record(), f"{key}.state")}


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


def _rebuild_estimator(record: dict[str, Any], arrays: dict[str, np.ndarray],
                       schema: int) -> Any:
    cls = _ESTIMATORS.get(record.get("class"))
    if cls is None:
        raise ModelFileError(f"unknown estimator class {record.get('class')!r} in model file")
    params, state = _decode(record["params"], arrays), _decode(record["state"], arrays)
    if schema < 3:
        return cls.from_attributes(params, state)  # schemas 1 and 2
    return cls.from_state_record(params, state)


# ---------------------------------------------------------------------- save / load
def _content(cal: Calibration) -> tuple[bytes, dict[str, bytes]]:
    enc = _Encoder()
    doc = {name: enc.encode(getattr(cal, name), name) for name in FIELDS}
    for name in RECORDS:
        record = getattr(cal, name)
        doc[name] = None if record is None else enc.encode(record.to_dict(), name)
    doc["preprocessor"] = enc.estimator(cal.preprocessor, "preprocessor")
    doc["estimators"] = [enc.estimator(e, f"estimator{i}") for i, e in enumerate(cal.estimators)]
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


def save_model(cal: Calibration, path: str | os.PathLike[str], *,
               key: LabKey | None = None) -> str:
    """Write ``cal`` to ``path`` atomically; returns the content checksum (hex SHA-256).

    With a lab ``key`` the file is signed (see :mod:`bandsolve.calibration.modelfile_guard`).
    """
    _, members = _content(cal)
    hashes = {k: hashlib.sha256(v).hexdigest() for k, v in members.items()}
    checksum = _content_hash(hashes)
    manifest = {"format": FORMAT_NAME, "schema_version": SCHEMA_VERSION,
                "checksum_algorithm": "sha256", "members": hashes, "checksum": checksum,
                "sizes": {k: len(v) for k, v in members.items()}}
    if key is not None:
        manifest["signature"] = sign(checksum, key)
    with atomic_write(path, "wb", kind="model") as handle:
        with zipfile.ZipFile(handle, "w", compression=zipfile.ZIP_DEFLATED) as zf:
            zf.writestr("manifest.json", json.dumps(manifest, indent=1, sort_keys=True))
            for name, data in members.items():
                zf.writestr(name, data)
    return checksum


def load_model(path: str | os.PathLike[str], *, key: LabKey | None = None,
               expect: set[str] | None = None) -> Calibration:
    """Read and verify a model file.

    Parameters
    ----------
    path : path-like
        The model file.
    key : LabKey, optional
        The lab key: the file must carry a valid signature made with it.
    expect : set of str, optional
        Approved content checksums: any other model is refused.

    Raises
    ------
    ModelFileError
        When the file is not a model file, is truncated, damaged, oversized or implausible,
        fails its checksum, is not approved or not signed by ``key``, claims a newer schema
        than this version reads, or carries a pickled object.
    """
    path = Path(path)
    try:
        with zipfile.ZipFile(path) as zf:
            members = read_members(path, zf)
    except ModelFileError:
        raise
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
    check_authentic(path, manifest, key, expect)
    arrays = {name[len("arrays/"):]: load_array(path, name, data)
              for name, data in members.items() if name.startswith("arrays/")}
    if "model.json" not in members:
        raise ModelFileError(f"{path}: model description missing (no model.json)")
    doc = load_json(path, "model.json", members["model.json"])
    build = _calibration_v1 if manifest["schema_version"] < 3 else _calibration
    try:
        cal = build(doc, arrays)
    except (KeyError, TypeError, ValueError) as exc:
        raise ModelFileError(f"{path}: model description incomplete ({exc!r})") from None
    except ModelFileError as exc:
        raise ModelFileError(f"{path}: {exc}") from None
    check_plausible(path, arrays, cal.limits)
    return dataclasses.replace(cal, provenance={**cal.provenance,
                                                "model_checksum": manifest["checksum"]})


def _calibration(doc: dict[str, Any], arrays: dict[str, np.ndarray]) -> Calibration:
    """Schemas 3 and 4: named fields and typed records."""
    known = {*FIELDS, *RECORDS, "preprocessor", "estimators"}
    unknown = sorted(set(doc) - known)
    if unknown:
        raise ModelFileError(f"unknown field {unknown[0]!r}: the file was written by a newer "
                             "bandsolve; upgrade bandsolve to use it")
    values = {name: _decode(doc[name], arrays) for name in FIELDS}
    values["analytes"] = tuple(values["analytes"])
    records = {name: None if doc.get(name) is None else kind.from_dict(_decode(doc[name], arrays))
               for name, kind in RECORDS.items()}
    return Calibration(
        **values, **records,
        preprocessor=_rebuild_estimator(doc["preprocessor"], arrays, 3),
        estimators=tuple(_rebuild_estimator(e, arrays, 3) for e in doc["estimators"]))


def _calibration_v1(doc: dict[str, Any], arrays: dict[str, np.ndarray]) -> Calibration:
    """Schemas 1 and 2: estimator ``vars()``, untyped dictionaries, an optional transfer."""
    estimators = tuple(_rebuild_estimator(e, arrays, 1) for e in doc["estimators"])
    limits = _decode(doc["limits"], arrays)
    factor = float(limits.get("leverage_factor", LEVERAGE_FACTOR))
    if "models" in limits:  # PLS: one entry per estimator
        models = tuple(EstimatorLimits.from_dict({
            "alpha": m["alpha"], "residual": m["q_limit"], "residual_method": m["q_method"],
            "residual_parameters": m.get("q_parameters") or {}, "t2": m["t2_limit"],
            "leverage": m["leverage_limit"], "msec": m["msec"], "rmsecv": m.get("rmsecv", []),
            "reference_variance": m.get("reference_variance")}) for m in limits["models"])
    else:  # CLS: the limit lives in the estimator; leverage against the calibrated ranges
        res, est = limits.get("residual") or {}, estimators[0]
        factor = CLS_LEVERAGE_FACTOR
        models = (EstimatorLimits(
            alpha=float(res.get("alpha") or "nan"), residual=est.residual_limit,
            residual_method=str(res.get("method", "")),
            leverage=est.leverage_limit(factor, _decode(doc["calibrated_range"], arrays))),)
    selection, merit = _decode(doc.get("selection"), arrays), _decode(doc.get("merit"), arrays)
    return Calibration(
        method=doc["method"], analytes=tuple(doc["analytes"]),
        axis=_decode(doc["axis"], arrays), axis_unit=doc["axis_unit"],
        preprocessor=_rebuild_estimator(doc["preprocessor"], arrays, 1),
        estimators=estimators, calibrated_range=_decode(doc["calibrated_range"], arrays),
        settings=_decode(doc["settings"], arrays), path_length_cm=doc["path_length_cm"],
        ceiling=doc["ceiling"], limits=Limits(factor, models),
        selection=None if selection is None else Selection.from_dict(selection),
        merit=None if merit is None else FiguresOfMerit.from_dict(merit),
        provenance=_decode(doc["provenance"], arrays),
        transfer=Transfer.from_dict(_decode(doc["transfer"], arrays)) if "transfer" in doc
        else None)


def _read_manifest(path: Path, members: dict[str, bytes]) -> dict[str, Any]:
    manifest = load_json(path, "manifest.json", members["manifest.json"])
    if not isinstance(manifest, dict):
        raise ModelFileError(f"{path}: no readable manifest; not a bandsolve model file")
    if manifest.get("format") != FORMAT_NAME:
        raise ModelFileError(f"{path}: not a bandsolve model file")
    version = manifest.get("schema_version")
    if not isinstance(version, int) or not 1 <= version <= SCHEMA_VERSION:
        raise ModelFileError(
            f"{path}: written with model schema {version}, but this bandsolve reads schema "
            f"{SCHEMA_VERSION} or older; upgrade bandsolve to use it"
        )
    return manifest
