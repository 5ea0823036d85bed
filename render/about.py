"""The installed nullray's version, read once from the package metadata."""

from importlib import metadata

__all__ = ["__version__"]

try:
    __version__ = metadata.version("nullray")
except metadata.PackageNotFoundError:   # run from a source tree that was never installed
    __version__ = "0+unknown"
