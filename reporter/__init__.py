"""Committee-pack reporter: static HTML and PDF packs for investment committees."""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("committee-pack-reporter")
except PackageNotFoundError:  # running from a source tree without an install
    __version__ = "0.0.0+source"
