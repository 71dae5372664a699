"""taprig daemon: acquisition, checks, spectra, session, store and service."""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("taprig")
except PackageNotFoundError:  # running from a source tree that was never installed
    __version__ = "0+unknown"
