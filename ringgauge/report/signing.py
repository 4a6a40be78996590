"""The shop's signing key and certificate, and PAdES signatures on certificates and lot reports.

The key is an EC P-256 key with a self-signed X.509 certificate made with ``cryptography`` (``ringgauge shop
keygen``), or a key and certificate chain imported from a PKCS#12 file issued by the shop's own certificate
authority (``ringgauge shop import-p12``). Both live in the ringgauge folder, readable by their owner only; the
key may be encrypted with a passphrase, read from ``RINGGAUGE_KEY_PASSPHRASE`` or asked for at the terminal
(never given on the command line, where other users could see it).

A document is signed with pyHanko as a PAdES baseline signature (``ETSI.CAdES.detached``) in an incremental
update, so any PDF reader shows who signed and whether the file changed since. Extra certificates the shop
trusts (another site's key, its CA's root) are kept in ``trusted-certs/`` and listed with ``shop trust list``.

When a document is issued and the shop has no key yet, one is made (self-signed, no passphrase) and a message
says so, with its fingerprint: every issued document is signed, and a shop that wants a passphrase or its own
CA's certificate replaces the key with ``shop keygen --passphrase`` or ``shop import-p12`` (documents already
issued keep verifying as long as the old certificate stays in the trust list: replacing a key moves the old
certificate there).
"""

from __future__ import annotations

import datetime as _dt
import getpass
import hashlib
import io
import os
import sys
from dataclasses import dataclass
from pathlib import Path

from ..errors import InputError, RinggaugeError

KEY_FILE = "shop-signing-key.pem"
CERT_FILE = "shop-signing-cert.pem"
TRUST_DIR = "trusted-certs"
PASSPHRASE_ENV = "RINGGAUGE_KEY_PASSPHRASE"
FIELD_NAME = "ShopSignature"


class SigningError(RinggaugeError):
    """The shop's key cannot be made, read or used."""

    exit_code = 2


def key_path() -> Path:
    from ..settings import path

    return path(KEY_FILE)


def cert_path() -> Path:
    from ..settings import path

    return path(CERT_FILE)


def trust_dir() -> Path:
    from ..settings import path

    return path(TRUST_DIR)


def has_key() -> bool:
    return key_path().exists() and cert_path().exists()


def fingerprint(cert_der: bytes) -> str:
    """SHA-256 fingerprint of a certificate, as readers show it (colon-separated hex)."""
    h = hashlib.sha256(cert_der).hexdigest().upper()
    return ":".join(h[i:i + 2] for i in range(0, len(h), 2))


def _write_private(p: Path, data: bytes) -> None:
    from ..settings import write_private

    write_private(p, data)


def _ask_passphrase(confirm: bool) -> bytes | None:
    env = os.environ.get(PASSPHRASE_ENV)
    if env is not None:
        return env.encode("utf-8") if env else None
    if not sys.stdin.isatty():
        raise SigningError(f"no passphrase: set {PASSPHRASE_ENV} or run in a terminal to be asked")
    first = getpass.getpass("passphrase for the shop's signing key: ")
    if confirm and getpass.getpass("the same passphrase again: ") != first:
        raise SigningError("the two passphrases differ; nothing was changed")
    if confirm and first and len(first) < 8:
        raise SigningError("a passphrase needs at least 8 characters")
    return first.encode("utf-8") or None


def _retire_current() -> None:
    """Keep the old certificate trusted (documents signed with it still verify), then the new one replaces it."""
    if cert_path().exists():
        from cryptography import x509

        old = x509.load_pem_x509_certificate(cert_path().read_bytes())
        from cryptography.hazmat.primitives.serialization import Encoding

        der = old.public_bytes(Encoding.DER)
        d = trust_dir()
        d.mkdir(exist_ok=True)
        (d / f"retired-{hashlib.sha256(der).hexdigest()[:16]}.pem").write_bytes(old.public_bytes(Encoding.PEM))


@dataclass(frozen=True)
class KeyInfo:
    subject: str
    fingerprint: str
    not_after: str
    encrypted: bool
    self_signed: bool


