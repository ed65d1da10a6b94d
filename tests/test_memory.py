"""Memory a build has finished with goes back to the system (reporter.memory)."""

from __future__ import annotations

import subprocess
import sys

import pytest

CODE = """
import ctypes, ctypes.util, sys
import numpy as np
from reporter.memory import M_MMAP_THRESHOLD, return_large_blocks

def rss():
    with open("/proc/self/statm") as fh:
        return int(fh.read().split()[1]) * 4096

# the state an analysis leaves glibc in: freeing mapped blocks has raised its threshold
# towards its 32 MiB ceiling (set here outright, so the test does not depend on how far
# this process' own history has raised it)
libc = ctypes.CDLL(ctypes.util.find_library("c"))
assert libc.mallopt(M_MMAP_THRESHOLD, 32 * 2**20) == 1
if sys.argv[1] == "fixed":
    return_large_blocks()
base = rss()
blocks = [np.ones(20 * 2**20 // 8) for _ in range(5)]     # 5 x 20 MiB, each touched
kept = blocks.pop()                  # the last stays; the four below it are freed
del blocks
print((rss() - base) / 2**20)
"""


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc's malloc")
def test_freed_blocks_are_handed_back_with_a_fixed_threshold():
    def held(mode):
        out = subprocess.run([sys.executable, "-c", CODE, mode], capture_output=True,
                             text=True, check=True)
        return float(out.stdout.split()[-1])

    # a raised threshold: the four freed 20 MiB blocks stay in the heap below the kept one
    assert held("default") > 70
    # with return_large_blocks each was mapped on its own and went back when freed
    assert held("fixed") < 30



REUSE = """
import numpy as np
from reporter.memory import heap_reuse, return_large_blocks

def rss():
    with open("/proc/self/statm") as fh:
        return int(fh.read().split()[1]) * 4096 / 2**20

return_large_blocks()              # as a build starts
n = 20 * 2**20 // 8                # 20 MiB blocks, each touched in full
base = rss()
with heap_reuse():
    a = np.ones(n)
    del a                          # freed: kept in the heap, its pages resident
    held_inside = rss() - base
    b = np.ones(n)                 # served from the freed block's pages: no new memory
    grown = rss() - base - held_inside
    del b
after = rss() - base               # handed back at the block's end
c = np.ones(n)                     # the build's setting is back: a mapping of its own
del c
print(held_inside, grown, after, rss() - base)
"""


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc's malloc")
def test_heap_reuse_keeps_freed_blocks_for_the_next_and_hands_them_back_after():
    out = subprocess.run([sys.executable, "-c", REUSE], capture_output=True, text=True,
                         check=True)
    held_inside, grown, after, end = map(float, out.stdout.split())
    assert held_inside > 15             # a freed 20 MiB block stays resident in the block
    assert grown < 5                    # and the next request of its size takes its pages
    assert after < 5                    # handed back when the block ended
    assert end < 5                      # afterwards a freed block goes back at once
