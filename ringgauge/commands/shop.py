"""``ringgauge shop``: the shop's details on certificates, its signing key and certificate, and its trust list."""

from __future__ import annotations

import sys

import argparse

from ..errors import InputError

FIELDS = ("name", "contact", "accreditation", "certificate_prefix", "approver", "paper")


def register(sub) -> None:
    p = sub.add_parser(
        "shop", help="the shop's details, signing key and trusted certificates",
        description="The shop's details printed on certificates and lot reports, and the key that signs them. "
                    "Every certificate and lot report is signed when issued; if the shop has no key yet, the first "
                    "issue makes one (self-signed, no passphrase) and says so. Files live in the ringgauge folder "
                    "('ringgauge paths'), the key readable by its owner only.",
    )
    ss = p.add_subparsers(dest="shop_command", metavar="ACTION", parser_class=type(p))

    q = ss.add_parser("show", help="the shop's details and its signing certificate's fingerprint")
    q.set_defaults(func=run_show)

    q = ss.add_parser("set", help="change the shop's details (only the options given change)")
    q.add_argument("--name", help="the shop's name as printed")
    q.add_argument("--address", action="append", metavar="LINE",
                   help="an address line (repeat for several lines; replaces the address)")
    q.add_argument("--contact", help="phone / e-mail")
    q.add_argument("--accreditation", help="accreditation body and number, if any")
    q.add_argument("--prefix", dest="certificate_prefix", help="document number prefix (1-12 letters, digits, - or _)")
    q.add_argument("--approver", help="who approves certificates (printed in the approval field)")
    q.add_argument("--paper", choices=("A4", "Letter"), help="paper size")
    q.set_defaults(func=run_set)

    q = ss.add_parser("keygen", help="make the shop's signing key (EC P-256) and a self-signed certificate",
                      description="Make the shop's signing key and a self-signed certificate naming the shop. "
                                  "With --passphrase the key is encrypted; the passphrase is read from "
                                  "RINGGAUGE_KEY_PASSPHRASE or asked for at the terminal (never given as an "
                                  "option). Issuing documents then needs the same passphrase.")
    q.add_argument("--passphrase", action="store_true", help="encrypt the key with a passphrase")
    q.add_argument("--days", type=int, default=3650, help="validity of the certificate in days (default 3650)")
    q.add_argument("--replace", action="store_true",
                   help="replace an existing key (its certificate stays trusted for documents already signed)")
    q.add_argument("stray", nargs="*", help=argparse.SUPPRESS)  # refused without echoing (it may be a passphrase)
    q.set_defaults(func=run_keygen)

    q = ss.add_parser("import-p12", help="use a key and certificate from the shop's own certificate authority",
                      description="Import a PKCS#12 file (.p12/.pfx). Its passphrase is read from "
                                  "RINGGAUGE_P12_PASSPHRASE or asked for; --passphrase encrypts the stored key "
                                  "(RINGGAUGE_KEY_PASSPHRASE or asked).")
    q.add_argument("file", metavar="FILE.p12")
    q.add_argument("--passphrase", action="store_true", help="encrypt the stored key with a passphrase")
    q.add_argument("--replace", action="store_true", help="replace an existing key")
    q.add_argument("stray", nargs="*", help=argparse.SUPPRESS)
    q.set_defaults(func=run_import)

    q = ss.add_parser("trust", help="certificates whose signatures 'certificate verify' accepts besides the shop's")
    ts = q.add_subparsers(dest="trust_command", metavar="ACTION", parser_class=type(p))
    t = ts.add_parser("add", help="trust the certificate(s) in a PEM or DER file")
    t.add_argument("file", metavar="CERT.pem")
    t.set_defaults(func=run_trust_add)
    t = ts.add_parser("list", help="list the trusted certificates")
    t.set_defaults(func=run_trust_list)
    q.set_defaults(func=lambda a: (q.print_help(sys.stderr), 2)[1])

    p.set_defaults(func=run_show)


