"""Give memory that a build has finished with back to the system, between stages."""

from __future__ import annotations

import contextlib
import ctypes
import ctypes.util
import functools
from collections.abc import Iterator

import pyarrow as pa


def release_free_memory() -> None:
    """Hand back to the system memory that is free but still held by this process: pyarrow's
    pool keeps freed blocks for reuse (after reading a 5M-row CSV, some 250 MB), and glibc's
    malloc keeps freed heap pages (numpy arrays up to its adaptive mmap threshold, at most
    32 MiB, such as one 2,000 x 2,000 matrix, come from the heap). Call between stages, once
    large temporaries are gone; where malloc is not glibc's, only pyarrow's pool is released."""
    pa.default_memory_pool().release_unused()
    trim = _malloc_trim()
    if trim is not None:
        trim(0)


# glibc's mallopt parameters: the size from which a block is mapped on its own, and the free
# memory at the heap's top beyond which free() hands it back (glibc's default: 128 KiB)
M_MMAP_THRESHOLD = -3
M_TRIM_THRESHOLD = -1
LARGE_BLOCK = 16 << 20
DEFAULT_TRIM = 128 << 10
HEAP_REUSE_LIMIT = 256 << 20


def return_large_blocks(threshold: int = LARGE_BLOCK) -> None:
    """Have glibc's malloc map every block of ``threshold`` bytes or more on its own, so that
    freeing it hands it straight back to the system. By default glibc raises that threshold
    each time such a block is freed, up to 32 MiB, and from then on keeps blocks below it
    (a 2,000 x 2,000 matrix, a block of 200 holdings' history) in a heap that can only shrink
    from its top: memory an analysis has finished with stays held while the PDF renders and
    asks for more. A fixed threshold ends that. Measured on the Large benchmark (2,000 daily
    holdings), three builds each: peak RSS 817-840 MB before, 746-792 MB with it.

    The threshold is 16 MiB, not lower: the whole matrices (a T x N history, an N x N
    estimate: 32 MB and more at 2,000 holdings) are mapped and handed back, while the
    block-sized temporaries that the estimators make and free in their loops (8 MB: a
    million elements) are reused from the heap. With a 1 MiB threshold each of those was
    a fresh mapping, and faulted in again every time. Large builds, alternating: 357,000
    minor faults in the analysis against 464,000-467,000, the stage 1.86-2.11 s against
    2.20-2.47 s (three each, a noisy hour), peak RSS 634-640 MB against 643-646 MB (five
    and three builds). The heap's free middle goes back with :func:`release_free_memory`
    before the PDF. Call once a build starts; does nothing where malloc is not glibc's."""
    fn = _libc_function("mallopt")
    if fn is not None:
        fn(M_MMAP_THRESHOLD, int(threshold))


@contextlib.contextmanager
def heap_reuse(limit: int = HEAP_REUSE_LIMIT) -> Iterator[None]:
    """Within this block, glibc's malloc serves blocks of up to ``limit`` bytes from its heap
    and keeps what is freed there for the next request; at its end the build's settings
    (:func:`return_large_blocks`) come back and the free memory is handed back
    (:func:`release_free_memory`).

    For the analysis, which makes and frees dozens of T x N and N x N temporaries (40 MB and
    32 MB each at 2,000 daily holdings): mapped on their own, each was a fresh mapping whose
    every page the kernel faulted in and zeroed, and freeing it unmapped it again. Large
    benchmark workload, analyse stage in a build, two runs each: 266,000 minor faults, 0.35 s
    of system time and 1.09-1.10 s without; 79,000, 0.12 s and 0.85-0.86 s with it. Its peak
    RSS rose from 620-622 MB to 631 MB, below the PDF stage's. Blocks over ``limit`` (an
    N x N estimate at 10,000 holdings: 800 MB) are still mapped on their own, so that no
    freed one is held while the next is made. Does nothing where malloc is not glibc's.
    The settings are the process's: two analyses on threads of one process share them, and
    the first to end restores the build's for both (only their speed is touched)."""
    fn = _libc_function("mallopt")
    if fn is None:
        yield
        return
    fn(M_MMAP_THRESHOLD, int(limit))
    fn(M_TRIM_THRESHOLD, int(limit))
    try:
        yield
    finally:
        fn(M_MMAP_THRESHOLD, LARGE_BLOCK)
        fn(M_TRIM_THRESHOLD, DEFAULT_TRIM)
        release_free_memory()


def _malloc_trim():
    return _libc_function("malloc_trim")


@functools.cache
def _libc_function(symbol: str):
    name = ctypes.util.find_library("c")
    return getattr(ctypes.CDLL(name), symbol, None) if name else None
