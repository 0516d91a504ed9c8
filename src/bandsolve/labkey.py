"""The lab key: a secret that makes records and model files *authentic*, not only intact.

A SHA-256 checksum proves that a file is the one whose checksum you hold (integrity); anyone
can recompute it after changing the file. An HMAC (keyed hash, RFC 2104) can only be made by
someone who holds the key, so a model signed or a ledger sealed with the lab key proves that
it was written by someone with the key and not changed since (authenticity).

The key is never stored in a model file or a ledger. It is read from a file
(``--key-file FILE``), or from the environment: ``BANDSOLVE_LAB_KEY_FILE`` (a path) or
``BANDSOLVE_LAB_KEY`` (the key itself). It must hold at least 16 bytes (after trimming
spaces and line ends); ``python -c "import secrets; print(secrets.token_hex(32))"`` makes a
good one. Separate keys are derived for each use (model signatures, ledger seals), so a
signature of one kind can never stand in for the other.

References
----------
Krawczyk, H., Bellare, M., Canetti, R. (1997). HMAC: Keyed-Hashing for Message
Authentication. RFC 2104.
NIST (2008). FIPS PUB 198-1, The Keyed-Hash Message Authentication Code (HMAC).
"""

from __future__ import annotations

import hashlib
import hmac
import os
from collections.abc import Mapping
from dataclasses import dataclass, field

from bandsolve.errors import DataError

__all__ = ["LabKey", "load_lab_key", "KEY_ENV", "KEY_FILE_ENV"]

KEY_ENV = "BANDSOLVE_LAB_KEY"
KEY_FILE_ENV = "BANDSOLVE_LAB_KEY_FILE"
MIN_KEY_BYTES = 16


@dataclass(frozen=True)
class LabKey:
    """A lab key (its bytes are never shown: ``repr`` gives only :attr:`key_id`)."""

    secret: bytes = field(repr=False)

    def _derived(self, purpose: str) -> bytes:
        return hmac.new(self.secret, f"bandsolve {purpose}".encode(), hashlib.sha256).digest()

    @property
    def key_id(self) -> str:
        """A short public name of the key (16 hex digits) that reveals nothing of it."""
        return self._derived("key id").hex()[:16]

    def mac(self, purpose: str, message: str) -> str:
        """HMAC-SHA256 (hex) of ``message`` under the key derived for ``purpose``."""
        return hmac.new(self._derived(purpose), message.encode(), hashlib.sha256).hexdigest()

    def verify(self, purpose: str, message: str, mac: str | None) -> bool:
        """True when ``mac`` was made by :meth:`mac` with this key (constant-time compare)."""
        return mac is not None and hmac.compare_digest(self.mac(purpose, message), str(mac))


def _from_bytes(data: bytes, where: str) -> LabKey:
    secret = data.strip()
    if len(secret) < MIN_KEY_BYTES:
        raise DataError(f"{where}: the lab key is {len(secret)} bytes long; use at least "
                        f"{MIN_KEY_BYTES} (for example 64 random hex digits)")
    return LabKey(secret)


def load_lab_key(key_file: str | os.PathLike[str] | None = None,
                 environ: Mapping[str, str] | None = None) -> LabKey | None:
    """The lab key from ``key_file``, else from the environment, else None (no key).

    Raises
    ------
    DataError
        When the key file cannot be read or the key is too short.
    """
    env = os.environ if environ is None else environ
    path = key_file if key_file is not None else env.get(KEY_FILE_ENV)
    if path:
        try:
            with open(path, "rb") as handle:
                data = handle.read(1 << 16)
        except OSError as exc:
            raise DataError(f"{path}: cannot read the lab key file ({exc.strerror or exc})"
                            ) from None
        return _from_bytes(data, str(path))
    if env.get(KEY_ENV):
        return _from_bytes(env[KEY_ENV].encode(), KEY_ENV)
    return None