def keygen(shop_name: str, *, passphrase: bytes | None = None, days: int = 3650, replace: bool = False) -> KeyInfo:
    """Make an EC P-256 key and a self-signed certificate naming the shop; owner-only files."""
    from cryptography import x509
    from cryptography.hazmat.primitives import hashes, serialization
    from cryptography.hazmat.primitives.asymmetric import ec
    from cryptography.x509.oid import NameOID

    from ..settings import locked

    if not shop_name or not shop_name.strip():
        raise InputError("the certificate needs the shop's name: set it first with 'ringgauge shop set --name ...'")
    if days < 1 or days > 36500:
        raise InputError("--days must be between 1 and 36500")
    with locked(key_path()):
        if has_key() and not replace:
            raise SigningError(f"the shop already has a signing key ({key_path()}); give --replace to make a new "
                               "one (the old certificate stays trusted for documents already signed)")
        key = ec.generate_private_key(ec.SECP256R1())
        name = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, shop_name.strip()[:64]),
                          x509.NameAttribute(NameOID.ORGANIZATION_NAME, shop_name.strip()[:64])])
        now = _dt.datetime.now(_dt.timezone.utc)
        cert = (x509.CertificateBuilder().subject_name(name).issuer_name(name).public_key(key.public_key())
                .serial_number(x509.random_serial_number()).not_valid_before(now - _dt.timedelta(minutes=5))
                .not_valid_after(now + _dt.timedelta(days=days))
                .add_extension(x509.BasicConstraints(ca=False, path_length=None), critical=True)
                .add_extension(x509.KeyUsage(digital_signature=True, content_commitment=True, key_encipherment=False,
                                             data_encipherment=False, key_agreement=False, key_cert_sign=False,
                                             crl_sign=False, encipher_only=False, decipher_only=False), critical=True)
                .add_extension(x509.SubjectKeyIdentifier.from_public_key(key.public_key()), critical=False)
                .sign(key, hashes.SHA256()))
        enc = serialization.BestAvailableEncryption(passphrase) if passphrase else serialization.NoEncryption()
        if replace:
            _retire_current()
        _write_private(key_path(), key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                                                     enc))
        _write_private(cert_path(), cert.public_bytes(serialization.Encoding.PEM))
    return key_info()


def import_p12(file: str | os.PathLike, *, p12_passphrase: bytes | None, passphrase: bytes | None,
               replace: bool = False) -> KeyInfo:
    """Take the key and certificate chain from a PKCS#12 file made by the shop's own CA."""
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric import ec, rsa
    from cryptography.hazmat.primitives.serialization import pkcs12

    from ..settings import locked

    p = Path(file)
    try:
        data = p.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read {p}: {exc.strerror or exc}") from None
    try:
        key, cert, extra = pkcs12.load_key_and_certificates(data, p12_passphrase)
    except ValueError:
        raise InputError(f"{p}: not a PKCS#12 file, or the passphrase is wrong") from None
    if key is None or cert is None:
        raise InputError(f"{p}: the PKCS#12 file holds no private key and certificate")
    if not isinstance(key, (ec.EllipticCurvePrivateKey, rsa.RSAPrivateKey)):
        raise InputError(f"{p}: the key must be an EC or RSA key")
    with locked(key_path()):
        if has_key() and not replace:
            raise SigningError(f"the shop already has a signing key ({key_path()}); give --replace to use the "
                               "imported one instead (the old certificate stays trusted)")
        if replace:
            _retire_current()
        enc = serialization.BestAvailableEncryption(passphrase) if passphrase else serialization.NoEncryption()
        _write_private(key_path(), key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                                                     enc))
        chain = cert.public_bytes(serialization.Encoding.PEM)
        for c in extra or []:
            chain += c.public_bytes(serialization.Encoding.PEM)
        _write_private(cert_path(), chain)
    return key_info()


def _load_certs(data: bytes):
    from cryptography import x509

    try:
        return x509.load_pem_x509_certificates(data)
    except ValueError:
        try:
            return [x509.load_der_x509_certificate(data)]
        except ValueError:
            return []


def shop_certificates():
    """The shop's certificate (first) and the chain that came with it (``cryptography`` objects)."""
    if not cert_path().exists():
        return []
    return _load_certs(cert_path().read_bytes())


def key_info() -> KeyInfo:
    from cryptography.hazmat.primitives.serialization import Encoding

    certs = shop_certificates()
    if not certs or not key_path().exists():
        raise SigningError("the shop has no signing key yet; make one with 'ringgauge shop keygen' or import one "
                           "with 'ringgauge shop import-p12 FILE.p12'")
    c = certs[0]
    return KeyInfo(subject=c.subject.rfc4514_string(), fingerprint=fingerprint(c.public_bytes(Encoding.DER)),
                   not_after=c.not_valid_after_utc.strftime("%Y-%m-%d"),
                   encrypted=b"ENCRYPTED" in key_path().read_bytes()[:64], self_signed=c.issuer == c.subject)


def trust_add(file: str | os.PathLike) -> list[str]:
    """Add the certificate(s) in ``file`` (PEM or DER) to the shop's trust list; returns their fingerprints."""
    from cryptography.hazmat.primitives.serialization import Encoding

    p = Path(file)
    try:
        data = p.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read {p}: {exc.strerror or exc}") from None
    certs = _load_certs(data)
    if not certs:
        raise InputError(f"{p}: no X.509 certificate in it (PEM or DER expected)")
    d = trust_dir()
    d.mkdir(exist_ok=True)
    out = []
    for c in certs:
        der = c.public_bytes(Encoding.DER)
        (d / f"{hashlib.sha256(der).hexdigest()[:16]}.pem").write_bytes(c.public_bytes(Encoding.PEM))
        out.append(fingerprint(der))
    return out


