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

try:
    __version__ = version("committee-pack-reporter")
except PackageNotFoundError:  # running from a source tree without an install
    __version__ = "0.0.0+source"