def run_show(args) -> int:
    from ..report.signing import has_key, key_info, key_path
    from ..shop import load_shop, shop_path

    shop = load_shop()
    print(f"shop details ({shop_path()}):")
    print(f"  name           {shop['name']}")
    for i, line in enumerate(shop["address"] or ["—"]):
        print(f"  {'address' if i == 0 else '':<14} {line}")
    for k in ("contact", "accreditation", "certificate_prefix", "approver", "paper"):
        print(f"  {k.replace('certificate_prefix', 'prefix'):<14} {shop[k] or '—'}")
    if has_key():
        info = key_info()
        print(f"signing certificate: {info.subject}")
        print(f"  SHA-256 fingerprint {info.fingerprint}")
        print(f"  valid until {info.not_after}; {'self-signed' if info.self_signed else 'issued by a CA'}; key "
              f"{'encrypted with a passphrase' if info.encrypted else 'not encrypted'} ({key_path()})")
    else:
        print("signing key: none yet — the first certificate issued makes one; or run 'ringgauge shop keygen'")
    return 0


def run_set(args) -> int:
    from ..shop import load_shop, save_shop

    changes = {k: getattr(args, k) for k in FIELDS if getattr(args, k, None) is not None}
    if args.address is not None:
        changes["address"] = [a for a in args.address]
    if not changes:
        raise InputError("nothing to change: give e.g. --name \"...\" or --address \"...\" (see 'ringgauge shop set --help')")
    for k, v in changes.items():
        for line in (v if isinstance(v, list) else [v]):
            if len(line) > 200 or any(ord(ch) < 32 for ch in line):
                raise InputError(f"--{k}: one line of at most 200 characters, without control characters")
    current = load_shop()
    p = save_shop({**current, **changes})
    print(f"shop details saved in {p}: " + ", ".join(sorted(changes)))
    return 0


def _no_stray(args) -> None:
    if getattr(args, "stray", None):
        raise InputError("unexpected extra argument(s) (not shown: a passphrase must never be typed on the command "
                         "line); use RINGGAUGE_KEY_PASSPHRASE or answer the prompt")


def _new_passphrase(asked: bool) -> bytes | None:
    if not asked:
        return None
    from ..report.signing import _ask_passphrase

    pw = _ask_passphrase(confirm=True)
    if not pw:
        raise InputError("an empty passphrase protects nothing; leave out --passphrase for an unencrypted key")
    return pw


def run_keygen(args) -> int:
    from ..report.signing import keygen
    from ..shop import load_shop

    _no_stray(args)
    shop = load_shop()
    name = shop["name"]
    if name.startswith("(shop name not set"):
        raise InputError("set the shop's name first: ringgauge shop set --name \"...\"")
    info = keygen(name, passphrase=_new_passphrase(args.passphrase), days=args.days, replace=args.replace)
    print(f"signing key made: {info.subject}, valid until {info.not_after}")
    print(f"certificate SHA-256 fingerprint: {info.fingerprint}")
    print("give this fingerprint to customers so they can check the signature on their certificates")
    return 0


def run_import(args) -> int:
    import getpass
    import os

    from ..report.signing import import_p12

    _no_stray(args)
    env = os.environ.get("RINGGAUGE_P12_PASSPHRASE")
    if env is not None:
        p12pw = env.encode() or None
    elif sys.stdin.isatty():
        p12pw = getpass.getpass(f"passphrase of {args.file} (empty if none): ").encode() or None
    else:
        p12pw = None
    info = import_p12(args.file, p12_passphrase=p12pw, passphrase=_new_passphrase(args.passphrase),
                      replace=args.replace)
    print(f"signing key imported: {info.subject}, valid until {info.not_after}")
    print(f"certificate SHA-256 fingerprint: {info.fingerprint}")
    return 0


def run_trust_add(args) -> int:
    from ..report.signing import trust_add

    for fp in trust_add(args.file):
        print(f"trusted: SHA-256 {fp}")
    return 0


def run_trust_list(args) -> int:
    from cryptography.hazmat.primitives.serialization import Encoding

    from ..report.signing import fingerprint, shop_certificates, trusted_certificates

    own = {fingerprint(c.public_bytes(Encoding.DER)) for c in shop_certificates()}
    certs = trusted_certificates()
    if not certs:
        print("no trusted certificates yet (the shop's own appears once it has a key)", file=sys.stderr)
    for c in certs:
        fp = fingerprint(c.public_bytes(Encoding.DER))
        print(f"{'shop ' if fp in own else 'extra'}  {c.subject.rfc4514_string()}  until "
              f"{c.not_valid_after_utc:%Y-%m-%d}  SHA-256 {fp}")
    return 0
