"""Committee-pack reporter: static HTML and PDF packs for investment committees."""

import os
from importlib.metadata import PackageNotFoundError, version

# numpy asks the kernel for transparent huge pages on every large array. Where the kernel
# defragments memory synchronously for such requests (transparent_hugepage/defrag =
# "madvise", the setting on the development machine), large fresh arrays can stall in the
# kernel: a build of 2,000 daily holdings spent 15-21 s in system time with it and 10-12 s
# without (wall 37-44 s against 29-33 s, two runs each). numpy reads this variable once, when
# it is first imported, so it is set here, before the tool imports numpy, and only when the
# user has not set it.
os.environ.setdefault("NUMPY_MADVISE_HUGEPAGE", "0")

# numpy and scipy each link their own OpenBLAS, and each keeps its idle threads spinning for a
# while after a call (2^28 cycles by default). A scipy LAPACK call right after numpy's
# products (the analysis does several: the GRS triangular inverse, the Schur complement's
# triangular solve) then shares two cores with numpy's still-spinning threads: on the Large
# benchmark workload the GRS test's triangular inverse took 0.12 s in the analysis against
# 0.02 s alone. OPENBLAS_THREAD_TIMEOUT (OpenBLAS's documented runtime variable; 4 is its
# least, 2^4 cycles) makes idle threads sleep at once. The analysis stage went from 1.29-1.33 s
# to 1.13-1.17 s (three runs each, benchmarks/profile_analytics.py); numpy's own products did
# not slow. Read when OpenBLAS loads, so set here, before numpy; a user's setting stands.
os.environ.setdefault("OPENBLAS_THREAD_TIMEOUT", "4")

try:
    __version__ = version("committee-pack-reporter")
except PackageNotFoundError:  # running from a source tree without an install
    __version__ = "0.0.0+source"
