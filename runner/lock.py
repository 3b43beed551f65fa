"""One writer per experiment: a lock file held with an OS-level lock for as long as a run writes to the store.

The kernel releases the lock when its process dies, however it dies, so a lock file left by a killed run is
recognised as stale (it can be locked again) and cleared. The lock file is opened without following symbolic
links, and the writer checks before each write that the file it holds is still the one at `run.lock`
(`check_held`): a lock deleted or replaced mid-run would otherwise let a second writer in.
"""

from __future__ import annotations

import fcntl
import os
import socket
from datetime import UTC, datetime
from pathlib import Path

from runner.errors import ExperimentBusyError, StoreError
from runner.safe_files import ensure_folder, open_no_follow

__all__ = ["LOCK_NAME", "ExperimentLock"]

LOCK_NAME = "run.lock"


class ExperimentLock:
    """Hold `results/<experiment>/run.lock`; `stale_owner` says whose lock was cleared, if any."""

    def __init__(self, folder: str | Path) -> None:
        self.path = Path(folder) / LOCK_NAME
        self.stale_owner: str | None = None
        self._handle = None

    def acquire(self) -> ExperimentLock:
        """Take the lock or raise ExperimentBusyError naming the process that holds it."""
        ensure_folder(self.path.parent)
        try:
            fd = open_no_follow(self.path, os.O_RDWR | os.O_CREAT)
        except IsADirectoryError:
            raise StoreError(
                f"{self.path}: expected the experiment's lock file but found a folder; move it away and run again"
            ) from None
        handle = os.fdopen(fd, "r+", encoding="utf-8")
        try:
            fcntl.flock(handle.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            handle.seek(0)
            owner = handle.read().strip() or "an unknown process"
            handle.close()
            raise ExperimentBusyError(
                f"{self.path.parent}: another stepmeter run is writing this experiment ({owner}); "
                "wait for it to finish or stop it, then run again"
            ) from None
        handle.seek(0)
        previous = handle.read().strip()
        self.stale_owner = previous or None
        handle.seek(0)
        handle.truncate()
        started = datetime.now(UTC).isoformat(timespec="seconds")
        handle.write(f"process {os.getpid()} on {socket.gethostname()}, started {started}")
        handle.flush()
        self._handle = handle
        return self

    def check_held(self) -> None:
        """Stop the run with one line when `run.lock` was removed or replaced since this run took it."""
        if self._handle is None:
            return
        held = os.fstat(self._handle.fileno())
        try:
            now = os.lstat(self.path)
        except FileNotFoundError:
            now = None
        if now is None or (now.st_ino, now.st_dev) != (held.st_ino, held.st_dev):
            raise StoreError(
                f"{self.path}: the lock file was removed or replaced while this run was writing; stopped so that "
                "two runs never write the same experiment (finished trials are stored: run the same command again)"
            )

    def release(self) -> None:
        """Clear and unlock the lock file."""
        if self._handle is None:
            return
        self._handle.seek(0)
        self._handle.truncate()
        self._handle.flush()
        fcntl.flock(self._handle.fileno(), fcntl.LOCK_UN)
        self._handle.close()
        self._handle = None

    def __enter__(self) -> ExperimentLock:
        return self.acquire()

    def __exit__(self, *exc: object) -> None:
        self.release()
