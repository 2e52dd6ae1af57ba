"""The error a user can act on: which model, which file, what is wrong, what to do."""
from __future__ import annotations

from sensemble.contract.errors import SensembleError


class ArchiveError(SensembleError):
    """Bad input in the archive, reported in one line (model → file → problem → what to do).

    Examples
    --------
    >>> str(ArchiveError("units 'W' are not a flux", path="rlut.nc", model="ALPHA-1", hint="fix the units attribute"))
    "model ALPHA-1: file rlut.nc: units 'W' are not a flux — fix the units attribute"
    """


class OutputInUseError(SensembleError, RuntimeError):
    """The output folder is locked by another running extraction; ``str(error)`` is one line saying what to do."""
