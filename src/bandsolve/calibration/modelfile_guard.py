"""Defences of the model-file reader: bounded reading, plausible content, authenticity.

Integrity is not authenticity. The manifest's SHA-256 checksums prove that a model file is
the one whose checksum you hold, but anyone can edit a model (scale its pure spectra, raise a
limit) and recompute them. Two things answer "is this *our* model?":

* ``predict --expect-model SHA`` (or a list of approved checksums) refuses every other model;
* a **signature**: ``build --key-file`` stores an HMAC of the content checksum made with the
  lab key (:mod:`bandsolve.labkey`); whenever a key is configured, loading requires a valid
  signature by that key. Without the key nobody can make one.

Reading is bounded before anything is decompressed: the sizes the archive declares (and,
in files written since, the sizes the manifest lists) are checked against fixed caps, and
the decompressor never returns more than the declared size (a member that lies fails its
CRC). Arrays are checked from their ``.npy`` header (plain numeric type, a shape that
matches the bytes) before they are loaded; JSON must be UTF-8 and not absurdly nested.
After loading, fitted arrays must be finite and limits plausible (a NaN limit means "none").

References
----------
Fifield, D. (2019). A better zip bomb. USENIX WOOT '19 (overlapping and highly compressed
members; defence by declared sizes).
Krawczyk, H., Bellare, M., Canetti, R. (1997). HMAC. RFC 2104.
"""

from __future__ import annotations

import io
import json
import math
import zipfile
from pathlib import Path
from typing import Any

import numpy as np

from bandsolve.errors import ModelFileError
from bandsolve.labkey import LabKey

__all__ = ["MAX_MEMBER_BYTES", "MAX_TOTAL_BYTES", "read_members", "load_array", "load_json",
           "sign", "check_authentic", "check_plausible"]

#: Largest single member, decompressed (a spectrum of 10⁵ points × 10³ components in doubles).
MAX_MEMBER_BYTES = 512 << 20
#: Largest total of all members, decompressed.
MAX_TOTAL_BYTES = 1 << 30
#: Members above 1 MiB may expand at most this many times (model data compress 1–10×).
MAX_RATIO = 200
MAX_MEMBERS = 10_000
MAX_JSON_BYTES = 64 << 20
MAX_DEPTH = 48
#: Limits above this are not plausible (F ratios, T², Q in AU², leverage are all far below).
MAX_LIMIT = 1e6
SIGNATURE_PURPOSE = "model signature"
_NUMERIC_KINDS = "biuf"


def _refuse(path: Path, what: str) -> ModelFileError:
    return ModelFileError(f"{path}: {what}; the file is damaged or was made to harm readers: "
                          "use the original model file")


def read_members(path: Path, zf: zipfile.ZipFile) -> dict[str, bytes]:
    """Every member of an open model archive, read only after its declared size was checked.

    The manifest is read first; when it lists member sizes, the archive's declared sizes must
    equal them before any other member is decompressed.
    """
    infos = zf.infolist()
    names = [i.filename for i in infos]
    if len(infos) > MAX_MEMBERS or len(set(names)) != len(names):
        raise _refuse(path, f"{len(infos)} archive members, some repeated or too many")
    total = 0
    for info in infos:
        total += info.file_size
        ratio = info.file_size / max(info.compress_size, 1)
        if info.file_size > MAX_MEMBER_BYTES or (info.file_size > 1 << 20
                                                 and ratio > MAX_RATIO):
            raise _refuse(path, f"member {info.filename} declares {info.file_size:,} bytes "
                          f"from {info.compress_size:,} compressed (a decompression bomb)")
    if total > MAX_TOTAL_BYTES:
        raise _refuse(path, f"its members declare {total:,} bytes in all (at most "
                      f"{MAX_TOTAL_BYTES:,} are read)")
    by_name = {i.filename: i for i in infos}
    if "manifest.json" not in by_name or by_name["manifest.json"].file_size > MAX_JSON_BYTES:
        raise ModelFileError(f"{path}: no readable manifest; not a bandsolve model file")
    members = {"manifest.json": _read(zf, by_name["manifest.json"])}
    sizes = _manifest_sizes(members["manifest.json"])
    if sizes is not None:
        declared = {n: i.file_size for n, i in by_name.items() if n != "manifest.json"}
        if declared != sizes:
            wrong = sorted(set(declared.items()) ^ set(sizes.items()))[0][0]
            raise _refuse(path, f"member {wrong} does not match its checksum (its size is not "
                          "the one the manifest lists)")
    for info in infos:
        if info.filename != "manifest.json":
            members[info.filename] = _read(zf, info)
    return members


def _read(zf: zipfile.ZipFile, info: zipfile.ZipInfo) -> bytes:
    """A member's bytes, decompressed in 1 MiB steps: never more than its declared size
    (``ZipFile.read`` would inflate a member that understates its size in one piece)."""
    chunks = []
    with zf.open(info) as handle:
        while chunk := handle.read(1 << 20):
            chunks.append(chunk)
    return b"".join(chunks)


def _manifest_sizes(data: bytes) -> dict[str, int] | None:
    try:
        sizes = json.loads(data).get("sizes")
    except (ValueError, AttributeError, RecursionError):
        return None  # reported, with its reason, when the manifest is read properly
    if not isinstance(sizes, dict):
        return None
    return {str(k): v for k, v in sizes.items()}


