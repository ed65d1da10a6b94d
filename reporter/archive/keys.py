"""A signer's key: a PKCS#12 file (``.p12``/``.pfx``) holding a private key and its X.509
certificate, opened with a passphrase, and checked before anything is signed.

The passphrase comes from the environment variable named by ``--key-pass-env``, or from a
prompt on a terminal (not echoed). It is never taken on the command line, where it would
land in the shell history and in the process list.

Every refusal is one :class:`~reporter.errors.Problem` naming the key file (exit 2):
a missing or unreadable file, a wrong passphrase, a file that is not PKCS#12, a key that
does not belong to its certificate, a certificate that has expired or is not yet valid.

``python -m reporter.archive.keys OUT.p12`` makes a throwaway self-signed demo key for
``make demo``: every name it carries says DEMO ONLY, and it must never sign a real pack.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import os
import sys
from dataclasses import dataclass
from pathlib import Path

from cryptography import x509
from cryptography.hazmat.primitives import hashes, serialization
from cryptography.hazmat.primitives.asymmetric import ec
from cryptography.hazmat.primitives.serialization import pkcs12
from cryptography.x509.oid import NameOID

from reporter.errors import InputError, Problem
from reporter.user_files import check_regular, read_regular

MAX_KEY_FILE = 1 << 20          # a PKCS#12 file is a few kB; refuse anything absurd
DEMO_PASSPHRASE_ENV = "REPORTER_DEMO_KEY_PASS"


@dataclass(frozen=True)
class SigningKey:
    """An opened, checked signing key. ``cert_sha256`` is the sha256 of the certificate's
    DER bytes (the usual certificate fingerprint)."""

    path: Path
    private_key: object
    certificate: x509.Certificate
    chain: tuple[x509.Certificate, ...]

    @property
    def subject(self) -> str:
        return self.certificate.subject.rfc4514_string()

    @property
    def cert_sha256(self) -> str:
        return hashlib.sha256(
            self.certificate.public_bytes(serialization.Encoding.DER)).hexdigest()


def _fail(path: Path, message: str) -> InputError:
    return InputError([Problem(str(path), message)])


def passphrase(env_name: str | None, *, path: Path,
               prompt=None, stdin_is_terminal: bool | None = None) -> bytes:
    """The key's passphrase: from ``$env_name`` when given, else from a terminal prompt
    (``prompt`` is the function that asks without echo, ``getpass.getpass`` by default)."""
    if env_name is not None:
        if env_name not in os.environ:
            raise _fail(path, f"--key-pass-env {env_name}: no such environment variable "
                        "is set")
        return os.environ[env_name].encode("utf-8")
    terminal = sys.stdin.isatty() if stdin_is_terminal is None else stdin_is_terminal
    if not terminal:
        raise _fail(path, "no passphrase: name the environment variable that holds it with "
                    "--key-pass-env NAME (there is no terminal to ask on)")
    if prompt is None:
        import getpass
        prompt = getpass.getpass
    return prompt(f"Passphrase for {path}: ").encode("utf-8")


def load_signing_key(path: Path | str, secret: bytes, *,
                     now: dt.datetime | None = None) -> SigningKey:
    """Open a PKCS#12 file and check it is fit to sign with at ``now`` (UTC)."""
    path = Path(path)
    now = now or dt.datetime.now(dt.UTC)
    data = read_regular(path, MAX_KEY_FILE, missing="no such key file",
                        too_large="too large to be a PKCS#12 key file")
    try:
        key, cert, extra = pkcs12.load_key_and_certificates(data, secret or None)
    except ValueError:
        raise _fail(path, "wrong passphrase, or not a PKCS#12 (.p12) key file") from None
    except Exception as exc:      # cryptography raises a few kinds on malformed DER
        raise _fail(path, f"not a PKCS#12 (.p12) key file ({type(exc).__name__})") from None
    extra = list(extra or ())
    if cert is None and extra:        # some tools bag the certificate without a key id
        cert = extra.pop(0)
    if key is None or cert is None:
        raise _fail(path, "must hold both a private key and its certificate")
    public = serialization.PublicFormat.SubjectPublicKeyInfo
    der = serialization.Encoding.DER
    if key.public_key().public_bytes(der, public) != cert.public_key().public_bytes(der, public):
        raise _fail(path, "the private key does not belong to the certificate in the file")
    stamp, who = "%Y-%m-%d %H:%M:%S UTC", cert.subject.rfc4514_string()
    if now < cert.not_valid_before_utc:
        raise _fail(path, f"certificate not valid until "
                    f"{cert.not_valid_before_utc.strftime(stamp)} ({who})")
    if now > cert.not_valid_after_utc:
        raise _fail(path, f"certificate expired on {cert.not_valid_after_utc.strftime(stamp)} "
                    f"({who}); ask for a new one")
    return SigningKey(path, key, cert, tuple(extra))


