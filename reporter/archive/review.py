"""The build that sign-off signs: a build folder checked against its manifest, then every
output it holds reproduced from the inputs, byte for byte.

The manifest (``results/manifest.json``) lists each output with its sha256, but nothing
protects the manifest itself: whoever can edit ``results/securities.csv`` can edit its hash
too. So sign-off does not trust the build folder's bytes. It runs the build's own code
(:func:`reporter.build.assemble`, :func:`~reporter.build.results_files` and
:func:`~reporter.build.pack_files`) on the inputs again, with the build's own timestamp, and
compares every file the build wrote with what that gives. Only then is anything signed, and
what is archived is the re-rendered bytes.

Two files are not re-rendered, by design (see :data:`NOT_REPRODUCED`): the draft ``pack.pdf``
and ``pack-trustees.pdf``.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
from dataclasses import dataclass
from pathlib import Path

from reporter.build import EDITION_FILES, assemble, pack_files, results_files
from reporter.config import Settings
from reporter.errors import InputError, Problem
from reporter.writer import BUILD_MARKER, OutputSet

MANIFEST = "results/manifest.json"

# Outputs of a build that sign-off does not reproduce byte for byte, each with the reason.
# The draft PDF renders deterministically (two builds at one SOURCE_DATE_EPOCH give the same
# bytes), but it is never archived: sign-off renders the archived PDF/A itself, from the
# re-rendered HTML, so rendering the draft again would add a second WeasyPrint run (the
# slowest step of a build) for a file that nobody signs. Its sha256 is still checked against
# the manifest, and the manifest itself is reproduced.
NOT_REPRODUCED = {
    "pack.pdf": "the draft PDF is not archived; sign-off renders the signed PDF/A itself "
                "from the re-rendered HTML",
    "pack-trustees.pdf": "the draft trustees' edition likewise: sign-off renders its signed "
                         "PDF/A from the same re-rendered context",
}


@dataclass(frozen=True)
class ReviewedBuild:
    """A build folder whose files were checked against its manifest."""

    folder: Path
    manifest: dict
    files: dict[str, bytes]      # relative path -> bytes, manifest included


def sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def read_build(folder: Path) -> ReviewedBuild:
    """Load a build folder and check every output against the sha256 in its manifest."""
    folder = Path(folder)
    manifest_path = folder / MANIFEST
    if not (folder / BUILD_MARKER).is_file() or not manifest_path.is_file():
        raise InputError([Problem(str(folder), "not a pack build (no results/manifest.json); "
                                  "run 'reporter build' first")])
    try:
        manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
        expected = manifest["output_sha256"]
        _ = manifest["pack_dir"], manifest["pack_name"], manifest["input_sha256"]
        dt.datetime.strptime(manifest["built_utc"], "%Y-%m-%dT%H:%M:%SZ")
        if not isinstance(expected, dict) or not all(
                isinstance(k, str) and isinstance(v, str) for k, v in expected.items()):
            raise TypeError("output_sha256 is not a map of path to sha256")
    except (ValueError, KeyError, TypeError) as exc:
        raise InputError([Problem(str(manifest_path), "not a manifest this version can sign "
                                  f"({exc}); rebuild the pack")]) from None
    problems, files = [], {MANIFEST: manifest_path.read_bytes()}
    on_disk = {p.relative_to(folder).as_posix() for p in folder.rglob("*")
               if p.is_file() or p.is_symlink()}
    for rel in sorted(on_disk - set(expected) - {BUILD_MARKER, MANIFEST}):
        problems.append(Problem(str(folder / rel), "not written by the build; remove it or "
                                "rebuild before signing"))
    for rel, digest in sorted(expected.items()):
        path = folder / rel
        if path.is_symlink() or not path.is_file() or not path.resolve().is_relative_to(
                folder.resolve()):
            problems.append(Problem(str(path), "missing from the build (or not a plain file "
                                    "inside it); rebuild the pack"))
            continue
        data = path.read_bytes()
        if sha256(data) != digest:
            problems.append(Problem(str(path), "changed since the build (sha256 differs from "
                                    "the manifest); rebuild and review it again"))
        files[rel] = data
    if problems:
        raise InputError(problems)
    return ReviewedBuild(folder, manifest, files)


def reproduce(build: ReviewedBuild, settings: Settings):
    """Re-run the build of ``build`` from its inputs, with the build's own timestamp, and
    compare every output with the build folder byte for byte (all but
    :data:`NOT_REPRODUCED`). Returns ``(assembled, outputs)``: the assembled pack, for the
    signed PDF, and the re-rendered outputs to archive. Raises :class:`InputError` naming
    each input changed since the build, or else each output that differs, is missing or is
    extra."""
    built_at = dt.datetime.strptime(build.manifest["built_utc"], "%Y-%m-%dT%H:%M:%SZ")
    a = assemble(settings, at=built_at.replace(tzinfo=dt.UTC))
    check_inputs_unchanged(settings, a.hashes, build)
    outputs = OutputSet()                 # in memory: nothing is written here
    results_files(a, outputs)
    # the draft PDFs are not rendered again (NOT_REPRODUCED): the build's own bytes stand in
    # for them, so that the manifest, which lists their sha256, can be compared whole
    pack_files(a, a.html(for_print=False),
               {edition: build.files.get(rel, b"") for edition, rel in EDITION_FILES.items()
                if rel in build.files or edition == "full"}, outputs)
    built, made = set(build.files), set(outputs.paths)
    problems = []
    for rel in sorted(built | made):
        where = str(build.folder / rel)
        if rel in NOT_REPRODUCED:
            continue
        if rel not in made:
            problems.append(Problem(where, "the build lists it, but rebuilding from the inputs "
                                    "does not make it; rebuild the pack, review it, then sign "
                                    "it off"))
        elif rel not in built:
            problems.append(Problem(where, "missing: rebuilding from the inputs makes it, but "
                                    "the build has none; rebuild the pack, review it, then "
                                    "sign it off"))
        elif bytes(outputs[rel]) != build.files[rel]:
            problems.append(Problem(where, "rebuilding from the inputs does not reproduce it "
                                    "byte for byte (edited after the build, or made by "
                                    "another tool version or templates); rebuild the pack, "
                                    "review it, then sign it off"))
    if problems:
        raise InputError(problems)
    return a, outputs


def input_path(settings: Settings, key: str) -> Path:
    """The file behind a key of the manifest's ``input_sha256`` (a role, or a path)."""
    if key == "pack.toml":
        return settings.config_path
    if key in settings.inputs:
        return settings.inputs[key].path
    return settings.pack_dir / key


def check_inputs_unchanged(settings: Settings, now: dict[str, str],
                           build: ReviewedBuild) -> None:
    then = build.manifest["input_sha256"]
    changed = [k for k in sorted(set(now) | set(then)) if now.get(k) != then.get(k)]
    if changed:
        raise InputError([Problem(str(input_path(settings, k)), "changed since the pack was "
                                  "built; rebuild and review the new pack before signing it "
                                  "off") for k in changed])
