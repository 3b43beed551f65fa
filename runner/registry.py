"""A small lazy registry: names map to "package.module:Class" entry points, imported on first use."""

from __future__ import annotations

import difflib
import importlib
import os
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from runner.errors import UnknownKindError

__all__ = ["ENTRY_FOLDERS_VARIABLE", "Registry", "add_entry_folder", "import_entry_point"]

ENTRY_FOLDERS_VARIABLE = "STEPMETER_ENTRY_FOLDERS"
"""Folders (os.pathsep-separated) searched for an entry point's module that the import path does not reach: the
experiment file's folder, so a module beside it imports without PYTHONPATH. An environment variable, so worker
processes started afterwards search the same folders."""


def add_entry_folder(folder: str | Path) -> None:
    """Search `folder` for entry-point modules that cannot be imported otherwise (here and in later workers)."""
    folder = str(Path(folder).resolve())
    known = [f for f in os.environ.get(ENTRY_FOLDERS_VARIABLE, "").split(os.pathsep) if f]
    if folder not in known:
        os.environ[ENTRY_FOLDERS_VARIABLE] = os.pathsep.join([*known, folder])


def _import_module(module_name: str) -> Any:
    """Import a module; when its top-level package is not on the import path, look in the entry folders, which
    are on the path only while this import runs."""
    try:
        return importlib.import_module(module_name)
    except ModuleNotFoundError as err:
        top = module_name.partition(".")[0]
        folders = [f for f in os.environ.get(ENTRY_FOLDERS_VARIABLE, "").split(os.pathsep) if f]
        if err.name != top or not folders:
            raise
    added = [f for f in folders if f not in sys.path]
    sys.path[:0] = added
    try:
        return importlib.import_module(module_name)
    finally:
        for folder in added:
            sys.path.remove(folder)


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def import_entry_point(entry_point: str, base: type | tuple[type, ...] | None = None, what: str = "") -> Any:
    """Import "package.module:Name" and return the object; raise UnknownKindError when it is not there.

    With `base` (a class or a tuple of classes), the object must be a class derived from it (checked before
    anything is called), so an entry point can never name a function such as `os:system`. Any error raised while
    importing the module becomes one line.
    """
    module_name, sep, attr = entry_point.partition(":")
    if not sep or not module_name or not attr:
        raise UnknownKindError(f"expected an entry point of the form 'package.module:Class', got {entry_point!r}")
    try:
        module = _import_module(module_name)
    except ImportError as err:
        raise UnknownKindError(f"cannot import module {module_name!r} of entry point {entry_point!r}: {err}") from None
    except (Exception, SystemExit) as err:  # a user's module may raise anything while it is imported
        raise UnknownKindError(
            f"importing module {module_name!r} of entry point {entry_point!r} failed: "
            f"{type(err).__name__}: {_one_line(err)}"
        ) from None
    try:
        found = getattr(module, attr)
    except AttributeError:
        raise UnknownKindError(f"module {module_name!r} has no {attr!r} (entry point {entry_point!r})") from None
    if base is not None and not (isinstance(found, type) and issubclass(found, base)):
        shown = "a class" if isinstance(found, type) else f"a {type(found).__name__}"
        bases = base if isinstance(base, tuple) else (base,)
        wanted = what or " or ".join(f"{b.__module__}.{b.__qualname__}" for b in bases)
        raise UnknownKindError(f"entry point {entry_point!r} names {shown}, not a subclass of {wanted}")
    return found


@dataclass
class Registry:
    """Named entry points of one kind of thing (agent kinds, environment sources); `base` is the class (or tuple of
    classes) every entry must derive from."""

    what: str
    entries: dict[str, str]
    base: type | tuple[type, ...] | None = None
    base_name: str = ""

    def names(self) -> list[str]:
        """Registered names, sorted."""
        return sorted(self.entries)

    def load(self, name: str) -> Any:
        """The object registered under name; names with a colon are imported as entry points directly."""
        if ":" in name:
            return import_entry_point(name, self.base, self.base_name)
        if name not in self.entries:
            raise UnknownKindError(self.unknown_message(name))
        return import_entry_point(self.entries[name], self.base, self.base_name)

    def unknown_message(self, name: str) -> str:
        """'unknown agent kind 'dyna'; did you mean 'dyna_q'?' with the list of known names."""
        close = difflib.get_close_matches(name, self.names(), n=3, cutoff=0.5)
        hint = f"; did you mean {' or '.join(repr(c) for c in close)}?" if close else ""
        return (
            f"unknown {self.what} {name!r}{hint} (known: {', '.join(self.names())}; "
            "or give a 'package.module:Class' entry point; `stepmeter list` shows them all)"
        )
