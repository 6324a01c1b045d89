"""``fulcrum sign`` and ``fulcrum verify``: a detached Ed25519 signature of a record.

``fulcrum sign RECORD --key KEY.pem [--out SIG]`` checks the record (its
integrity included), signs it (see :mod:`core.signing` for what is signed)
and writes the signature file, ``RECORD.sig`` by default. ``fulcrum verify
RECORD --public-key PUB.pem [--signature SIG]`` prints one line:
``signature: valid, key <fingerprint>`` (exit 0) or ``signature: NOT VALID:
<why>`` (exit 1). A key, record or signature file that cannot be read is
bad input: one line on stderr, exit 2. Fulcrum never stores a key.
"""

from __future__ import annotations

import os
from pathlib import Path

from core.errors import InputError

__all__ = [
    "add_sign",
    "add_signature_arguments",
    "add_verify",
    "run_sign",
    "run_verify",
    "signature_from_args",
    "verify_paths",
]

_SIGN_DESCRIPTION = """\
Sign a decision record (or a recheck record) with an Ed25519 private key and write a detached
signature file (default: RECORD.sig). The record is checked first: an edited record is refused.
Create a key pair with:
  openssl genpkey -algorithm ed25519 -out key.pem
  openssl pkey -in key.pem -pubout -out key.pub.pem
Fulcrum reads the private key only while signing and never stores it."""

_VERIFY_DESCRIPTION = """\
Check a record against its detached signature with the signer's public key. Prints
"signature: valid, key <fingerprint>" and exits 0, or "signature: NOT VALID: <why>" and exits 1
(a changed record is named by section). Unreadable files: exit 2."""


def add_sign(sub) -> None:
    """Register ``sign`` on an argparse subparsers object."""
    import argparse

    p = sub.add_parser("sign", help="sign a decision record (detached Ed25519 signature)",
                       description=_SIGN_DESCRIPTION,
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("record", metavar="RECORD", help="the decision record (JSON)")
    p.add_argument("--key", required=True, metavar="KEY.pem",
                   help="the Ed25519 private key (PEM, PKCS#8)")
    p.add_argument("--password-env", metavar="NAME",
                   help="the environment variable holding the key's password (encrypted keys)")
    p.add_argument("--out", metavar="SIG", help="where to write the signature (default RECORD.sig)")
    p.set_defaults(func=run_sign)


def add_verify(sub) -> None:
    """Register ``verify`` on an argparse subparsers object."""
    import argparse

    p = sub.add_parser("verify", help="check a record's detached signature with a public key",
                       description=_VERIFY_DESCRIPTION,
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("record", metavar="RECORD", help="the decision record (JSON)")
    p.add_argument("--public-key", required=True, metavar="PUB.pem",
                   help="the signer's Ed25519 public key (PEM)")
    p.add_argument("--signature", metavar="SIG", help="the signature file (default RECORD.sig)")
    p.set_defaults(func=run_verify)


def _password(name: str | None) -> bytes | None:
    if name is None:
        return None
    if name not in os.environ:
        raise InputError("--password-env", f"the environment variable {name} is not set")
    return os.environ[name].encode("utf-8")


def run_sign(args) -> int:
    """Run ``fulcrum sign``."""
    from core.signing import (
        default_signature_path,
        dumps_signature,
        load_private_key,
        load_signed_record,
        sign_record,
    )

    key = load_private_key(args.key, password=_password(args.password_env))
    record = load_signed_record(args.record)
    out = Path(args.out) if args.out else default_signature_path(args.record)
    if not out.resolve().parent.is_dir():
        raise InputError("--out", f"the folder of {out} does not exist")
    sig = sign_record(record, key)
    out.write_text(dumps_signature(sig), encoding="utf-8")
    print(f"signed record sha256 {sig['record_sha256']} with key {sig['key_fingerprint']}")
    print(f"Wrote the signature: {out}")
    return 0


def verify_paths(record_path, public_key_path, signature_path=None):
    """The :class:`~core.signing.Verification` of files (InputError when one cannot be read)."""
    from core.signing import (
        default_signature_path,
        load_public_key,
        load_signed_record,
        loads_signature,
        verify_record,
    )

    key = load_public_key(public_key_path)
    sig_path = Path(signature_path) if signature_path else default_signature_path(record_path)
    if not sig_path.is_file():
        raise InputError("--signature", f"no signature file {sig_path}"
                         + ("" if signature_path else " (the default is RECORD.sig)"))
    signature = loads_signature(sig_path.read_bytes(), source=sig_path.name)
    record = load_signed_record(record_path, verify=False)
    return verify_record(record, signature, key)


def run_verify(args) -> int:
    """Run ``fulcrum verify``: exit 0 valid, 1 not valid, 2 bad input."""
    result = verify_paths(args.record, args.public_key, args.signature)
    print(result.line())
    return 0 if result.valid else 1


def add_signature_arguments(group) -> None:
    """``--public-key PUB.pem [--signature SIG]`` on another command (``fulcrum recheck``)."""
    group.add_argument("--public-key", metavar="PUB.pem",
                       help="check the decision record's signature with this Ed25519 public key "
                            "first (refused with exit 2 when it is not valid)")
    group.add_argument("--signature", metavar="SIG",
                       help="the record's signature file (default RECORD.sig); needs --public-key")


def signature_from_args(args, record_path):
    """The valid :class:`~core.signing.Verification` the options ask for, or None.

    Raises InputError (exit 2) when the signature is not valid, naming why.
    """
    if args.public_key is None:
        if args.signature is not None:
            raise InputError("--signature", "needs --public-key (the signer's public key)")
        return None
    result = verify_paths(record_path, args.public_key, args.signature)
    if not result.valid:
        raise InputError("--public-key", f"the decision record's {result.line()}")
    return result
