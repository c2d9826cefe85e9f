"""catalog: a catalyst screening results database with ranking reports."""

from importlib.metadata import PackageNotFoundError, version

try:
    # The one source of the version is pyproject.toml; the installed metadata carries it.
    __version__ = version("catalog")
except PackageNotFoundError:  # a source tree run without installing: say so rather than guess a number
    __version__ = "0+unknown"
