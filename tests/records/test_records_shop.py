"""'ringgauge shop': details, the signing key (owner-only files, passphrase never on the command line), a
PKCS#12 from the shop's own CA, and the trust list that 'certificate verify' accepts."""

from __future__ import annotations

import datetime as dt
import json

import pytest
from cryptography import x509
from cryptography.hazmat.primitives import hashes, serialization
from cryptography.hazmat.primitives.asymmetric import ec
from cryptography.hazmat.primitives.serialization import pkcs12
from cryptography.x509.oid import NameOID

from ringgauge.cli import main
from ringgauge.records import RecordMeta, open_store
from ringgauge.certificates import issue_certificate
from ringgauge.report import signing
from ringgauge.report.verify import verify_pdf


def run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def home(tmp_path, monkeypatch):
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "home"))
    monkeypatch.delenv("RINGGAUGE_KEY_PASSPHRASE", raising=False)
    return tmp_path / "home"


def test_set_show_and_keygen(home, capsys):
    code, out, _ = run(capsys, "shop", "show")
    assert code == 0 and "signing key: none yet" in out
    code, _, err = run(capsys, "shop", "keygen")
    assert code == 2 and "set the shop's name first" in err
    code, out, _ = run(capsys, "shop", "set", "--name", "Fernhill Optical Workshop", "--address", "Unit 4",
                       "--address", "Millbrook", "--prefix", "FOW")
    assert code == 0
    assert json.loads((home / "shop.json").read_text())["address"] == ["Unit 4", "Millbrook"]
    code, out, _ = run(capsys, "shop", "keygen")
    assert code == 0 and "SHA-256 fingerprint" in out
    fp = out.split("fingerprint: ")[1].split()[0]
    assert (home / signing.KEY_FILE).stat().st_mode & 0o777 == 0o600
    code, out, _ = run(capsys, "shop", "show")
    assert fp in out and "self-signed" in out and "not encrypted" in out and "Millbrook" in out
    code, _, err = run(capsys, "shop", "keygen")
    assert code == 2 and "already has a signing key" in err and err.count("\n") == 1
    code, _, err = run(capsys, "shop", "set", "--prefix", "bad prefix!")
    assert code == 2 and "certificate_prefix" in err


def test_passphrase_is_never_an_option(home, capsys):
    run(capsys, "shop", "set", "--name", "Fernhill Optical Workshop")
    code, _, err = run(capsys, "shop", "keygen", "--passphrase", "secret123")  # no value on the command line
    assert code == 2 and "secret123" not in err and "never be typed on the command line" in err
    code, _, err = run(capsys, "shop", "keygen", "--passphrase")  # no terminal, no variable: refused
    assert code == 2 and "RINGGAUGE_KEY_PASSPHRASE" in err and not (home / signing.KEY_FILE).exists()


def _ca_and_p12(tmp_path, password: bytes):
    def name(cn):
        return x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, cn)])

    now = dt.datetime.now(dt.timezone.utc)
    ca_key = ec.generate_private_key(ec.SECP256R1())
    ca = (x509.CertificateBuilder().subject_name(name("Fernhill Test Root CA")).issuer_name(name("Fernhill Test Root CA"))
          .public_key(ca_key.public_key()).serial_number(1).not_valid_before(now - dt.timedelta(days=1))
          .not_valid_after(now + dt.timedelta(days=30))
          .add_extension(x509.BasicConstraints(ca=True, path_length=0), critical=True)
          .add_extension(x509.KeyUsage(False, False, False, False, False, True, True, False, False), critical=True)
          .sign(ca_key, hashes.SHA256()))
    key = ec.generate_private_key(ec.SECP256R1())
    leaf = (x509.CertificateBuilder().subject_name(name("Fernhill Optical Workshop")).issuer_name(ca.subject)
            .public_key(key.public_key()).serial_number(2).not_valid_before(now - dt.timedelta(days=1))
            .not_valid_after(now + dt.timedelta(days=30))
            .add_extension(x509.KeyUsage(True, True, False, False, False, False, False, False, False), critical=True)
            .sign(ca_key, hashes.SHA256()))
    p12 = pkcs12.serialize_key_and_certificates(b"shop", key, leaf, [ca],
                                                serialization.BestAvailableEncryption(password))
    (tmp_path / "shop.p12").write_bytes(p12)
    (tmp_path / "ca.pem").write_bytes(ca.public_bytes(serialization.Encoding.PEM))
    return tmp_path / "shop.p12"


def test_import_p12_from_the_shops_ca(home, tmp_path, capsys, make_result, monkeypatch):
    p12 = _ca_and_p12(tmp_path, b"p12 secret")
    monkeypatch.setenv("RINGGAUGE_P12_PASSPHRASE", "wrong")
    code, _, err = run(capsys, "shop", "import-p12", str(p12))
    assert code == 2 and "passphrase is wrong" in err
    monkeypatch.setenv("RINGGAUGE_P12_PASSPHRASE", "p12 secret")
    code, out, _ = run(capsys, "shop", "import-p12", str(p12))
    assert code == 0 and "Fernhill Optical Workshop" in out
    info = signing.key_info()
    assert not info.self_signed
    with open_store(tmp_path / "r.sqlite") as s:
        rec = s.add(RecordMeta(serial="1"), make_result("1"))
        _, path, _ = issue_certificate(s, rec.id, tmp_path / "c.pdf", {"name": "Fernhill Optical Workshop"})
        v = verify_pdf(path, s)
    assert v.ok and "Fernhill Optical Workshop" in v.signer


def test_trust_list_accepts_another_sites_certificate(home, tmp_path, capsys, make_result, monkeypatch):
    # another site of the shop signs with its own key ...
    monkeypatch.setenv("RINGGAUGE_HOME", str(tmp_path / "site2"))
    signing.keygen("Fernhill Optical Workshop, site 2")
    other_cert = tmp_path / "site2.pem"
    other_cert.write_bytes(signing.cert_path().read_bytes())
    with open_store(tmp_path / "r2.sqlite") as s:
        rec = s.add(RecordMeta(serial="1"), make_result("1"))
        _, path, _ = issue_certificate(s, rec.id, tmp_path / "c.pdf", {"name": "x"})
    # ... and here it is not trusted until added to the trust list
    monkeypatch.setenv("RINGGAUGE_HOME", str(home))
    signing.keygen("Fernhill Optical Workshop")
    assert set(verify_pdf(path).failed()) == {"signer"}
    code, out, _ = run(capsys, "shop", "trust", "add", str(other_cert))
    assert code == 0 and "trusted: SHA-256" in out
    assert verify_pdf(path).ok
    code, _, err = run(capsys, "shop", "trust", "add", str(tmp_path / "r2.sqlite"))
    assert code == 2 and "no X.509 certificate" in err
