"""A small lazy registry: names map to "package.module:Object" entry points, imported on first use."""

from __future__ import annotations

import difflib
import importlib
from dataclasses import dataclass
from typing import Any

from runner.errors import UnknownKindError

__all__ = ["Registry", "import_entry_point"]


def import_entry_point(entry_point: str) -> Any:
    """Import "package.module:Object" and return the object; raise UnknownKindError when it is not there."""
    module_name, sep, attr = entry_point.partition(":")
    if not sep or not module_name or not attr:
        raise UnknownKindError(f"expected an entry point of the form 'package.module:Name', got {entry_point!r}")
    try:
        module = importlib.import_module(module_name)
    except ImportError as err:
        raise UnknownKindError(f"cannot import module {module_name!r} of entry point {entry_point!r}: {err}") from None
    try:
        return getattr(module, attr)
    except AttributeError:
        raise UnknownKindError(f"module {module_name!r} has no {attr!r} (entry point {entry_point!r})") from None


@dataclass
class Registry:
    """Named entry points of one kind of thing (agent kinds, environment sources)."""

    what: str
    entries: dict[str, str]

    def names(self) -> list[str]:
        """Registered names, sorted."""
        return sorted(self.entries)

    def load(self, name: str) -> Any:
        """The object registered under name; names with a colon are imported as entry points directly."""
        if ":" in name:
            return import_entry_point(name)
        if name not in self.entries:
            raise UnknownKindError(self.unknown_message(name))
        return import_entry_point(self.entries[name])

    def unknown_message(self, name: str) -> str:
        """'unknown agent kind 'dyna'; did you mean 'dyna_q'?' with the list of known names."""
        close = difflib.get_close_matches(name, self.names(), n=3, cutoff=0.5)
        hint = f"; did you mean {' or '.join(repr(c) for c in close)}?" if close else ""
        return (
            f"unknown {self.what} {name!r}{hint} (known: {', '.join(self.names())}; "
            "or give a 'package.module:Class' entry point; `stepmeter list` shows them all)"
        )
