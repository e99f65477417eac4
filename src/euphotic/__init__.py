"""euphotic: ocean net primary production from gridded chlorophyll, light and temperature."""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("euphotic")
except PackageNotFoundError:  # running from a source tree that was not installed
    __version__ = "0+unknown"

from euphotic import geo, models  # noqa: E402

__all__ = ["__version__", "geo", "models"]
