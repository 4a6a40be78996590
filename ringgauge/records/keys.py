"""The shop's records key: the secret that seals the records chain and the result files ringgauge writes.

Why a keyed MAC (HMAC-SHA256) and not a signature for the records: a record is written on every measurement,
often by unattended batch workers, so the key that seals it must be usable without a passphrase prompt and
quickly (thousands of records per lot). What the seal must stop is an edit by someone who can write the
database file or holds the benches' database login but not the shop's ringgauge folder; a MAC made with a
secret kept there, readable by its owner only (0600), does that. Anyone who holds the secret can also check
the seals, which is what ``ringgauge records check`` does. Certificates, which a customer must check without
any secret, are signed with the shop's public-key certificate instead (see :mod:`ringgauge.report.signing`).

Several benches that share one PostgreSQL store need the same key: copy ``records.key`` to each bench's
ringgauge folder (owner-only permissions). ``RINGGAUGE_RECORDS_KEY`` may name another file.
"""

from __future__ import annotations

import hashlib
import hmac
import os
import secrets
from pathlib import Path

from ..errors import StoreError
from ..settings import write_private

KEY_FILE = "records.key"


def key_path() -> Path:
    env = os.environ.get("RINGGAUGE_RECORDS_KEY")
    if env:
        return Path(env).expanduser()
    from ..settings import path

    return path(KEY_FILE)


def key_id(key: bytes) -> str:
    """A short public name of a key (it reveals nothing about the key)."""
    return hashlib.sha256(b"ringgauge records key id\0" + key).hexdigest()[:16]


def check_private(p: Path) -> None:
    """Refuse a key file that others can read or write (a secret anyone can read seals nothing)."""
    try:
        st = p.stat()
    except OSError as exc:
        raise StoreError(f"cannot read the records key {p}: {exc.strerror or exc}") from None
    import stat as _stat

    if not _stat.S_ISREG(st.st_mode):  # a pipe or device would block the read below
        raise StoreError(f"the records key {p} is not a regular file; restore it from the shop's backup")
    if st.st_mode & 0o077:
        raise StoreError(f"the records key {p} can be read by others (mode {st.st_mode & 0o777:o}); "
                         f"run: chmod 600 {p}")


def load_key(*, create: bool = False) -> bytes | None:
    """The records key, or None when there is none (``create``: make one, owner-only)."""
    p = key_path()
    if not p.exists():
        if not create:
            return None
        write_private(p, secrets.token_hex(32).encode() + b"\n")
    check_private(p)
    try:
        text = p.read_text(encoding="ascii").strip()
        key = bytes.fromhex(text)
    except (OSError, UnicodeDecodeError, ValueError):
        raise StoreError(f"the records key {p} is damaged (expected 64 hex digits); restore it from the shop's "
                         "backup") from None
    if len(key) < 16:
        raise StoreError(f"the records key {p} is too short; restore it from the shop's backup")
    return key


def mac(key: bytes, text: str) -> str:
    return hmac.new(key, text.encode("utf-8"), hashlib.sha256).hexdigest()


def mac_ok(key: bytes, text: str, tag: str | None) -> bool:
    return bool(tag) and hmac.compare_digest(mac(key, text), str(tag))


# ------------------------------------------------------------------------------------ sealed result files

SEAL_KEY = "ringgauge_seal"


def seal_result(result: dict) -> dict:
    """A copy of ``result`` (the JSON of an analysis) with a seal made with the records key, so a correction
    can later prove the result came from ringgauge and was not typed or edited by hand."""
    from .store import canonical_json

    key = load_key(create=True)
    body = {k: v for k, v in result.items() if k != SEAL_KEY}
    return {**body, SEAL_KEY: {"key_id": key_id(key), "hmac_sha256": mac(key, canonical_json(body))}}


def check_seal(result: dict) -> str | None:
    """None when ``result`` carries a valid seal of this shop's records key, else why not (one line)."""
    from .store import canonical_json

    seal = result.get(SEAL_KEY)
    if not isinstance(seal, dict):
        return "it carries no ringgauge seal (it was not written by 'ringgauge analyze --out')"
    key = load_key()
    if key is None:
        return f"there is no records key in this ringgauge folder ({key_path()}) to check its seal with"
    if seal.get("key_id") != key_id(key):
        return f"it was sealed with another key (key {seal.get('key_id')}, this shop's is {key_id(key)})"
    body = {k: v for k, v in result.items() if k != SEAL_KEY}
    if not mac_ok(key, canonical_json(body), seal.get("hmac_sha256")):
        return "its seal does not match its content (it was edited after ringgauge wrote it)"
    return None
