"""balloonpath: flight, landing-zone and recovery forecasts for sounding balloons."""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("balloonpath")
except PackageNotFoundError:  # running from a source tree without installation
    __version__ = "0.0.0+local"

__all__ = ["__version__"]
