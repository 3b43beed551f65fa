"""`run --start-over`: delete an experiment's stored trials only when the user agreed to lose them."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

from runner.errors import ConfigError
from runner.store import DB_NAME, Store
from runner.wording import count

__all__ = ["confirm_start_over"]


def _stored_trials(folder: Path) -> int:
    """Trials stored in `folder` (0 when there is no store yet)."""
    if not (folder / DB_NAME).exists():
        return 0
    with Store(folder) as store:
        return int(store.query("SELECT count(*) FROM trials")[0][0])


def confirm_start_over(folder: Path, *, assume_yes: bool, ask: Callable[[str], bool] | None) -> None:
    """Return when the stored trials may be deleted; else raise one line saying nothing was deleted.

    Nothing stored, or `assume_yes` (the `--yes` flag), needs no question; `ask` is None when there is no
    terminal to answer on, and then the command refuses rather than delete without consent.
    """
    stored = _stored_trials(folder)
    if stored == 0 or assume_yes:
        return
    what = f"{folder}: --start-over would delete {count(stored, 'stored trial')} and their report"
    if ask is None:
        raise ConfigError(f"{what}; nothing deleted (no terminal to ask on: add --yes to delete them)")
    if not ask(f"{what}; delete them?"):
        raise ConfigError(f"{what}; not deleted, nothing run (the stored trials are kept)")
