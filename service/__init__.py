"""berth: where a machine-learning training campaign should run, and what it will cost."""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("berth")
except PackageNotFoundError:  # running from a source tree that was never installed
    __version__ = "0.0.0"

__all__ = ["__version__"]
