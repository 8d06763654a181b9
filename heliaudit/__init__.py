"""heliaudit: field-data performance monitoring for PV plants and fleets."""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("heliaudit")
except PackageNotFoundError:  # running from a source tree without install
    __version__ = "0.0.0+source"
