"""floeheat: upper-ocean heat budgets under drifting sea ice.

The package holds the science (small pure functions on xarray/numpy objects),
the archive reader layer (:mod:`floeheat.io`), the demo synthesizer
(:mod:`floeheat.synth`) and the I/O adapters the workflow calls
(:mod:`floeheat.steps`). It never imports Snakemake.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("floeheat")
except PackageNotFoundError:  # pragma: no cover - running from a source tree
    __version__ = "0.0.0+unknown"

#: The input archive format version this release reads and writes.
ARCHIVE_FORMAT_VERSION = 1
#: The output contract version this release writes.
OUTPUT_FORMAT_VERSION = 1

__all__ = ["__version__", "ARCHIVE_FORMAT_VERSION", "OUTPUT_FORMAT_VERSION"]
