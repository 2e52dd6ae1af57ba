"""The emulator's one-line error: model → file → problem → what to do (the contract's message order)."""
from __future__ import annotations

from sensemble.contract.errors import SensembleError


class EmulatorInputError(SensembleError, ValueError):
    """Bad input to the emulator (a missing scenario, an unreadable file, an unusable setting).

    ``str(error)`` reads ``"model M: file F: problem — hint"``; unknown parts are left out.
    """
