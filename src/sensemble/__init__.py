"""sensemble: climate sensitivity from model ensembles, and warming pathways emulated for sensitivities no model has."""
from importlib.metadata import PackageNotFoundError, version as _version

try:
    __version__ = _version("sensemble")
except PackageNotFoundError:  # a source tree that was never installed
    __version__ = "0+unknown"
