"""The one error base class: bad input reported in one line, model → file → problem → what to do.

Both stages' errors derive from `SensembleError`, so every message a user reads has the same order, and a batch
can keep the pieces (model, file, hint) of a failure it records and goes past.
"""
from __future__ import annotations

from os import PathLike


class SensembleError(Exception):
    """Bad input, reported in one line.

    ``str(error)`` reads ``"model M member R EXP: file F: problem — what to do"``; the parts that are unknown
    are left out. The pieces stay available as attributes.

    Parameters
    ----------
    message : str
        What is wrong.
    path : path-like, optional
        The file concerned (or several, already joined by the caller).
    model : str, optional
        The model (``source_id``) concerned; ``member`` and ``experiment_id`` may be added.
    hint : str, optional
        What the user can do about it.

    Examples
    --------
    >>> str(SensembleError("units 'W' are not a flux", path="rlut.nc", model="ALPHA-1", hint="fix the units"))
    "model ALPHA-1: file rlut.nc: units 'W' are not a flux — fix the units"
    >>> str(SensembleError("no scenario runs", path="out/series"))
    'file out/series: no scenario runs'
    """

    def __init__(
        self,
        message: str,
        path: str | PathLike | None = None,
        model: str | None = None,
        hint: str | None = None,
        member: str | None = None,
        experiment_id: str | None = None,
    ):
        self.message = message
        self.path = None if path is None else str(path)
        self.model = model
        self.hint = hint
        self.member = member
        self.experiment_id = experiment_id
        super().__init__(str(self))

    def __str__(self) -> str:
        parts = []
        if self.model:
            who = f"model {self.model}"
            if self.member:
                who += f" member {self.member}"
            if self.experiment_id:
                who += f" {self.experiment_id}"
            parts.append(who)
        if self.path:
            parts.append(f"file {self.path}")
        parts.append(str(self.message))
        text = ": ".join(parts)
        if self.hint:
            text += f" — {self.hint}"
        # one line, whatever the pieces held
        return " ".join(text.split())

    def __reduce__(self):
        # keep the pieces when the error travels between dask worker processes
        return (_rebuild, (type(self), self.message, self.path, self.model, self.hint, self.member,
                           self.experiment_id))


def _rebuild(cls, message, path, model, hint, member, experiment_id):
    return cls(message, path=path, model=model, hint=hint, member=member, experiment_id=experiment_id)
