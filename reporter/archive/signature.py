"""Digital signatures on archived packs: PAdES baseline B-B (ETSI EN 319 142-1) with pyHanko.

A signature is added to a PDF as an incremental update: the signed bytes are the earlier
file unchanged, followed by a new revision holding an invisible signature field and its
CMS signature (sub-filter ``ETSI.CAdES.detached``, SHA-256). A second signer (a
countersignature: the chair, then the secretary) signs the first signer's file in the
same way, so the first signature still covers, byte for byte, the revision it signed, and
every page and the PDF/A metadata of the original are untouched.

:func:`check_signatures` reads every signature of a file back with pyHanko's validator:
whether the signed bytes are intact and the signature verifies (integrity), whether it
covers the whole file or only an earlier revision and, if so, whether what came after is
only more signatures (coverage), and, given trusted root certificates, whether the
signer's certificate chains to one of them (trust). No revocation information is fetched:
nothing here touches a network.

RFC 3161 timestamps (PAdES B-T) are not added: a time-stamping server is a network
service, and no test may reach one; the signing time is the signer's own clock, as B-B
allows, and the ledger's chain and the minutes anchor it.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import hashlib
import logging
from dataclasses import dataclass, field
from io import BytesIO
from pathlib import Path

from asn1crypto import keys as asn1_keys
from asn1crypto import pem
from asn1crypto import x509 as asn1_x509
from cryptography import x509
from cryptography.hazmat.primitives import serialization

from reporter.archive.keys import SigningKey
from reporter.errors import InputError, Problem, shown_name
from reporter.user_files import read_regular

FIELD_PREFIX = "Signature"
MAX_ROOTS_FILE = 1 << 20


@dataclass(frozen=True)
class SignatureCheck:
    """One signature of a PDF as the validator found it. ``trusted`` is None when no
    trusted roots were given (the chain was not checked)."""

    field_name: str
    subject: str
    cert_sha256: str
    signed_utc: str | None
    intact: bool
    whole_document: bool
    later_changes: str | None        # None, or what follows the signed revision
    trusted: bool | None
    problems: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.problems


def _utc_text(moment: dt.datetime | None) -> str | None:
    if moment is None:
        return None
    return moment.astimezone(dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def _signer(key: SigningKey):
    from pyhanko.sign import signers
    from pyhanko_certvalidator.registry import SimpleCertificateStore

    der = serialization.Encoding.DER
    cert = asn1_x509.Certificate.load(key.certificate.public_bytes(der))
    private = asn1_keys.PrivateKeyInfo.load(key.private_key.private_bytes(
        der, serialization.PrivateFormat.PKCS8, serialization.NoEncryption()))
    chain = [asn1_x509.Certificate.load(c.public_bytes(der)) for c in key.chain]
    return signers.SimpleSigner(signing_cert=cert, signing_key=private,
                                cert_registry=SimpleCertificateStore.from_certs([cert, *chain]))


def signature_count(pdf: bytes) -> int:
    from pyhanko.pdf_utils.reader import PdfFileReader

    return len(PdfFileReader(BytesIO(pdf), strict=False).embedded_signatures)


def sign_pdf(pdf: bytes, key: SigningKey, *, reason: str) -> bytes:
    """``pdf`` with one more PAdES B-B signature by ``key``, as an incremental update.

    The field is named ``Signature<n>`` (n = signatures already present + 1)."""
    from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter
    from pyhanko.sign import fields, signers

    n = signature_count(pdf) + 1
    meta = signers.PdfSignatureMetadata(
        field_name=f"{FIELD_PREFIX}{n}", md_algorithm="sha256",
        subfilter=fields.SigSeedSubFilter.PADES, reason=reason,
        name=key.certificate.subject.rfc4514_string())
    writer = IncrementalPdfFileWriter(BytesIO(pdf))
    out = signers.sign_pdf(writer, meta, signer=_signer(key))
    return out.getvalue()


def signature_columns(key: SigningKey | None, signed_pdf: bytes | None) -> dict:
    """The ledger's signature columns for an entry whose PDF's last signature is by
    ``key`` (all None when the PDF carries no digital signature)."""
    if key is None or signed_pdf is None:
        return {"cert_subject": None, "cert_sha256": None, "cert_signed_utc": None}
    last = check_signatures(signed_pdf)[-1]
    return {"cert_subject": last.subject, "cert_sha256": last.cert_sha256,
            "cert_signed_utc": last.signed_utc}


def page_record(key: SigningKey | None, signed_utc: str) -> dict | None:
    """What the sign-off page says of the digital signature (None: the PDF has none).
    ``signed_utc`` is the sign-off time, which :func:`sign_pdf` puts in the signature."""
    if key is None:
        return None
    return {"subject": key.subject, "cert_sha256": key.cert_sha256,
            "signed_utc": signed_utc.replace("T", " ").replace("Z", " UTC"),
            "not_after": f"{key.certificate.not_valid_after_utc:%Y-%m-%d}"}


def load_roots(path: Path | str) -> list:
    """Trusted root certificates from a PEM (one or more certificates) or DER file."""
    path = Path(path)
    data = read_regular(path, MAX_ROOTS_FILE, missing="no such file of trusted root certificates",
                        too_large="too large for a file of root certificates")
    try:
        if pem.detect(data):
            roots = [asn1_x509.Certificate.load(der) for kind, _, der in pem.unarmor(
                data, multiple=True) if kind == "CERTIFICATE"]
        else:
            roots = [asn1_x509.Certificate.load(data)]
        for cert in roots:
            _ = cert.subject.human_friendly       # parse now, not during validation
    except (ValueError, TypeError, OSError) as exc:
        raise InputError([Problem(str(path), f"not a PEM or DER certificate file ({exc})")]
                         ) from None
    if not roots:
        raise InputError([Problem(str(path), "holds no certificate")])
    return roots


# what a later revision may write besides signature dictionaries and signature widgets:
# the catalog and pages gain /AcroForm and /Annots, the form its /Fields, and pyHanko
# records itself as producer in the document information and the XMP metadata
_FORM_KEYS = {"/Fields", "/SigFlags"}


def _changes_after(reader, signed_revision: int) -> str | None:
    """What, if anything, the revisions after ``signed_revision`` change besides adding
    signatures; None when they only add signatures.

    pyHanko's own difference analysis does this with a general policy, but walks every
    object of a tagged pack (over 5,000) and took minutes on the demo; the updates a
    countersignature makes are few and known, so each object they write is checked
    against the list above."""
    from pyhanko.pdf_utils import generic

    info_ref = reader.trailer.raw_get("/Info") if "/Info" in reader.trailer else None
    for rev in range(signed_revision + 1, reader.xrefs.total_revisions):
        for ref in reader.xrefs.explicit_refs_in_revision(rev):
            obj = reader.get_object(ref, revision=rev)
            where = f"object {ref.idnum} in revision {rev + 1}"
            if not isinstance(obj, generic.DictionaryObject):
                return f"{where} is not a signature object"
            kind = obj.get("/Type")
            if kind == "/Sig" or (obj.get("/FT") == "/Sig" and obj.get("/Subtype") == "/Widget"):
                continue
            if kind in ("/XRef", "/Metadata") or set(obj.keys()) <= _FORM_KEYS:
                continue
            if info_ref is not None and ref.idnum == info_ref.idnum:
                continue
            if kind in ("/Catalog", "/Page"):
                try:
                    before = reader.get_object(ref, revision=rev - 1)
                except Exception:
                    return f"{where}: a new {kind[1:].lower()}"
                allowed = {"/AcroForm"} if kind == "/Catalog" else {"/Annots"}
                keys = (set(obj.keys()) | set(before.keys())) - allowed
                if any(obj.raw_get(k) != before.raw_get(k) if k in obj and k in before
                       else True for k in keys):
                    return f"{where}: the {kind[1:].lower()} itself was changed"
                if kind == "/Page" and not _only_new_widgets(reader, obj, before, rev):
                    return f"{where}: an annotation other than a signature was added"
                continue
            return f"{where} ({kind or 'no type'}) is not part of a signature"
    return None


def _only_new_widgets(reader, page, before, rev: int) -> bool:
    """Whether every annotation ``page`` has and ``before`` lacked is a signature widget."""
    def annotations(p) -> list:
        return list(p["/Annots"]) if "/Annots" in p else []

    def key(a):
        return a.idnum if hasattr(a, "idnum") else id(a)

    old = {key(a) for a in annotations(before)}
    for annot in annotations(page):
        if key(annot) in old:
            continue
        widget = annot.get_object()
        if widget.get("/FT") != "/Sig" or widget.get("/Subtype") != "/Widget":
            return False
    return True


@contextlib.contextmanager
def _quiet_validator():
    """pyHanko logs each failed chain (a self-signed certificate with no roots given) as
    a warning; the result is reported here instead, so its log is held back meanwhile."""
    log = logging.getLogger("pyhanko")
    level = log.level
    log.setLevel(logging.CRITICAL)
    try:
        yield
    finally:
        log.setLevel(level)


def check_signatures(pdf: bytes, roots: list | None = None) -> list[SignatureCheck]:
    """Every signature of ``pdf``, oldest first, checked with pyHanko's validator."""
    from pyhanko.pdf_utils.reader import PdfFileReader
    from pyhanko.sign.validation import validate_pdf_signature
    from pyhanko.sign.validation.errors import SignatureValidationError
    from pyhanko_certvalidator import ValidationContext

    try:
        reader = PdfFileReader(BytesIO(pdf), strict=False)
        embedded = list(reader.embedded_signatures)
    except Exception as exc:     # a damaged PDF: pyHanko raises several kinds
        return [SignatureCheck("(file)", "", "", None, False, False, None, None,
                               [f"cannot be read as a PDF ({type(exc).__name__}: {exc})"])]
    out = []
    for sig in embedded:
        context = ValidationContext(trust_roots=roots or [], allow_fetching=False,
                                    revocation_mode="soft-fail")
        problems: list[str] = []
        try:
            with _quiet_validator():    # differences are checked below, faster
                status = validate_pdf_signature(sig, context, skip_diff=True)
        except (SignatureValidationError, ValueError, KeyError) as exc:
            problems.append(f"cannot be validated ({exc})")
            out.append(SignatureCheck(sig.field_name, "", "", None, False, False, None,
                                      None, problems))
            continue
        cert = status.signing_cert
        subject = (x509.load_der_x509_certificate(cert.dump()).subject.rfc4514_string()
                   if cert is not None else "")
        digest = hashlib.sha256(cert.dump()).hexdigest() if cert is not None else ""
        intact = bool(status.intact and status.valid)
        if not intact:
            problems.append("the signed bytes were changed after signing, or the "
                            "signature does not verify")
        whole = status.coverage.name == "ENTIRE_FILE"
        later = None
        if not whole:
            if status.coverage.name != "ENTIRE_REVISION":
                problems.append("does not cover its whole revision of the document")
            else:
                later = _changes_after(reader, sig.signed_revision)
                if later:
                    problems.append(f"changes after it are not only further signatures "
                                    f"({later})")
        trusted = None
        if roots:
            trusted = bool(status.trusted)
            if not trusted and intact:
                problems.append("the certificate does not chain to a given trusted root")
        out.append(SignatureCheck(sig.field_name, subject, digest,
                                  _utc_text(status.signer_reported_dt), intact, whole,
                                  later, trusted, problems))
    return out


