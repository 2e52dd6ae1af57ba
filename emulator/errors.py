"""The emulator's one-line error: which file, which model, what is wrong, what to do."""
from __future__ import annotations


class EmulatorInputError(ValueError):
    """Bad input to the emulator (a missing scenario, an unreadable file, an unusable setting).

    ``str(error)`` reads ``"file F: model M: problem — hint"``; unknown parts are left out.
    """

    def __init__(self, message: str, *, path=None, model: str | None = None, hint: str | None = None):
        self.message, self.path, self.model, self.hint = message, path, model, hint
        parts = []
        if path is not None:
            parts.append(f"file {path}")
        if model:
            parts.append(f"model {model}")
        parts.append(message)
        text = ": ".join(parts)
        super().__init__(f"{text} — {hint}" if hint else text)
