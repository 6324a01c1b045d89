"""Signing a decision record: who approved it, not only that it is unchanged.

A record's integrity digests (:mod:`core.record`) detect an edit, but anyone
can recompute them. An Ed25519 signature (the ``cryptography`` package) made
with the approver's private key shows that the holder of that key signed
this exact record; anyone with the public key can check it. Fulcrum never
stores a key: the private key is read from the file given to
``fulcrum sign`` for the moment of signing, the public key from the file
given to ``fulcrum verify``.

What is signed. The record's *canonical JSON* (the same form its integrity
digests use: keys sorted, separators ``,`` and ``:``, UTF-8, no NaN or
Infinity), integrity block included, after the line
``fulcrum.signature/1`` and a newline::

    message = b"fulcrum.signature/1\\n" + canonical_json(record)

Signing the canonical form rather than the file's bytes means re-indenting
the JSON, or reading and rewriting it with another JSON tool, keeps the
signature valid, while any change of a value, key or section breaks it. The
leading line keeps a signature of a record from being valid for any other
kind of message.

The detached signature file (``RECORD.sig`` by default; schema
``fulcrum.signature/1``, JSON)::

    {
      "schema": "fulcrum.signature/1",
      "algorithm": "Ed25519",
      "signed": "fulcrum.signature/1 line + canonical JSON of the record",
      "record_schema": "fulcrum.decision/1",
      "record_sha256": "<the record's integrity.sha256>",
      "key_fingerprint": "<sha256 of the raw 32-byte public key, hex>",
      "signed_utc": "2026-12-02T01:30:00Z",
      "signature": "<64-byte signature, base64>"
    }

Only the message above is signed: ``signed_utc`` (when the signature was
made, by the signer's clock) and ``signed`` (this description) are
informational; ``record_sha256`` and ``key_fingerprint`` are checked against
the record and the key given.

Keys are PEM files: a PKCS#8 private key (optionally encrypted) and its
SubjectPublicKeyInfo public key, as ``openssl genpkey -algorithm ed25519``
and ``openssl pkey -pubout`` write them.

Decision records (``fulcrum.decision/1``) and recheck records
(``fulcrum.recheck/1``) can be signed; each is checked by its own loader
first, so a record that fails its integrity check is never signed.
"""

from __future__ import annotations

import base64
import binascii
import datetime as _dt
import hashlib
import json
from dataclasses import dataclass
from pathlib import Path

from core.errors import InputError

__all__ = [
    "ALGORITHM",
    "SIGNATURE_SCHEMA",
    "SignatureError",
    "Verification",
    "default_signature_path",
    "dumps_signature",
    "key_fingerprint",
    "load_private_key",
    "load_public_key",
    "load_signed_record",
    "loads_signature",
    "sign_record",
    "signed_message",
    "verify_record",
]

SIGNATURE_SCHEMA = "fulcrum.signature/1"
ALGORITHM = "Ed25519"
_DOMAIN = SIGNATURE_SCHEMA.encode("ascii") + b"\n"
_SIGNED_DESCRIPTION = (
    "the line 'fulcrum.signature/1' and a newline, then the record's canonical JSON "
    "(keys sorted, separators ',' and ':', UTF-8, no NaN or Infinity), integrity block included")
_RECORD_SCHEMAS = ("fulcrum.decision/1", "fulcrum.recheck/1")
_FIELDS = ("schema", "algorithm", "record_schema", "record_sha256", "key_fingerprint",
           "signed_utc", "signature")


class SignatureError(InputError):
    """A key or signature file that cannot be used; ``field`` names the part at fault."""

    def __init__(self, where: str, problem: str, *, hint: str = ""):
        self.field = where
        super().__init__(where, problem, hint=hint)


# --------------------------------------------------------------------------- keys


def key_fingerprint(public_key) -> str:
    """SHA-256 (hex) of the raw 32-byte Ed25519 public key (of a private key: of its public key)."""
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

    if isinstance(public_key, Ed25519PrivateKey):
        public_key = public_key.public_key()
    raw = public_key.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)
    return hashlib.sha256(raw).hexdigest()


def _read(path, what: str) -> tuple[bytes, str]:
    p = Path(path)
    if not p.is_file():
        raise SignatureError(str(path), f"no such {what} file")
    return p.read_bytes(), p.name