def open_key(path: Path | str, pass_env: str | None) -> SigningKey:
    """The checked key of ``--key PATH`` with ``--key-pass-env NAME`` (or a prompt)."""
    path = Path(path)
    check_regular(path, "no such key file")      # before the passphrase is asked for
    return load_signing_key(path, passphrase(pass_env, path=path))


def make_demo_key(out: Path | str, secret: bytes, *, common_name: str = "DEMO ONLY signer",
                  days: int = 30, not_before: dt.datetime | None = None,
                  mismatched: bool = False) -> Path:
    """Write a throwaway self-signed key and certificate (ECDSA P-256) as PKCS#12.

    For the demo and the tests only: anyone can make one with any name, so it proves
    nothing about who signed. ``mismatched`` writes a key that does not belong to its
    certificate (a test case)."""
    out = Path(out)
    start = not_before or dt.datetime.now(dt.UTC) - dt.timedelta(minutes=5)
    key = ec.generate_private_key(ec.SECP256R1())
    name = x509.Name([
        x509.NameAttribute(NameOID.COMMON_NAME, common_name),
        x509.NameAttribute(NameOID.ORGANIZATION_NAME, "DEMO ONLY - not a real signer"),
    ])
    cert = (x509.CertificateBuilder().subject_name(name).issuer_name(name)
            .public_key(key.public_key()).serial_number(x509.random_serial_number())
            .not_valid_before(start).not_valid_after(start + dt.timedelta(days=days))
            .add_extension(x509.BasicConstraints(ca=True, path_length=None), critical=True)
            .add_extension(x509.KeyUsage(
                digital_signature=True, content_commitment=True, key_encipherment=False,
                data_encipherment=False, key_agreement=False, key_cert_sign=True,
                crl_sign=False, encipher_only=False, decipher_only=False), critical=True)
            .sign(key, hashes.SHA256()))
    encryption = (serialization.BestAvailableEncryption(secret) if secret
                  else serialization.NoEncryption())
    if mismatched:     # another key, with the certificate bagged beside it, not as its own
        data = pkcs12.serialize_key_and_certificates(
            common_name.encode(), ec.generate_private_key(ec.SECP256R1()), None, [cert],
            encryption)
    else:
        data = pkcs12.serialize_key_and_certificates(common_name.encode(), key, cert, None,
                                                     encryption)
    out.parent.mkdir(parents=True, exist_ok=True)
    fd = os.open(out, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)   # never overwrite
    with os.fdopen(fd, "wb") as fh:
        fh.write(data)
    out.with_suffix(".pem").write_bytes(cert.public_bytes(serialization.Encoding.PEM))
    return out


def main(argv: list[str] | None = None) -> int:
    """``python -m reporter.archive.keys OUT.p12 [COMMON NAME]``: a demo key whose
    passphrase is read from $REPORTER_DEMO_KEY_PASS; its certificate goes to OUT.pem."""
    args = sys.argv[1:] if argv is None else argv
    if not 1 <= len(args) <= 2 or DEMO_PASSPHRASE_ENV not in os.environ:
        print(f"usage: {DEMO_PASSPHRASE_ENV}=... python -m reporter.archive.keys OUT.p12 "
              "[COMMON NAME]", file=sys.stderr)
        return 2
    name = args[1] if len(args) == 2 else "DEMO ONLY signer"
    if "DEMO" not in name.upper():
        name = f"DEMO ONLY {name}"
    try:
        out = make_demo_key(args[0], os.environ[DEMO_PASSPHRASE_ENV].encode(),
                            common_name=name)
    except FileExistsError:
        print(f"{args[0]}: exists; not overwritten", file=sys.stderr)
        return 2
    print(f"wrote {out} and {out.with_suffix('.pem')} (throwaway demo key: {name})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