def trusted_certificates():
    """Every certificate a signature may chain to: the shop's own (and its chain) and the trust list."""
    certs = list(shop_certificates())
    d = trust_dir()
    if d.is_dir():
        for f in sorted(d.glob("*.pem")):
            certs += _load_certs(f.read_bytes())
    return certs


def ensure_key(shop: dict, *, say=None) -> KeyInfo:
    """The shop's key, made now (self-signed, no passphrase) when there is none, with a message saying so."""
    if has_key():
        return key_info()
    name = (shop.get("name") or "").strip()
    if not name or name.startswith("(shop name not set"):
        name = "ringgauge inspection shop"
    info = keygen(name)
    msg = (f"the shop had no signing key: made one for \"{name}\" (EC P-256, self-signed) in {key_path().parent}; "
           f"certificate fingerprint SHA-256 {info.fingerprint}. Give this fingerprint to customers; see "
           "'ringgauge shop --help' for a passphrase or your own CA's certificate")
    (say or (lambda m: print(f"ringgauge: {m}", file=sys.stderr)))(msg)
    return info


def load_signer():
    """The shop's signer (asks for the key's passphrase when it is encrypted)."""
    if not has_key():
        raise SigningError("the shop has no signing key yet; make one with 'ringgauge shop keygen'")
    return _signer()


def _signer():
    from cryptography.hazmat.primitives import serialization
    from pyhanko.sign import signers
    from pyhanko_certvalidator.registry import SimpleCertificateStore
    from asn1crypto import keys as asn1_keys, x509 as asn1_x509

    raw = key_path().read_bytes()
    pw = None
    if b"ENCRYPTED" in raw[:64]:
        pw = _ask_passphrase(confirm=False)
    try:
        key = serialization.load_pem_private_key(raw, pw)
    except (ValueError, TypeError):
        raise SigningError("the shop's signing key cannot be opened: wrong or missing passphrase "
                           f"({PASSPHRASE_ENV})") from None
    certs = shop_certificates()
    der = key.private_bytes(serialization.Encoding.DER, serialization.PrivateFormat.PKCS8,
                            serialization.NoEncryption())
    asn_key = asn1_keys.PrivateKeyInfo.load(der)
    asn_certs = [asn1_x509.Certificate.load(c.public_bytes(serialization.Encoding.DER)) for c in certs]
    return signers.SimpleSigner(signing_cert=asn_certs[0], signing_key=asn_key,
                                cert_registry=SimpleCertificateStore.from_certs(asn_certs))


def sign_pdf_file(path: str | os.PathLike, *, reason: str, location: str | None = None,
                  box: tuple[float, float, float, float] | None = None, signer=None) -> str:
    """Sign the PDF at ``path`` in place (atomically); returns the signer's certificate fingerprint.

    ``box`` places a visible signature panel on the last page (points); without it the signature is invisible
    on the page but still listed by every PDF reader's signature panel.
    """
    from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter
    from pyhanko.sign import fields, signers
    from pyhanko.sign.signers.pdf_signer import PdfSignatureMetadata

    p = Path(path)
    signer = signer or _signer()
    data = p.read_bytes()
    w = IncrementalPdfFileWriter(io.BytesIO(data), strict=False)
    meta = PdfSignatureMetadata(field_name=FIELD_NAME, reason=reason, location=location or None,
                                subfilter=fields.SigSeedSubFilter.PADES, md_algorithm="sha256")
    spec = None
    stamp_style = None
    if box is not None:
        from pyhanko import stamp
        from pyhanko.pdf_utils.text import TextBoxStyle

        spec = fields.SigFieldSpec(FIELD_NAME, on_page=-1, box=tuple(int(round(v)) for v in box))
        stamp_style = stamp.TextStampStyle(
            stamp_text="Digitally signed by %(signer)s, %(ts)s", border_width=0,
            text_box_style=TextBoxStyle(font_size=8))
    try:
        pdf_signer = signers.PdfSigner(meta, signer=signer, stamp_style=stamp_style, new_field_spec=spec)
        out = pdf_signer.sign_pdf(w)
    except Exception as exc:  # noqa: BLE001 - pyHanko raises many kinds; one line for the user
        raise SigningError(f"cannot sign {p}: {type(exc).__name__}: {str(exc).splitlines()[0] if str(exc) else ''}") \
            from None
    tmp = p.with_name(p.name + ".signing")
    try:
        tmp.write_bytes(out.getvalue())
        os.replace(tmp, p)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise InputError(f"cannot write {p} ({exc.strerror or exc})") from None
    return fingerprint(signer.signing_cert.dump())


def signature_box(path: str | os.PathLike) -> tuple[float, float, float, float] | None:
    """Where the visible signature panel goes: in the band between the last page's text and its footer line."""
    try:
        from pypdf import PdfReader

        box = PdfReader(str(path)).pages[-1].mediabox
        w = float(box.width)
    except Exception:  # noqa: BLE001 - no panel rather than no signature
        return None
    mm = 72 / 25.4
    return (w / 2 - 62 * mm, 14.6 * mm, w / 2 + 62 * mm, 19.6 * mm)
