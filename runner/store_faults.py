"""Store and file-system faults as one line each: what happened, and what the user can do about it.

A full disk, a read-only folder, a damaged database or an unreadable stored value reach the command line as
SQLite, OS or JSON errors from deep inside a run or a report. `describe_fault` turns each into one sentence; the
command line prints it and exits 2. Nothing stored is lost by stopping: a trial is written in one transaction.
"""

from __future__ import annotations

import errno
import json
import os
import sqlite3
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from runner.errors import StoreError

__all__ = ["FAULTS", "describe_fault", "faults_as_store_errors"]

FAULTS = (sqlite3.Error, OSError, json.JSONDecodeError)
"""The exception types `describe_fault` explains (BrokenPipeError, an OSError, is left to the command line)."""

_KEPT = "trials stored before this are kept"


def _where(err: BaseException, folder: Path | None) -> str:
    name = getattr(err, "filename", None)
    if name:
        return str(name)
    return str(folder) if folder is not None else "the results folder"


def _os_line(err: OSError, where: str) -> str:
    code = err.errno
    if code == errno.ENOSPC or code == errno.EDQUOT:
        return f"{where}: no space left on the disk; free some space and run the same command again ({_KEPT})"
    if code in (errno.EACCES, errno.EPERM):
        return f"{where}: permission denied; make the folder writable by you (or choose another --results folder)"
    if code == errno.EROFS:
        return f"{where}: the file system is read-only; copy the results folder to a writable place and run there"
    if code == errno.EISDIR:
        return f"{where}: expected a file but found a folder; move the folder away and run again"
    if code == errno.ENOTDIR:
        return f"{where}: expected a folder but found a file on the way; move the file away and run again"
    if code == errno.ENAMETOOLONG:
        return f"{where}: a file name is too long for this file system"
    if code == errno.ELOOP:
        return f"refusing to follow a symbolic link: {where}"
    return f"{where}: {err.strerror or err}"


def _read_only(folder: Path) -> bool:
    """Whether `folder` lies on a file system mounted read-only."""
    try:
        return bool(os.statvfs(folder).f_flag & os.ST_RDONLY)
    except OSError:
        return False


def _sqlite_line(err: sqlite3.Error, folder: Path | None) -> str:
    where = str(folder / "experiment.sqlite") if folder is not None else "the experiment's database"
    text = str(err)
    lowered = text.lower()
    if "disk is full" in lowered:
        return f"{where}: no space left on the disk; free some space and run the same command again ({_KEPT})"
    if "readonly" in lowered or "read-only" in lowered:
        return f"{where}: cannot write (read-only file or folder); make it writable by you and run again"
    if "malformed" in lowered or "not a database" in lowered or "file is encrypted" in lowered:
        return (
            f"{where}: the database is damaged ({text}); restore it from a backup, or run the experiment with "
            "--start-over to run it afresh"
        )
    if "no such table" in lowered or "no such column" in lowered:
        return (
            f"{where}: part of the database is missing ({text}); run the experiment again to re-run what is "
            "missing, or with --start-over to run it afresh"
        )
    if "locked" in lowered or "busy" in lowered:
        return f"{where}: the database is busy in another program ({text}); close it and run again"
    if "unable to open" in lowered:
        if folder is not None and _read_only(folder):
            return f"{where}: the file system is read-only; copy the results folder to a writable place and run there"
        return f"{where}: cannot open the database ({text}); check that the folder exists and is writable by you"
    return f"{where}: database error ({text}); run again, or with --start-over to run the experiment afresh"


def describe_fault(err: BaseException, folder: str | Path | None = None) -> str:
    """One line for a store or file-system fault, naming the file and what to do next."""
    base = Path(folder) if folder is not None else None
    if isinstance(err, json.JSONDecodeError):
        where = str(base / "experiment.sqlite") if base is not None else "the experiment's database"
        return (
            f"{where}: a stored value is not valid JSON ({err.msg} at position {err.pos}); the store was edited "
            "or damaged: run the experiment with --start-over to run it afresh"
        )
    if isinstance(err, sqlite3.Error):
        return _sqlite_line(err, base)
    if isinstance(err, OSError):
        return _os_line(err, _where(err, base))
    return str(err)


@contextmanager
def faults_as_store_errors(folder: str | Path | None) -> Iterator[None]:
    """Turn store and file-system faults raised inside into a StoreError of one line about `folder`."""
    try:
        yield
    except BrokenPipeError:
        raise
    except FAULTS as err:
        raise StoreError(describe_fault(err, folder)) from None
