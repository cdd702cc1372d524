"""The installed version of lensdelay (from the package metadata)."""

from importlib.metadata import PackageNotFoundError, version as _version

__all__: list[str] = []


try:
    __version__ = _version("lensdelay")
except PackageNotFoundError:  # running from a source tree without installing
    __version__ = "0.0.0+unknown"
