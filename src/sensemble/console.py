"""What the `sensemble` command says: one line per message on the terminal, every message timestamped in the
output folder's `sensemble.log` (library warnings included, also with `--quiet`), and dask progress as a plain line
every few seconds where a bar cannot be redrawn."""
from __future__ import annotations

import logging
import sys
import time
import traceback
from pathlib import Path

LOG_NAME = "sensemble.log"
# seconds between two progress lines when the terminal cannot redraw a bar (a pipe, a CI log, the log file)
PROGRESS_EVERY_S = 10.0


class Console:
    """Where a command's messages go: the terminal unless quiet, and the output folder's log file.

    Messages said before the output folder is known are kept and written, with the time they were
    said, as soon as `open_log` is called. Failures go to stderr even when quiet.
    """

    def __init__(self, quiet: bool = False):
        self.quiet = quiet
        self.log_path: Path | None = None
        self._logger = logging.getLogger("sensemble.cli")
        self._logger.propagate = False
        self._logger.setLevel(logging.INFO)
        self._handler: logging.Handler | None = None
        self._pending: list[logging.LogRecord] = []

    def __call__(self, message: str) -> None:
        self.info(message)

    def info(self, message: str, terminal: bool = True) -> None:
        if terminal and not self.quiet:
            print(message, flush=True)
        self._record(logging.INFO, message)

    def error(self, message: str) -> None:
        print(message, file=sys.stderr, flush=True)
        self._record(logging.ERROR, message)

    def _record(self, level: int, message: str) -> None:
        for line in str(message).splitlines() or [""]:
            record = self._logger.makeRecord(self._logger.name, level, __file__, 0, line, None, None)
            if self._handler is None:
                self._pending.append(record)
            else:
                self._logger.handle(record)

    def open_log(self, folder: Path, header: str) -> Path:
        """Start appending to `folder/sensemble.log` (created with the folder); earlier messages follow the header."""
        if self._handler is not None:
            return self.log_path
        folder.mkdir(parents=True, exist_ok=True)
        self.log_path = folder / LOG_NAME
        handler = logging.FileHandler(self.log_path, mode="a", encoding="utf-8")
        formatter = logging.Formatter("%(asctime)s.%(msecs)03dZ %(levelname)-7s %(message)s", "%Y-%m-%dT%H:%M:%S")
        formatter.converter = time.gmtime
        handler.setFormatter(formatter)
        self._handler = handler
        self._logger.addHandler(handler)
        # warnings of the libraries underneath (xarray, dask, scikit-learn) belong in the log as well
        logging.captureWarnings(True)
        logging.getLogger("py.warnings").addHandler(handler)
        self._logger.handle(self._logger.makeRecord(self._logger.name, logging.INFO, __file__, 0, header, None, None))
        for record in self._pending:
            self._logger.handle(record)
        self._pending.clear()
        return self.log_path

    def exception(self, message: str) -> None:
        """A one-line error on stderr; the traceback goes to the log file only."""
        self.error(message)
        if self._handler is not None:
            self._record(logging.ERROR, traceback.format_exc().rstrip())

    def close(self) -> None:
        if self._handler is not None:
            self._logger.removeHandler(self._handler)
            logging.getLogger("py.warnings").removeHandler(self._handler)
            logging.captureWarnings(False)
            self._handler.close()
            self._handler = None


class _CoarseProgress:
    """Progress of a dask computation as a plain line every `every` seconds (for pipes, CI logs and the log file).

    dask's `ProgressBar` redraws one line with carriage returns: right on a terminal, a flood anywhere else.
    This callback reports done/total tasks at most every `every` seconds on the local schedulers
    (a distributed cluster does not call local callbacks; its progress is left to the terminal bar).
    """

    def __init__(self, console: Console, terminal: bool, every: float = PROGRESS_EVERY_S):
        from dask.callbacks import Callback

        self.console, self.terminal, self.every = console, terminal, every
        self._started = self._last = 0.0
        self.callback = Callback(start=self._start, posttask=self._posttask, finish=self._finish)

    def _start(self, dsk) -> None:
        self._started = self._last = time.monotonic()

    def _posttask(self, key, result, dsk, state, worker_id) -> None:
        now = time.monotonic()
        if now - self._last < self.every:
            return
        self._last = now
        done = len(state["finished"])
        total = done + sum(len(state[k]) for k in ("ready", "waiting", "running"))
        self.console.info(f"  reading and reducing: {done}/{total} tasks ({100 * done / max(total, 1):.0f} %), "
                          f"{now - self._started:.0f} s", terminal=self.terminal)

    def _finish(self, dsk, state, errored) -> None:
        if time.monotonic() - self._started >= self.every:
            self.console.info(f"  reading and reducing: {'stopped by an error' if errored else 'done'} after "
                              f"{time.monotonic() - self._started:.0f} s", terminal=self.terminal)