def load_private_key(source, *, password: bytes | None = None):
    """An Ed25519 private key from a PEM file (path) or PEM bytes; InputError when it is not one."""
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

    data, name = (bytes(source), "private key") if isinstance(source, (bytes, bytearray)) else \
        _read(source, "private key")
    if b"PUBLIC KEY" in data and b"PRIVATE KEY" not in data:
        raise SignatureError(name, "is a public key; signing needs the private key",
                             hint="Give the private key with --key (the public key is for verify)")
    try:
        key = serialization.load_pem_private_key(data, password=password)
    except TypeError as exc:  # encrypted without a password, or a password for a plain key
        need = "is encrypted" if "encrypted" in str(exc).lower() and password is None else \
            "is not encrypted, but a password was given"
        raise SignatureError(name, f"{need}",
                             hint="Name the environment variable that holds its password with "
                                  "--password-env" if password is None else "") from None
    except ValueError as exc:
        raise SignatureError(name, f"is not a PEM private key Fulcrum can read "
                             f"({' '.join(str(exc).split())[:160]})",
                             hint="Create one with: openssl genpkey -algorithm ed25519 -out "
                                  "key.pem") from None
    except Exception as exc:  # noqa: BLE001 -- any failure of the library on these bytes
        raise SignatureError(name, f"could not be read as a private key ({type(exc).__name__})") \
            from None
    if not isinstance(key, Ed25519PrivateKey):
        raise SignatureError(name, f"is a {type(key).__name__.removesuffix('PrivateKey')} key; "
                             "Fulcrum signs with Ed25519 keys only",
                             hint="Create one with: openssl genpkey -algorithm ed25519 -out key.pem")
    return key


def load_public_key(source):
    """An Ed25519 public key from a PEM file (path) or PEM bytes; InputError when it is not one."""
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PublicKey

    data, name = (bytes(source), "public key") if isinstance(source, (bytes, bytearray)) else \
        _read(source, "public key")
    if b"PRIVATE KEY" in data:
        raise SignatureError(name, "is a private key; verifying needs only the public key, and "
                             "the private key should not leave its owner",
                             hint="Write the public key with: openssl pkey -in key.pem -pubout "
                                  "-out key.pub.pem")
    try:
        key = serialization.load_pem_public_key(data)
    except Exception as exc:  # noqa: BLE001 -- any failure of the library on these bytes
        raise SignatureError(name, f"is not a PEM public key Fulcrum can read "
                             f"({' '.join(str(exc).split())[:160] or type(exc).__name__})") from None
    if not isinstance(key, Ed25519PublicKey):
        raise SignatureError(name, f"is a {type(key).__name__.removesuffix('PublicKey')} key; "
                             "Fulcrum verifies Ed25519 signatures only")
    return key


# --------------------------------------------------------------------------- records


def load_signed_record(source, *, verify: bool = True) -> dict:
    """A decision or recheck record from a path or bytes, checked by its own loader.

    ``verify=False`` (for verification) only parses the JSON object: whether
    the record still passes its own checks is reported beside the
    signature's result, naming the field or section, rather than refused.
    """
    from core.record import RecordError, loads_record

    if isinstance(source, (bytes, bytearray)):
        data, name = bytes(source), None
    else:
        p = Path(source)
        if not p.is_file():
            raise InputError(str(source), "no such record file")
        data, name = p.read_bytes(), p.name
    try:
        parsed = json.loads(data.decode("utf-8-sig"))
    except (UnicodeDecodeError, ValueError):
        parsed = None
    if not verify:
        if not isinstance(parsed, dict):
            loads_record(data, source=name, verify=False)  # says what is wrong
            raise RecordError(None, "must be a JSON object", source=name)
        return parsed
    schema = parsed.get("schema") if isinstance(parsed, dict) else None
    if schema == "fulcrum.recheck/1":
        from core.recheck import loads_recheck

        return loads_recheck(data, source=name)
    if isinstance(schema, str) and schema != "fulcrum.decision/1":
        raise RecordError("schema", f"is {schema!r}; Fulcrum signs {' and '.join(_RECORD_SCHEMAS)} "
                          "records", source=name)
    return loads_record(data, source=name)


def signed_message(record: dict) -> bytes:
    """The bytes a signature covers (see the module docstring)."""
    from core.record import canonical_json

    return _DOMAIN + canonical_json(record)


def _utc_now() -> str:
    return _dt.datetime.now(_dt.UTC).replace(microsecond=0).isoformat().replace("+00:00", "Z")


def sign_record(record: dict, private_key, *, signed_utc: str | None = None) -> dict:
    """The detached signature document of a checked ``record`` with ``private_key``."""
    sig = private_key.sign(signed_message(record))
    return {
        "schema": SIGNATURE_SCHEMA,
        "algorithm": ALGORITHM,
        "signed": _SIGNED_DESCRIPTION,
        "record_schema": record.get("schema"),
        "record_sha256": record["integrity"]["sha256"],
        "key_fingerprint": key_fingerprint(private_key),
        "signed_utc": signed_utc or _utc_now(),
        "signature": base64.b64encode(sig).decode("ascii"),
    }


def dumps_signature(signature: dict) -> str:
    """The signature document as indented JSON text."""
    return json.dumps(signature, indent=2, ensure_ascii=False) + "\n"