def load_json(path: Path, name: str, data: bytes) -> Any:
    """A JSON member: UTF-8, at most :data:`MAX_DEPTH` levels deep."""
    if len(data) > MAX_JSON_BYTES:
        raise _refuse(path, f"{name} holds {len(data):,} bytes of JSON")
    try:
        value = json.loads(data.decode("utf-8"))
    except UnicodeDecodeError as exc:
        raise _refuse(path, f"{name} is not UTF-8 text (byte {exc.start})") from None
    except RecursionError:
        raise _refuse(path, f"{name} is nested too deeply") from None
    except ValueError as exc:
        raise ModelFileError(f"{path}: {name} is not readable JSON ({exc})") from None
    stack, depth = [(value, 1)], 0
    while stack:
        item, level = stack.pop()
        depth = max(depth, level)
        if depth > MAX_DEPTH:
            raise _refuse(path, f"{name} is nested more than {MAX_DEPTH} levels deep")
        children = item.values() if isinstance(item, dict) else item if isinstance(
            item, list) else ()
        stack.extend((child, level + 1) for child in children)
    return value


def load_array(path: Path, name: str, data: bytes) -> np.ndarray:
    """A ``.npy`` member, after its header shows a plain numeric array matching its bytes."""
    handle = io.BytesIO(data)
    try:
        version = np.lib.format.read_magic(handle)
        header = (np.lib.format.read_array_header_1_0 if version == (1, 0)
                  else np.lib.format.read_array_header_2_0)
        shape, _, dtype = header(handle, max_header_size=10_000)
    except (ValueError, SyntaxError, TypeError) as exc:
        raise _refuse(path, f"{name} is not a plain array ({exc})") from None
    if dtype.kind not in _NUMERIC_KINDS or dtype.hasobject:
        raise _refuse(path, f"{name} holds {dtype} values, not numbers: a pickled object "
                      "is refused (model files never contain objects or code)")
    count = math.prod(shape)
    if count * dtype.itemsize != len(data) - handle.tell():
        raise _refuse(path, f"{name} declares shape {shape} but holds "
                      f"{len(data) - handle.tell():,} bytes")
    handle.seek(0)
    try:
        return np.load(handle, allow_pickle=False)
    except ValueError as exc:
        raise _refuse(path, f"{name} is not a plain array ({exc})") from None


# ---------------------------------------------------------------------- authenticity
def sign(checksum: str, key: LabKey) -> dict[str, str]:
    """The manifest entry that signs a content ``checksum`` with the lab key."""
    return {"algorithm": "hmac-sha256", "key_id": key.key_id,
            "mac": key.mac(SIGNATURE_PURPOSE, checksum)}


def check_authentic(path: Path, manifest: dict[str, Any], key: LabKey | None,
                    expect: set[str] | None) -> None:
    """Refuse a model that is not approved (``expect``) or not signed by ``key``."""
    checksum = str(manifest.get("checksum"))
    if expect is not None and checksum not in expect:
        raise ModelFileError(f"{path}: model checksum {checksum} is not an approved model "
                             f"({len(expect)} approved); use an approved model file")
    if key is None:
        return
    signature = manifest.get("signature")
    if not isinstance(signature, dict):
        raise ModelFileError(f"{path}: the model is not signed, and a lab key is configured; "
                             "rebuild it with bandsolve build --key-file, or sign-off may not "
                             "rely on it")
    if signature.get("key_id") != key.key_id:
        raise ModelFileError(f"{path}: the model was signed with another key (id "
                             f"{signature.get('key_id')}, this key is {key.key_id})")
    if not key.verify(SIGNATURE_PURPOSE, checksum, signature.get("mac")):
        raise ModelFileError(f"{path}: the model's signature does not match its content: it "
                             "was changed after signing; use the original model file")


# ---------------------------------------------------------------------- plausibility
def check_plausible(path: Path, arrays: dict[str, np.ndarray], limits: Any) -> None:
    """Refuse non-finite fitted arrays and absurd limits (≤ 0, infinite, above 10⁶).

    A NaN limit is accepted: it is how a model built from too few standards says it has no
    such limit (inspect and the report show it). A NaN put there by someone else can only be
    told apart by the signature (:func:`check_authentic`).

    ``arrays`` are the file's arrays by member name; ``limits`` the model's
    :class:`~bandsolve.calibration.records.Limits` (or None).
    """
    for name, values in arrays.items():
        fitted = name.startswith(("axis", "preprocessor", "estimator"))  # not the range
        if fitted and values.dtype.kind == "f" and not np.isfinite(values).all():
            raise _refuse(path, f"{name} holds NaN or infinite values")
    for i, model in enumerate(getattr(limits, "models", ()) or ()):
        where = f"model {i + 1}"
        values = {"residual limit": model.residual, "T² limit": model.t2,
                  "leverage limit": model.leverage}
        for label, value in values.items():
            value = float(value)
            if math.isinf(value) or value <= 0 or value > MAX_LIMIT:
                raise _refuse(path, f"{where}: the {label} is {value:g}, not a plausible limit")
        alpha = float(model.alpha)
        if math.isfinite(alpha) and not 0 < alpha < 1:
            raise _refuse(path, f"{where}: the limits' probability is {alpha:g}")
