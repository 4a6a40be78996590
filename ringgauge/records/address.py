"""Where the records store is: a SQLite file or a PostgreSQL server, from ``--db`` or ``RINGGAUGE_DB``.

Accepted forms (server addresses are parsed by psycopg's own ``conninfo`` functions, i.e. by libpq's rules):

* ``postgresql://user@host:5432/dbname`` or ``postgres://…`` URLs, with ``?sslmode=…``, ``?host=/socket/dir`` …;
* libpq key=value strings: ``"host=db.shop.lan dbname=records user=bench2 sslmode=verify-full"``;
* a service name from the user's service file: ``service=records`` (``~/.pg_service.conf`` or ``PGSERVICEFILE``);
* otherwise a SQLite file path — only when it looks like one (a ``.sqlite`` / ``.sqlite3`` / ``.db`` ending, a
  folder part, or an existing file); anything else is refused with a one-line message, so a mistyped server
  address never becomes a local file named after it.

Passwords belong in ``~/.pgpass`` (or ``PGPASSFILE``) or the service file, not in the address. When one is given
anyway, it is used to connect but never shown: :attr:`StoreAddress.display` is ``user@host:port/dbname`` and is
what every message, log line, stored record and certificate uses. Addresses that cannot be parsed are reported
without repeating them (they may hold a password), and a few traps are refused outright: a raw ``@`` inside the
user-info of a URL (write it as ``%40``), a malformed percent-escape, and look-alike schemes (``pgsql://``,
``postgresql+psycopg://``, ``jdbc:postgresql://``).
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import StoreError

SQLITE_SUFFIXES = (".sqlite", ".sqlite3", ".db", ".db3")
_SCHEME = re.compile(r"^\s*([A-Za-z][A-Za-z0-9+.\-]*):(//)?")
_KEYVALUE = re.compile(r"^\s*[A-Za-z_][A-Za-z0-9_]*\s*=")
_SERVER_SCHEMES = ("postgresql", "postgres")


class AddressError(StoreError):
    """A --db / RINGGAUGE_DB value that is neither a SQLite path nor a server address."""

    exit_code = 2


@dataclass(frozen=True)
class StoreAddress:
    kind: str  # "sqlite" | "postgresql"
    display: str
    path: Path | None = None
    # the full connection string (password included, when one was given): only for connecting, never shown
    conninfo: str | None = field(default=None, repr=False)
    secret: str | None = field(default=None, repr=False)

    @property
    def is_server(self) -> bool:
        return self.kind == "postgresql"

    def __str__(self) -> str:
        return self.display

    def scrub(self, text: str) -> str:
        """``text`` with this address's password (and anything password-like) blanked — for driver messages."""
        from ..logs import redact_text

        if self.secret:
            text = text.replace(self.secret, "***")
            try:
                from urllib.parse import quote

                text = text.replace(quote(self.secret, safe=""), "***")
            except Exception:  # noqa: BLE001
                pass
        return redact_text(text)


def display_params(params: dict) -> str:
    """``user@host:port/dbname`` (parts that are not given are left out; a service name is shown as such)."""
    user = params.get("user")
    host = params.get("host") or params.get("hostaddr")
    port = params.get("port")
    db = params.get("dbname")
    service = params.get("service")
    out = ""
    if user:
        out += f"{user}@"
    if host:
        out += f"[{host}]" if ":" in host and not host.startswith("/") and "," not in host else host
    elif not service:
        out += "localhost"
    if port:
        out += f":{port}"
    if db:
        out += f"/{db}"
    if service:
        out = f"service={service}" + (f" ({out})" if out else "")
    return out


def _first_line(exc: Exception) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


def _why_unparsable(text: str, exc: Exception) -> str:
    """Why libpq refused the address, without repeating any of it (it may hold a password)."""
    msg = _first_line(exc)
    if re.search(r"%(?![0-9A-Fa-f]{2})", text) or "percent-encoded" in msg:
        return "a malformed percent-escape (write % as %25, @ as %40, / as %2F inside a user name or password)"
    m = re.search(r'invalid (?:connection|URI query parameter)[^"]*"([A-Za-z0-9_]+)"', msg)
    if m:
        return f"unknown connection option '{m.group(1)}' (see libpq's connection parameters)"
    if "missing" in msg and "=" in msg:
        return "a key=value pair without '=' or an unclosed quote"
    if "unterminated quoted string" in msg:
        return "an unclosed quote"
    return "libpq cannot read it"


def _userinfo_trap(text: str) -> bool:
    """A URL with a raw '@' in its user-info (libpq would cut the password at the first '@' and take the rest
    for the host name, printing part of the password in its error)."""
    rest = text.split("://", 1)[1]
    authority = rest.split("?", 1)[0]
    # the user-info ends at the last '@' before the path; a path after a '/' may not contain '@' legitimately
    return authority.count("@") > 1 or ("@" in authority and "/" in authority.split("@", 1)[0])


