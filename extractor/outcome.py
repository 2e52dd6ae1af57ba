"""What a batch hands back: the failures it recorded and the result of the whole extraction."""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path


@dataclass
class Failure:
    """One recorded failure: a run (``what`` = its experiment id), a whole model (``"model"``) or the archive."""

    model: str
    member: str
    what: str  # experiment id, "model" or "archive"
    message: str
    files: list[str] = field(default_factory=list)


@dataclass
class ExtractionResult:
    """The outcome of `extract`: the table's rows, what failed, what was reused, what was read."""

    out_dir: Path
    rows: list[dict]
    failures: list[Failure]
    problems: list[str]
    cached: list[str]
    computed: list[str]
    seconds: float
    files_read: int = 0
    bytes_read: int = 0
    notes: list[str] = field(default_factory=list)  # e.g. a stale lock taken over

    @property
    def ok(self) -> bool:
        return not self.failures
