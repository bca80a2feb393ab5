"""qadapt: offline Q-learning fine-tuning for small state-based control tasks, on the CPU.

Holds:
    __version__ -- the installed package version.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("qadapt")
except PackageNotFoundError:  # running from a source tree that was never installed
    __version__ = "0.0.0+unknown"

__all__ = ["__version__"]