def loads_signature(text, *, source: str | None = None) -> dict:
    """Parse and check a signature document; SignatureError names the field at fault."""
    where = "signature file" + (f" {source}" if source else "")
    if isinstance(text, (bytes, bytearray)):
        try:
            text = bytes(text).decode("utf-8-sig")
        except UnicodeDecodeError:
            raise SignatureError(where, "is not UTF-8 text") from None
    try:
        doc = json.loads(text)
    except ValueError as exc:
        raise SignatureError(where, f"is not valid JSON ({' '.join(str(exc).split())})") from None
    if not isinstance(doc, dict):
        raise SignatureError(where, "must be a JSON object")
    if doc.get("schema") != SIGNATURE_SCHEMA:
        raise SignatureError(where, f"field schema: is {doc.get('schema')!r}; expected "
                             f"{SIGNATURE_SCHEMA!r} (a Fulcrum signature file)")
    for key in _FIELDS:
        if not isinstance(doc.get(key), str):
            raise SignatureError(where, f"field {key}: must be text, got {type(doc.get(key)).__name__}")
    if doc["algorithm"] != ALGORITHM:
        raise SignatureError(where, f"field algorithm: is {doc['algorithm']!r}; Fulcrum verifies "
                             f"{ALGORITHM} signatures")
    try:
        raw = base64.b64decode(doc["signature"], validate=True)
    except (binascii.Error, ValueError):
        raise SignatureError(where, "field signature: is not base64 text") from None
    if len(raw) != 64:
        raise SignatureError(where, f"field signature: holds {len(raw)} bytes; an Ed25519 "
                             "signature has 64")
    return doc


def default_signature_path(record_path) -> Path:
    """``RECORD.sig`` beside the record."""
    p = Path(record_path)
    return p.with_name(p.name + ".sig")


# --------------------------------------------------------------------------- verification


@dataclass(frozen=True)
class Verification:
    """The result of checking a record against a detached signature and a public key.

    ``valid`` is True only when the signature verifies with the key given,
    the signature names this record (its sha256) and the record passes its
    own integrity check. ``problem`` says in one sentence why not.
    """

    valid: bool
    key_fingerprint: str
    signed_key_fingerprint: str
    record_sha256: str
    signed_record_sha256: str
    signed_utc: str
    problem: str | None = None

    def line(self) -> str:
        """``signature: valid, key <fingerprint>`` or ``signature: NOT VALID: <why>``."""
        if self.valid:
            return f"signature: valid, key {self.key_fingerprint}"
        return f"signature: NOT VALID: {self.problem}"

    def to_dict(self) -> dict:
        return {"valid": self.valid, "key_fingerprint": self.key_fingerprint,
                "signed_key_fingerprint": self.signed_key_fingerprint,
                "record_sha256": self.record_sha256,
                "signed_record_sha256": self.signed_record_sha256,
                "signed_utc": self.signed_utc, "problem": self.problem,
                "algorithm": ALGORITHM, "schema": SIGNATURE_SCHEMA}


def verify_record(record: dict, signature: dict, public_key) -> Verification:
    """Check ``record`` (a parsed record, integrity not yet trusted) against ``signature``.

    The signature must verify over :func:`signed_message` with
    ``public_key``; the key must be the one the signature names; and the
    record must pass its own integrity check (an edited record is named by
    section). Never raises for an invalid signature: see ``valid`` and
    ``problem``.
    """
    from cryptography.exceptions import InvalidSignature

    from core.record import digest

    fp = key_fingerprint(public_key)
    integ = record.get("integrity") if isinstance(record, dict) else None
    rec_sha = integ.get("sha256") if isinstance(integ, dict) else None
    body_sha = digest({k: v for k, v in record.items() if k != "integrity"})
    common = {"key_fingerprint": fp, "signed_key_fingerprint": signature["key_fingerprint"],
              "record_sha256": str(rec_sha), "signed_record_sha256": signature["record_sha256"],
              "signed_utc": signature["signed_utc"]}
    problems = []
    try:
        public_key.verify(base64.b64decode(signature["signature"]), signed_message(record))
        sig_ok = True
    except InvalidSignature:
        sig_ok = False
    if signature["key_fingerprint"] != fp:
        problems.append(f"the record was signed with key {signature['key_fingerprint']}, not with "
                        f"the public key given ({fp})")
    elif not sig_ok:
        problems.append("the signature does not match this record with this key")
    broken = _integrity_problem(record)
    if broken or rec_sha != body_sha:
        problems.append(broken or "the record's integrity.sha256 does not match its content")
    elif signature["record_sha256"] != rec_sha:
        problems.append(f"the signature is for record sha256 {signature['record_sha256']}, this "
                        f"record is {rec_sha}")
    if sig_ok and not problems:
        return Verification(valid=True, **common)
    return Verification(valid=False, problem="; ".join(problems) or "the signature does not match",
                        **common)


def _integrity_problem(record: dict) -> str | None:
    """The record loader's own sentence when its integrity check fails (names the section)."""
    from core.record import canonical_json

    try:
        load_signed_record(canonical_json(record), verify=True)
    except InputError as exc:
        return str(exc)
    return None
