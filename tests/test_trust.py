"""Stored specs are data: a spec that no longer hashes to its id, or that names outside code, is refused."""

import pytest

from runner.errors import StoreError, UntrustedCodeError
from runner.plan import trial_id
from runner.trust import TRUST_FLAG, check_stored_spec, code_named_by

GRID = {"source": "grid", "map": "S.G", "step_limit": 10}


def _spec(env, kind="q_learning"):
    return {"format": 1, "env": env, "agent": {"kind": kind, "params": {}}, "seed": 0, "real_steps": 10}


def test_built_in_sources_and_kinds_name_no_outside_code():
    assert code_named_by(_spec(GRID)) == []
    assert code_named_by(_spec({"source": "gym", "id": "FrozenLake-v1"})) == []
    assert code_named_by(_spec({"source": "entry", "entry": "runner.envs.takeaway:TakeAwayGame"})) == []


def test_outside_entry_points_kinds_and_module_prefixed_gym_ids_are_named():
    spec = _spec({"source": "entry", "entry": "os:system"}, kind="mine.agents:Agent")
    assert code_named_by(spec) == ["os:system", "mine.agents:Agent"]
    assert code_named_by(_spec({"source": "gym", "id": "evil_module:Env-v0"})) == ["evil_module:Env-v0"]


def test_untrusted_outside_code_is_refused_and_the_message_names_the_flag():
    spec = _spec({"source": "entry", "entry": "os:system", "options": {"command": "true"}})
    with pytest.raises(UntrustedCodeError, match=TRUST_FLAG):
        check_stored_spec(trial_id(spec), spec, trust_code=False, where="results/x")
    check_stored_spec(trial_id(spec), spec, trust_code=True, where="results/x")


def test_a_spec_edited_after_it_was_stored_is_refused_even_when_trusted():
    spec = _spec(GRID)
    stored_id = trial_id(spec)
    edited = _spec({**GRID, "map": "S#G"})
    with pytest.raises(StoreError, match="does not hash to its id"):
        check_stored_spec(stored_id, edited, trust_code=True, where="results/x")
