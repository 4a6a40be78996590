"""The shop's own details for certificates and lot reports, kept in ``shop.json`` in the ringgauge folder.

Set them with ``ringgauge shop set --name … --address … …`` (``ringgauge shop show`` prints them with the
fingerprint of the shop's signing certificate, see :mod:`ringgauge.report.signing`); the file can still be
edited by hand.

Example ``shop.json`` (every key optional)::

    {
      "name": "…", "address": ["street", "town"], "contact": "phone / e-mail",
      "accreditation": "accreditation body and number, if any",
      "certificate_prefix": "RG", "approver": "name of the person who signs",
      "paper": "A4"                      # or "Letter"
    }
"""

from __future__ import annotations

from pathlib import Path

from .errors import InputError

SHOP_FILE = "shop.json"

DEFAULTS: dict = {
    "name": "(shop name not set — see shop.json)",
    "address": [],
    "contact": "",
    "accreditation": "",
    "certificate_prefix": "RG",
    "approver": "",
    "paper": "A4",
}


def shop_path() -> Path:
    from .settings import path

    return path(SHOP_FILE)


def load_shop(path: str | Path | None = None) -> dict:
    """The shop settings merged over the defaults; a missing file gives the defaults."""
    p = Path(path) if path is not None else shop_path()
    out = dict(DEFAULTS)
    if not p.exists():
        if path is not None:
            raise InputError(f"{p}: no such shop settings file")
        return out
    from .settings import read_json

    data = read_json(p, what="the shop settings file")
    if not isinstance(data, dict):
        raise InputError(f"{p}: expected a JSON object with the shop's details")
    unknown = set(data) - set(DEFAULTS)
    if unknown:
        raise InputError(f"{p}: unknown key(s) {', '.join(sorted(unknown))}; known: {', '.join(DEFAULTS)}")
    for k, v in data.items():
        if k == "address":
            if isinstance(v, str):
                v = [v]
            if not (isinstance(v, list) and all(isinstance(x, str) for x in v)):
                raise InputError(f"{p}: 'address' must be a list of lines")
        elif not isinstance(v, str):
            raise InputError(f"{p}: '{k}' must be text")
        out[k] = v
    out["paper"] = out["paper"].strip()
    if out["paper"].lower() not in ("a4", "letter"):
        raise InputError(f"{p}: paper must be 'A4' or 'Letter', got {out['paper']!r}")
    prefix = out["certificate_prefix"]
    if not prefix or not all(c.isalnum() or c in "-_" for c in prefix) or len(prefix) > 12:
        raise InputError(f"{p}: certificate_prefix must be 1-12 letters, digits, '-' or '_'")
    return out


def save_shop(data: dict, path: str | Path | None = None) -> Path:
    from .settings import locked, write_json_atomic, write_text_atomic

    p = Path(path) if path is not None else shop_path()
    with locked(p):
        old = p.read_bytes() if p.is_file() else None
        write_json_atomic(p, {**DEFAULTS, **data}, what=str(p))
        try:
            load_shop(p)  # refuse to leave an invalid file behind: put the old one back
        except InputError:
            if old is None:
                p.unlink()
            else:
                write_text_atomic(p, old)
            raise
    return p
