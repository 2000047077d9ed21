"""Package version, read from the installed metadata when available."""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("profshape")
except PackageNotFoundError:  # pragma: no cover - running from a source tree
    __version__ = "0.1.0"
