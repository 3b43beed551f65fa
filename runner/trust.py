"""What a stored trial spec may make stepmeter import: only stepmeter's own modules and gymnasium's registered
ids, unless the user says they trust the results folder.

A results folder is data. Its specs can be edited by anyone who can write the folder, so a command that rebuilds
trials from stored specs (rerun, show, compare, resume) checks each spec first: it must still hash to its trial id,
and code it names outside stepmeter (a user's agent kind or environment class, a gymnasium id with a module
prefix) is imported only when the command was given `TRUST_FLAG`.
"""

from __future__ import annotations

from typing import Any

from runner.errors import StoreError, UntrustedCodeError

__all__ = ["TRUST_FLAG", "check_stored_spec", "code_named_by"]

TRUST_FLAG = "--trust-code"


def _own_module(entry: str) -> bool:
    module = entry.split(":", 1)[0]
    return module == "runner" or module.startswith("runner.")


def code_named_by(spec: dict[str, Any]) -> list[str]:
    """Entry points outside stepmeter that building this trial would import, in the order they appear."""
    named = []
    env = spec.get("env") or {}
    if env.get("source") == "entry" and not _own_module(str(env.get("entry", ""))):
        named.append(str(env.get("entry")))
    if env.get("source") == "gym" and ":" in str(env.get("id", "")):
        named.append(str(env.get("id")))
    kind = str((spec.get("agent") or {}).get("kind", ""))
    if ":" in kind and not _own_module(kind):
        named.append(kind)
    return named


def check_stored_spec(stored_id: str, spec: dict[str, Any], *, trust_code: bool, where: str) -> None:
    """Refuse a stored spec that no longer hashes to its id, or that names outside code without trust."""
    from runner.plan import trial_id  # imported here so the command line can name TRUST_FLAG cheaply

    if trial_id(spec) != stored_id:
        raise StoreError(
            f"{where}: trial {stored_id}: its stored spec does not hash to its id (the store was edited); "
            "refusing to run it"
        )
    named = code_named_by(spec)
    if named and not trust_code:
        raise UntrustedCodeError(
            f"{where}: trial {stored_id} names code outside stepmeter ({', '.join(named)}); "
            f"pass {TRUST_FLAG} only if you trust whoever wrote this results folder"
        )
