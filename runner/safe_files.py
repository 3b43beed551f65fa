"""Writes that stay inside an experiment's folder: no symbolic link is ever followed, and files appear whole.

A results folder can be edited by anyone who can write it. A symbolic link planted there (as `run.lock`,
`experiment.sqlite`, `report/` or a figure's name) would make stepmeter truncate or overwrite a file elsewhere,
so every write goes through this module: paths are checked component by component below the experiment folder,
files are opened with `O_NOFOLLOW`, and new content is written under a hidden temporary name in the target's
own folder and renamed into place (a rename replaces a link itself, never what it points to).
"""

from __future__ import annotations

import os
import threading
from collections.abc import Callable
from pathlib import Path
from typing import BinaryIO

from runner.errors import StoreError

__all__ = ["TEMP_SUFFIX", "check_no_links", "ensure_folder", "open_no_follow", "remove_leftovers", "write_atomic"]

TEMP_SUFFIX = ".tmp"
"""Temporary files are named `.<target name>.<process>.<thread>.tmp`, beside their target."""

_NO_FOLLOW = getattr(os, "O_NOFOLLOW", 0)
_CLOEXEC = getattr(os, "O_CLOEXEC", 0)


def _refuse(path: Path) -> StoreError:
    return StoreError(f"refusing to write through a symbolic link: {path}")


def check_no_links(path: str | Path, below: str | Path | None = None) -> None:
    """Refuse `path` when it, or any folder between `below` (exclusive) and it, is a symbolic link.

    Without `below` only `path` itself is checked. Missing components are fine (they will be created).
    """
    path = Path(path)
    chain = [path]
    if below is not None:
        base = Path(below)
        try:
            parts = path.relative_to(base).parts
        except ValueError:
            parts = ()
        chain = [base.joinpath(*parts[: i + 1]) for i in range(len(parts))] or [path]
    for component in chain:
        if component.is_symlink():
            raise _refuse(component)


def ensure_folder(folder: str | Path, below: str | Path | None = None) -> Path:
    """Create `folder` (and its parents) unless a link or a file stands in the way; one clear line if one does."""
    folder = Path(folder)
    check_no_links(folder, below)
    if folder.exists() and not folder.is_dir():
        raise StoreError(f"{folder}: expected a folder but found a file; move it away and run again")
    folder.mkdir(parents=True, exist_ok=True)
    check_no_links(folder, below)
    return folder


def open_no_follow(path: str | Path, flags: int, mode: int = 0o644) -> int:
    """os.open with O_NOFOLLOW: a symbolic link at `path` is refused with one line instead of followed."""
    try:
        return os.open(path, flags | _NO_FOLLOW | _CLOEXEC, mode)
    except OSError as err:
        if Path(path).is_symlink():
            raise _refuse(Path(path)) from None
        raise err


def write_atomic(path: str | Path, write: Callable[[BinaryIO], None], below: str | Path | None = None) -> Path:
    """Let `write` fill a hidden temporary file beside `path`, then rename it over `path`; return `path`.

    Readers never see half a file, a killed writer leaves only a temporary file (`remove_leftovers` clears it),
    and a symbolic link at `path` or on the folders below `below` is refused rather than followed.
    """
    path = Path(path)
    check_no_links(path, below)
    temp = path.with_name(f".{path.name}.{os.getpid()}.{threading.get_ident()}{TEMP_SUFFIX}")
    fd = open_no_follow(temp, os.O_WRONLY | os.O_CREAT | os.O_EXCL)
    try:
        with os.fdopen(fd, "wb") as stream:
            write(stream)
        check_no_links(path, below)
        os.replace(temp, path)
    except BaseException:
        temp.unlink(missing_ok=True)
        raise
    return path


def _writer_alive(temp_name: str) -> bool:
    """Whether the process named in a temporary file's name still runs (then its file is not a leftover)."""
    parts = temp_name.removesuffix(TEMP_SUFFIX).rsplit(".", 2)
    if len(parts) != 3 or not parts[1].isdigit():
        return False
    try:
        os.kill(int(parts[1]), 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        pass
    return True


def remove_leftovers(folder: str | Path) -> int:
    """Delete the hidden temporary files that killed writers left in `folder`; return how many.

    Files of writers that still run (another report being written at the same time) are left alone.
    """
    folder = Path(folder)
    if not folder.is_dir() or folder.is_symlink():
        return 0
    removed = 0
    for leftover in folder.glob(f".*{TEMP_SUFFIX}"):
        if (leftover.is_file() or leftover.is_symlink()) and not _writer_alive(leftover.name):
            leftover.unlink(missing_ok=True)
            removed += 1
    return removed
