"""Agents are told about truncation as well as termination: a step cut by the time limit arrives with
truncated=True and terminated=False, so an agent can bootstrap from it."""

from typing import ClassVar

from runner.params import Param
from runner.tags import AgentTags
from runner.trial import run_trial
from runner.trial_spec import TrialSpec


class Recorder:
    """Always walks west (the line walk never ends that way) and records the flags of every step."""

    schema = (Param("unused", "int", 0, "nothing", low=0),)
    tags = AgentTags(observations=("box",), compiled=False)
    seen: ClassVar[list] = []

    def __init__(self, **params):
        self.params = params

    def setup(self, observation_space, action_space, rng):
        Recorder.seen = []

    def act(self, obs):
        return 0

    def greedy_action(self, obs):
        return 0

    def observe(self, obs, action, reward, next_obs, terminated, truncated):
        Recorder.seen.append((terminated, truncated))

    def counters(self):
        return {"real_updates": len(Recorder.seen)}


def test_time_limit_steps_arrive_truncated_not_terminated():
    env = {"source": "entry", "entry": "runner.envs.line:LineWalk", "options": {}, "step_limit": 3}
    spec = TrialSpec.build(
        env, "test_truncation:Recorder", {"unused": 0}, 0, 9, every=9, episodes=1, step_cap=3, training_window=1
    )
    result = run_trial(spec.as_dict())
    assert Recorder.seen == [(False, False), (False, False), (False, True)] * 3
    assert result.episode_lengths.tolist() == [3, 3, 3]
    assert result.rows["real_updates"].tolist() == [0, 9]
