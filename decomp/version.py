"""decomp's version: the installed package's, or ``0+unknown`` in a checkout that is not installed."""

from importlib import metadata as _metadata

try:
    __version__ = _metadata.version("decomp")
except _metadata.PackageNotFoundError:      # running from a checkout that is not installed
    __version__ = "0+unknown"
