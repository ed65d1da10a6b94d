"""Where a build's resident memory is, at the start and end of every stage (Linux, glibc).

    python benchmarks/memory_accounts.py PACK_FOLDER

Builds the pack as ``reporter build`` does (``assemble``, then ``finish_build`` with
``release=True``, into a temporary folder) and prints, at each stage's start and end:

- RSS, and of it the pages backed by files (the libraries; most of the baseline);
- glibc's main heap (``[heap]``): its resident pages; and from ``mallinfo2`` the bytes
  malloc has in use and free over all its arenas (the main heap and the threads' arenas;
  free bytes are fragmentation held);
- blocks glibc mapped on their own (``mallinfo2().hblkhd``: arrays of 16 MiB and more);
- Python's object arenas (``sys._debugmallocstats``: 1 MiB each, and the bytes in use);
- pyarrow's pool (bytes allocated);
- the other anonymous memory: the threads' malloc arenas' pages, the chart engine's heap,
  pyarrow's allocator's retained pages, C libraries' own mappings.

The figures are taken between stages, not at a stage's peak (``bench_pack.py`` samples
those); they say what is held, and by which allocator, when a stage starts. Slow stages
are unchanged: nothing is traced.
"""

from __future__ import annotations

# the tool's process settings (numpy's huge-page advice, OpenBLAS's idle threads; see
# reporter/__init__.py), made before numpy is first imported, as in a build
import reporter  # noqa: F401  # isort: skip

import contextlib
import ctypes
import os
import re
import sys
import tempfile
from pathlib import Path

MB = 1e6


class _MallInfo2(ctypes.Structure):
    _fields_ = [(n, ctypes.c_size_t) for n in (
        "arena", "ordblks", "smblks", "hblks", "hblkhd", "usmblks", "fsmblks", "uordblks",
        "fordblks", "keepcost")]


def _mallinfo2():
    try:
        libc = ctypes.CDLL("libc.so.6")
        fn = libc.mallinfo2
    except (OSError, AttributeError):
        return None
    fn.restype = _MallInfo2
    return fn()


def resident() -> dict[str, int]:
    """Resident bytes by kind of mapping: ``file``, ``heap`` (``[heap]``), ``anon``."""
    out = {"file": 0, "heap": 0, "anon": 0}
    kind = "anon"
    with open("/proc/self/smaps", encoding="ascii", errors="replace") as fh:
        for line in fh:
            parts = line.split()
            if parts and "-" in parts[0] and not parts[0].endswith(":"):
                name = parts[5] if len(parts) > 5 else ""
                kind = "file" if name.startswith("/") else ("heap" if name == "[heap]" else
                                                            "anon")
            elif parts and parts[0] == "Rss:":
                out[kind] += int(parts[1]) * 1024
    return out


def python_arenas() -> tuple[int, int]:
    """(bytes of Python's object arenas, bytes in use in them) from ``sys._debugmallocstats``,
    which writes to the C stderr: read through a pipe."""
    read, write = os.pipe()
    saved = os.dup(2)
    try:
        os.dup2(write, 2)
        sys._debugmallocstats()
    finally:
        os.dup2(saved, 2)
        os.close(saved)
        os.close(write)
    chunks = []
    while data := os.read(read, 1 << 16):
        chunks.append(data)
    os.close(read)
    text = b"".join(chunks).decode("ascii", "replace")
    arenas = re.search(r"(\d+) arenas \* (\d+) bytes/arena", text.replace(",", ""))
    used = re.search(r"# bytes in allocated blocks\s*=\s*([\d,]+)", text)
    return ((int(arenas[1]) * int(arenas[2]) if arenas else 0),
            (int(used[1].replace(",", "")) if used else 0))


def account(tag: str) -> str:
    import pyarrow as pa

    res = resident()
    total = sum(res.values())
    mi = _mallinfo2()
    arenas, in_use = python_arenas()
    mapped = mi.hblkhd if mi else 0
    # the anonymous memory that is not glibc's own mappings or Python's arenas
    other = res["anon"] - mapped - arenas
    heap = (f"[heap] {res['heap'] / MB:4.0f}, malloc in use {mi.uordblks / MB:4.0f} free "
            f"{mi.fordblks / MB:3.0f}" if mi else f"[heap] {res['heap'] / MB:4.0f}")
    return (f"{tag:16s} RSS {total / MB:4.0f} | files {res['file'] / MB:4.0f} | {heap} | "
            f"own maps {mapped / MB:3.0f} | python {arenas / MB:4.0f} (in use "
            f"{in_use / MB:4.0f}) | pyarrow {pa.total_allocated_bytes() / MB:3.0f} | "
            f"other anon {other / MB:4.0f}")


def main(argv: list[str] | None = None) -> int:
    args = sys.argv[1:] if argv is None else argv
    if len(args) != 1 or not Path(args[0]).is_dir():
        print("usage: memory_accounts.py PACK_FOLDER", file=sys.stderr)
        return 2
    from reporter.build import assemble, finish_build
    from reporter.config import load_settings
    from reporter.progress import Progress

    progress = Progress(quiet=True)
    plain = progress.stage

    @contextlib.contextmanager
    def stage(name, part=None):
        print(account(f"start {name}"), flush=True)
        with plain(name, part):
            yield
        print(account(f"end {name}"), flush=True)

    progress.stage = stage
    print(account("imported"), flush=True)
    with tempfile.TemporaryDirectory() as out:
        a = assemble(load_settings(Path(args[0])), progress=progress)
        finish_build(a, Path(out) / "pack", progress, release=True)
        print(account("built"), flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
