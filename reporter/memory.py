"""Give memory that a build has finished with back to the system, between stages."""

from __future__ import annotations

import ctypes
import ctypes.util
import functools

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


@functools.cache
def _malloc_trim():
    name = ctypes.util.find_library("c")
    return getattr(ctypes.CDLL(name), "malloc_trim", None) if name else None