def describe(pdf_path: Path | str, roots_file: Path | str | None = None
             ) -> tuple[list[str], bool]:
    """Lines that report each signature of the PDF at ``pdf_path``, and whether all pass.
    A file with no signature passes here (the ledger says whether it should have one)."""
    roots = load_roots(roots_file) if roots_file is not None else None
    checks = check_signatures(Path(pdf_path).read_bytes(), roots)
    if not checks:
        return [f"{shown_name(pdf_path)}: carries no digital signature"], True
    lines = []
    for i, c in enumerate(checks, 1):
        if c.subject:
            trust = ("chain to a given root: yes" if c.trusted else
                     "chain to a given root: NO" if c.trusted is False else
                     "chain not checked (no --trust ROOTS.pem)")
            cover = ("covers the whole document" if c.whole_document else
                     f"covers revision {i} of {len(checks)}; after it: further "
                     "signatures only" if c.ok else "coverage NOT as expected")
            lines.append(f"signature {i} ({c.field_name}): {c.subject}, signed "
                         f"{c.signed_utc}, certificate sha256 {c.cert_sha256}; "
                         f"{'intact' if c.intact else 'NOT intact'}; {cover}; {trust}")
        lines += [f"signature {i} ({c.field_name}): {p}" for p in c.problems]
    return lines, all(c.ok for c in checks)


__all__ = ["describe", "SignatureCheck", "check_signatures", "load_roots", "sign_pdf",
           "signature_columns", "signature_count"]
