"""The installed nullray's version, read once from the package metadata, and the versions
of what it runs on (recorded in every still's metadata)."""

import platform
import sys
from importlib import metadata

__all__ = ["__version__", "software_versions"]

try:
    __version__ = metadata.version("nullray")
except metadata.PackageNotFoundError:   # run from a source tree that was never installed
    __version__ = "0+unknown"


def software_versions():
    """{name: version} of nullray, numpy, numba, Python and the platform a result was made with.

    Examples
    --------
    >>> sorted(software_versions())
    ['nullray', 'numba', 'numpy', 'platform', 'python']
    """
    import numba
    import numpy

    return {"nullray": __version__, "numpy": numpy.__version__, "numba": numba.__version__,
            "python": sys.version.split()[0], "platform": platform.platform()}