def _server(text: str, *, option: str) -> StoreAddress:
    try:
        from psycopg.conninfo import conninfo_to_dict, make_conninfo
    except ImportError:  # pragma: no cover - psycopg is a declared dependency
        raise AddressError("PostgreSQL support needs the 'psycopg' package; reinstall ringgauge") from None
    try:
        params = conninfo_to_dict(text)
    except Exception as exc:  # noqa: BLE001 - psycopg.ProgrammingError and friends
        raise AddressError(f"{option}: the server address cannot be read: {_why_unparsable(text, exc)}") from None
    params = {k: v for k, v in params.items() if v is not None}
    for key in ("host", "hostaddr", "port", "user", "dbname", "service"):
        value = params.get(key) or ""
        if "=" in value or any(c.isspace() for c in value):
            # "host= password=…" gives host the value "password=…": refuse rather than show it
            raise AddressError(f"{option}: the server address's {key} holds a space or '='; write key=value pairs "
                               "with nothing empty (host=H port=P dbname=D user=U)")
    secret = params.get("password") or None
    conninfo = make_conninfo("", **params)
    return StoreAddress("postgresql", display_params(params), None, conninfo, secret)


def looks_like_server(target) -> bool:
    """True for anything that is meant as a server address (URL of any scheme, key=value string)."""
    if not isinstance(target, str):
        return False
    return bool(_SCHEME.match(target) and "://" in target) or bool(_KEYVALUE.match(target))


def parse_address(target: str | os.PathLike | None, *, option: str = "--db") -> StoreAddress:
    """Parse a store address; ``None`` is the default SQLite file in the ringgauge folder.

    Raises :class:`AddressError` (one line, exit 2, the password never repeated) for anything else."""
    if target is None:
        from .store import default_store_path

        p = default_store_path()
        return StoreAddress("sqlite", str(p), p)
    if isinstance(target, os.PathLike):
        p = Path(target)
        return StoreAddress("sqlite", str(p), p)
    if not isinstance(target, str):
        raise AddressError(f"{option} must be text, got {type(target).__name__}")
    text = target.strip()
    if len(text) > 4096:
        raise AddressError(f"{option} is {len(text)} characters long; a store address has at most 4096")
    if not text:
        raise AddressError(f"{option} is empty; give a SQLite file or a postgresql:// server address")
    if any(ord(c) < 32 or ord(c) == 127 for c in text):
        raise AddressError(f"{option} contains a control character; give a SQLite file or a postgresql:// address")
    m = _SCHEME.match(text)
    if m and (m.group(2) or m.group(1).lower() in ("jdbc", "postgresql", "postgres")):
        scheme = m.group(1).lower()
        if scheme in _SERVER_SCHEMES and m.group(2):
            if _userinfo_trap(text):
                raise AddressError(f"{option}: the server address has an '@' or '/' inside its user name or "
                                   "password; write them as %40 and %2F (better: keep the password in ~/.pgpass)")
            return _server(text, option=option)
        if "postg" in scheme or "pgsql" in scheme or "psql" in scheme or scheme == "jdbc":
            raise AddressError(f"{option}: '{scheme}:' addresses are not understood; write the server as "
                               "postgresql://user@host:port/dbname (password in ~/.pgpass)")
        if scheme == "file" or scheme.startswith("sqlite"):
            raise AddressError(f"{option}: give a SQLite store as a plain file path, e.g. records.sqlite")
        if len(scheme) > 1:  # "C:" style drive letters are one letter
            raise AddressError(f"{option}: '{scheme}://' is not a records store address; give a SQLite file or "
                               "postgresql://user@host:port/dbname")
    if _KEYVALUE.match(text):
        return _server(text, option=option)
    # the rest must look like a file path
    p = Path(text).expanduser()
    if re.search(r"(^|\s)[A-Za-z_]+\s*=", text) or re.search(r"(?i)passw(or)?d", text):
        raise AddressError(f"{option}: this looks like a key=value server address but cannot be read as one; "
                           "check it (options separated by spaces, e.g. host=H dbname=D user=U)")
    if re.match(r"^[^/\s]*:[^/\s]*@", text) or re.match(r"^[^/\s@]+@[^/\s]+", text) and not p.exists():
        raise AddressError(f"{option}: this looks like a server address without its scheme; write "
                           "postgresql://user@host:port/dbname")
    if p.suffix.lower() in SQLITE_SUFFIXES or os.sep in text or (os.altsep and os.altsep in text) \
            or text.startswith((".", "~")) or p.is_file():
        return StoreAddress("sqlite", str(p), p)
    raise AddressError(f"{option}: '{_safe_show(text)}' is neither a SQLite file (name it with .sqlite, e.g. "
                       "records.sqlite, or give a folder part like ./records) nor a postgresql:// server address")


def _safe_show(text: str) -> str:
    from ..logs import redact_text

    text = redact_text(text)
    return text if len(text) <= 60 else text[:57] + "..."


def display(target: str | os.PathLike | None) -> str:
    """The redacted display form of ``target``; never raises (an unreadable address is shown as such)."""
    try:
        return parse_address(target).display
    except Exception:  # noqa: BLE001
        if isinstance(target, str) and looks_like_server(target):
            m = _SCHEME.match(target)
            return f"(unreadable {m.group(1) + ':' if m and '://' in target else 'key=value'} server address)"
        return "(unusable store address)"
