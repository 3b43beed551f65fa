"""A careless or hostile experiment file gets one line on stderr and exit code 2, never a traceback or a hang.

Each case is run as `stepmeter check FILE` through `runner.cli.main` (in process, for speed); the cases that
could cost time or memory also run through a real subprocess limited to 1 GB of address space.
"""

from __future__ import annotations

import os
import resource
import signal
import subprocess
import sys
from dataclasses import dataclass, field
from pathlib import Path

import pytest

from runner.cli import main

_REPO = Path(__file__).resolve().parents[1]
_GUARD_SECONDS = 5
_MEMORY_LIMIT = 1 << 30

_HEAD = "experiment: hostile\nseeds: 2\nreal_steps: 1000\n"
_ENV = "environments:\n  - grid: {map: S.G}\n"
_AGENT = "agents:\n  - {label: q, kind: q_learning}\n"
_OK = _HEAD + _ENV + _AGENT


def _env(body: str) -> str:
    """An experiment whose only environment is `body` (indented under a list item)."""
    return _HEAD + "environments:\n  - " + body + "\n" + _AGENT


def _agent(body: str) -> str:
    """An experiment whose only agent is `body`."""
    return _HEAD + _ENV + "agents:\n  - " + body + "\n"


def _laughs(levels: int = 9) -> str:
    lines = ['a0: &a0 ["lol", "lol", "lol", "lol", "lol", "lol", "lol", "lol", "lol"]']
    for i in range(1, levels):
        lines.append(f"a{i}: &a{i} [" + ", ".join([f"*a{i - 1}"] * 9) + "]")
    return "\n".join(lines) + "\n"


_VALUES_1000 = ", ".join(str(round(0.0005 + i * 0.000999, 7)) for i in range(1000))
_INTS_1000 = ", ".join(str(i) for i in range(1000))


@dataclass(frozen=True)
class Hostile:
    """A malformed or hostile experiment file and a fragment its one-line error must contain."""

    id: str
    content: str | bytes
    fragment: str
    files: dict[str, str] = field(default_factory=dict)  # modules written beside the file and put on sys.path
    heavy: bool = False  # also run in a subprocess under a 1 GB address-space limit


CASES = [
    # the file itself
    Hostile("empty-file", "", "(top level): expected a mapping of experiment keys"),
    Hostile("only-a-comment", "# nothing here\n", "got nothing"),
    Hostile("top-level-list", "- experiment: x\n", "costs), got a list"),
    Hostile("top-level-scalar", "just text\n", "costs), got 'just text'"),
    Hostile("binary-garbage", bytes(range(256)) * 8, "not valid YAML"),
    Hostile("invalid-utf8", b"experiment: caf\xe9\n", ":1: not valid YAML: expected UTF-8 text, got byte 0xe9"),
    Hostile("nul-character", "experiment: x\n\x00\n", ":2: not valid YAML: unacceptable character #x0000"),
    Hostile("tab-indentation", "experiment: x\nanalysis:\n\tresamples: 100\n", ":3: not valid YAML"),
    Hostile("unclosed-bracket", "experiment: x\nseeds: [1, 2\nreal_steps: 3\n", ":3: not valid YAML"),
    Hostile("unclosed-quote", 'experiment: "x\nseeds: 2\n', "not valid YAML"),
    Hostile(
        "two-documents",
        _OK + "---\n" + _OK,
        "not valid YAML: expected a single document in the stream, but found another document",
    ),
    Hostile("huge-file", "description: " + "x" * (1 << 20) + "\n", "larger than 1024 KiB"),
    Hostile("complex-key", "? [a, b]\n: 1\n", "expected a plain key"),
    Hostile("duplicate-top-key", _OK + "seeds: 3\n", ":8: seeds: key given twice"),
    Hostile(
        "duplicate-nested-key",
        _agent("{label: q, kind: q_learning, params: {alpha: 0.1, alpha: 0.2}}"),
        "agents[0].params.alpha: key given twice",
    ),
    Hostile("python-object-tag", _OK + "description: !!python/object/apply:os.system [ls]\n", "python/object"),
    Hostile("python-name-tag", _OK + "description: !!python/name:os.system\n", "python/name"),
    Hostile("local-tag", _OK + "description: !mine {a: 1}\n", "'!mine'"),
    Hostile("binary-tag-description", _OK + "description: !!binary aGVsbG8=\n", "description: expected text"),
    # aliases, anchors, merge keys and nesting
    Hostile("alias-bomb", _laughs() + _OK, "aliases expand to more than 100000 values", heavy=True),
    Hostile(
        "alias-bomb-as-a-parameter",
        _HEAD + _ENV + _laughs() + "agents:\n  - {kind: q_learning, params: {alpha: *a8}}\n",
        "aliases expand to more than 100000 values",
        heavy=True,
    ),
    Hostile("recursive-alias-list", "a: &a [1, *a]\n", "a recursive alias"),
    Hostile("recursive-alias-mapping", "a: &a {b: *a}\n", "a recursive alias"),
    Hostile("recursive-merge", "a: &a {<<: *a, b: 1}\n", "a recursive alias"),
    Hostile("undefined-alias", "experiment: *nowhere\n", "found undefined alias 'nowhere'"),
    Hostile("duplicate-anchor", "a: &x 1\nb: &x 2\n", ":2: not valid YAML: found duplicate anchor 'x'"),
    Hostile("merge-of-a-scalar", "experiment: x\n<<: 3\n", "a merge key '<<' expects a mapping"),
    Hostile(
        "merged-value-out-of-range",
        _HEAD + _ENV + "defaults: &d {alpha: 1.5}\nagents:\n  - kind: q_learning\n    params: {<<: *d}\n",
        "defaults: unknown key",
    ),
    Hostile(
        "merge-into-agent-bad-value",
        _HEAD + _ENV + "agents:\n  - &first {kind: q_learning, params: {alpha: 1.5}}\n  - {<<: *first, label: again}\n",
        "agents[0].params.alpha: expected a number in (0, 1], got 1.5",
    ),
    Hostile("deep-flow-nesting", "x: " + "[" * 20000 + "]" * 20000 + "\n", "nested deeper than 64", heavy=True),
    Hostile(
        "deep-block-nesting",
        "".join(f"{'  ' * i}k{i}:\n" for i in range(200)) + "  " * 200 + "end: 1\n",
        "nested deeper than 64",
    ),
    Hostile(
        "deep-nesting-through-aliases",
        "a0: &a0 "
        + "[" * 60
        + "1"
        + "]" * 60
        + "\n"
        + "".join(f"a{i}: &a{i} " + "[" * 30 + f"*a{i - 1}" + "]" * 30 + "\n" for i in range(1, 40)),
        "aliases nest deeper than 64",
    ),
    # seeds
    Hostile("seed-at-2-63", _OK.replace("seeds: 2", f"seeds: [1, {2**63}]"), "seeds[1]: expected a seed below 2**63"),
    Hostile(
        "seeds-a-billion", _OK.replace("seeds: 2", "seeds: 1000000000"), "expected at most 1,000,000 seeds", heavy=True
    ),
    Hostile("seeds-huge-count", _OK.replace("seeds: 2", f"seeds: {10**40}"), "expected at most 1,000,000 seeds"),
    Hostile("seeds-negative-count", _OK.replace("seeds: 2", "seeds: -1"), "expected a count >= 1"),
    Hostile("seeds-fraction", _OK.replace("seeds: 2", "seeds: 1.5"), "expected a count >= 1 or a non-empty list"),
    Hostile("seeds-yes", _OK.replace("seeds: 2", "seeds: yes"), "got true"),
    Hostile("seeds-empty-list", _OK.replace("seeds: 2", "seeds: []"), "got an empty list"),
    Hostile("seeds-text", _OK.replace("seeds: 2", "seeds: ten"), "got 'ten'"),
    Hostile("seeds-repeated", _OK.replace("seeds: 2", "seeds: [4, 5, 4]"), "got 4 more than once"),
    Hostile("seeds-nested-list", _OK.replace("seeds: 2", "seeds: [[1]]"), "seeds[0]: expected a whole number >= 0"),
    # budgets, caps and evaluation
    Hostile("real-steps-1e30", _OK.replace("real_steps: 1000", f"real_steps: {10**30}"), "at most 1,000,000,000,000"),
    Hostile("real-steps-zero", _OK.replace("real_steps: 1000", "real_steps: 0"), "expected a whole number >= 1"),
    Hostile("real-steps-negative", _OK.replace("real_steps: 1000", "real_steps: -5"), "got -5"),
    Hostile("real-steps-nan", _OK.replace("real_steps: 1000", "real_steps: .nan"), "got nan"),
    Hostile("real-steps-float", _OK.replace("real_steps: 1000", "real_steps: 1.0e+6"), "got 1000000.0"),
    Hostile("real-steps-date", _OK.replace("real_steps: 1000", "real_steps: 2001-12-14"), "datetime.date"),
    Hostile(
        "too-many-evaluation-points",
        _OK.replace("real_steps: 1000", "real_steps: 1000000000\nevaluation: {every: 1}"),
        "at most 100,000 evaluation points per trial",
    ),
    Hostile("episodes-a-billion", _OK + "evaluation: {episodes: 1000000000}\n", "at most 100,000"),
    Hostile("step-cap-huge", _OK + f"evaluation: {{step_cap: {10**12}}}\n", "at most 1,000,000,000"),
    Hostile("step-limit-huge", _env(f"{{grid: {{map: S.G}}, step_limit: {10**12}}}"), "step_limit: expected"),
    Hostile("window-negative", _OK + "evaluation: {training_window: -3}\n", "training_window: expected"),
    Hostile("evaluation-a-list", _OK + "evaluation: [1, 2]\n", "evaluation: expected a mapping, got a list"),
    Hostile("resamples-a-billion", _OK + "analysis: {resamples: 1000000000}\n", "analysis.resamples"),
    Hostile("confidence-one", _OK + "analysis: {confidence: 1.0}\n", "analysis.confidence"),
    Hostile("consecutive-huge", _OK + f"analysis: {{consecutive: {10**20}}}\n", "analysis.consecutive"),
    Hostile(
        "too-many-trials",
        _OK.replace("seeds: 2", "seeds: 600000").replace(
            _AGENT, "agents:\n  - {kind: dyna_q, params: {planning_steps: [1, 2]}}\n"
        ),
        "expected at most 1,000,000 trials, got 1,200,000",
        heavy=True,
    ),
    Hostile(
        "too-many-metric-rows",
        _OK.replace("seeds: 2", "seeds: 1000").replace("real_steps: 1000", "real_steps: 99999\nevaluation: {every: 1}"),
        "expected at most 50,000,000 metric rows",
    ),
    # thresholds and rewards
    Hostile("threshold-nan", _env("{grid: {map: S.G}, threshold: .nan}"), "threshold: expected a finite number"),
    Hostile("threshold-inf", _env("{grid: {map: S.G}, threshold: .inf}"), "threshold: expected a finite number"),
    Hostile("threshold-minus-inf", _env("{grid: {map: S.G}, threshold: -.inf}"), "got -inf"),
    Hostile("threshold-text", _env("{grid: {map: S.G}, threshold: high}"), "got 'high'"),
    Hostile("threshold-1e300", _env("{grid: {map: S.G}, threshold: 1.0e+300}"), "threshold: expected"),
    Hostile("slip-nan", _env("{grid: {map: S.G, slip: .nan}}"), "grid.slip: expected a number in [0, 1]"),
    Hostile("step-reward-1e300", _env("{grid: {map: S.G, step_reward: 1.0e+300}}"), "grid.step_reward"),
    # agents and parameters
    Hostile(
        "alpha-nan", _agent("{kind: q_learning, params: {alpha: .nan}}"), "params.alpha: expected a number in (0, 1]"
    ),
    Hostile("planning-steps-1e15", _agent(f"{{kind: dyna_q, params: {{planning_steps: {10**15}}}}}"), "at most 1e+09"),
    Hostile("initial-q-1e300", _agent("{kind: q_learning, params: {initial_q: 1.0e+300}}"), "at most 1e+12"),
    Hostile(
        "replay-buffer-a-billion",
        _agent("{kind: replay_q_learning, params: {buffer_size: 1000000000}}"),
        "expected a whole number in [1, 10000000], got 1000000000",
    ),
    Hostile("unknown-param", _agent("{kind: dyna_q, params: {planing_steps: 5}}"), "did you mean 'planning_steps'?"),
    Hostile("unknown-agent-key", _agent("{kind: dyna_q, parms: {}}"), "did you mean 'params'?"),
    Hostile("agent-kind-number", _agent("{kind: 7}"), "expected an agent kind such as 'dyna_q', got 7"),
    Hostile("agent-kind-typo", _agent("{kind: dynaq}"), "did you mean 'dyna_q'"),
    Hostile("agent-label-empty", _agent("{kind: q_learning, label: ''}"), "expected a non-empty text label"),
    Hostile("agents-a-string", _HEAD + _ENV + "agents: q_learning\n", "expected a non-empty list of agents"),
    Hostile(
        "thousand-by-thousand",
        _agent(f"{{kind: dyna_q, params: {{planning_steps: [{_INTS_1000}], alpha: [{_VALUES_1000}]}}}}"),
        "expected at most 10,000 agent variants in all, these lists make 1,000,000 (1000 x 1000)",
        heavy=True,
    ),
    Hostile("repeated-values", _agent("{kind: dyna_q, params: {planning_steps: [1, 2, 1]}}"), "a repeated value"),
    Hostile(
        "repeated-agent",
        _HEAD + _ENV + "agents:\n  - {label: a, kind: sarsa}\n  - {label: b, kind: sarsa}\n",
        "repeats 'a'",
    ),
    Hostile("agent-os-system", _agent("{kind: 'os:system'}"), "names a builtin_function_or_method, not a class"),
    Hostile("agent-json-dumps", _agent("{kind: 'json:dumps'}"), "names a function, not a class"),
    Hostile("agent-missing-module", _agent("{kind: 'no_such_module_here:Agent'}"), "cannot import module"),
    Hostile(
        "agent-module-raises-on-import",
        _agent("{kind: 'hostile_raising_module:Agent'}"),
        "importing module 'hostile_raising_module' of entry point 'hostile_raising_module:Agent' failed: "
        "ZeroDivisionError: division by zero",
        files={"hostile_raising_module.py": "1 / 0\n"},
    ),
    Hostile(
        "agent-module-exits-on-import",
        _agent("{kind: 'hostile_exiting_module:Agent'}"),
        "failed: SystemExit: 3",
        files={"hostile_exiting_module.py": "import sys\nsys.exit(3)\n"},
    ),
    # environments
    Hostile("environments-a-mapping", _HEAD + "environments: {grid: {map: S.G}}\n" + _AGENT, "got a mapping"),
    Hostile("unknown-env-key", _env("{grid: {map: S.G}, treshold: 1}"), "did you mean 'threshold'?"),
    Hostile("unknown-grid-key", _env("{grid: {map: S.G, slipp: 0.1}}"), "did you mean 'slip'?"),
    Hostile("env-label-list", _env("{grid: {map: S.G}, label: [a]}"), "expected a non-empty text label, got a list"),
    Hostile("map-not-text", _env("{grid: {map: 42}}"), "expected the map as text"),
    Hostile("map-unknown-cell", _env("{grid: {map: 'S?G'}}"), "unknown cell '?'"),
    Hostile("map-empty", _env("{grid: {map: ''}}"), "grid.map"),
    Hostile("change-after-budget", _env("{grid: {map: S.G, changes: [{at: 5000, map: S.G}]}}"), "below real_steps"),
    Hostile(
        "too-many-environments", _HEAD + "environments:\n" + "  - grid: {map: S.G}\n" * 1001 + _AGENT, "at most 1,000"
    ),
    Hostile(
        "options-date", _env("{gym: FrozenLake-v1, options: {map_name: 2001-12-14}}"), "options.map_name: expected text"
    ),
    Hostile("options-nan", _env("{gym: FrozenLake-v1, options: {is_slippery: .nan}}"), "options.is_slippery: expected"),
    Hostile("options-huge-int", _env(f"{{gym: FrozenLake-v1, options: {{x: {2**70}}}}}"), "fits 64 bits"),
    Hostile(
        "gym-option-bad-value",
        _env("{gym: FrozenLake-v1, options: {map_name: nope}}"),
        "environments[0].options.map_name: FrozenLake-v1 does not accept 'nope' here (KeyError: 'nope')",
    ),
    Hostile("gym-option-unknown", _env("{gym: FrozenLake-v1, options: {map_nam: 4x4}}"), "map_nam"),
    Hostile("gym-id-module-prefix", _env("{gym: 'no_such_module_here:Env-v0'}"), "environments[0].gym"),
    Hostile(
        "entry-os-system", _env("{entry: 'os:system', options: {command: 'true'}}"), "not a subclass of gymnasium.Env"
    ),
    Hostile("entry-builtins-dict", _env("{entry: 'builtins:dict'}"), "names a class, not a subclass of gymnasium.Env"),
    Hostile("entry-no-colon", _env("{entry: os.system}"), "expected 'package.module:Class'"),
    Hostile("two-sources", _env("{grid: {map: S.G}, gym: FrozenLake-v1}"), "got gym and grid"),
    # bins over box observations, and own agents
    Hostile("bins-nan", _env("{gym: MountainCar-v0, bins: {counts: 2, low: .nan, high: 1}}"), "bins.low[0]"),
    Hostile("bins-inf-count", _env("{gym: MountainCar-v0, bins: {counts: [.inf, 2]}}"), "bins.counts[0]"),
    Hostile("bins-a-list", _env("{gym: MountainCar-v0, bins: [1, 2]}"), "bins: expected a mapping"),
    Hostile(
        "bins-ten-to-the-eight-cells",
        _env("{gym: MountainCar-v0, bins: {counts: [10000, 10000]}}"),
        "expected at most 1,000,000 bins in all, these make 100,000,000",
    ),
    Hostile("bins-on-a-grid", _env("{grid: {map: S.G}, bins: {counts: 2}}"), "flat box observations to bin"),
    Hostile("agent-not-an-agent-class", _agent("{kind: 'collections:OrderedDict'}"), "lacks setup, act, observe"),
    Hostile(
        "tabular-agent-on-boxes",
        _HEAD + "environments:\n  - gym: CartPole-v1\n" + _AGENT,
        "agents[0].kind: agent kind 'q_learning' takes discrete observations",
    ),
    # the costs block
    Hostile("cost-price-nan", _OK + "costs: {unit: euros, real_step: .nan, cpu_second: 0.01}\n", "costs.real_step"),
    Hostile("cost-price-negative", _OK + "costs: {unit: euros, real_step: -1, cpu_second: 0.01}\n", "costs.real_step"),
    Hostile("costs-a-list", _OK + "costs: [1, 2]\n", "costs"),
    # names, text and the rest
    Hostile(
        "name-with-slash", _OK.replace("experiment: hostile", "experiment: ../../etc"), "experiment: expected a name"
    ),
    Hostile("name-5000-chars", _OK.replace("experiment: hostile", "experiment: " + "n" * 5000), "expected a name"),
    Hostile("description-mapping", _OK + "description: {a: 1}\n", "description: expected text, got a mapping"),
    Hostile("baseline-missing", _OK + "baseline: qq\n", "did you mean 'q'?"),
    Hostile("unknown-top-key", _OK + "agent: x\n", "did you mean 'agents'?"),
]


def _write(tmp_path: Path, case: Hostile) -> Path:
    for name, text in case.files.items():
        (tmp_path / name).write_text(text, encoding="utf-8")
    path = tmp_path / "hostile.yaml"
    if isinstance(case.content, bytes):
        path.write_bytes(case.content)
    else:
        path.write_text(case.content, encoding="utf-8")
    return path


class _Hang(Exception):
    pass


def _alarm(signum, frame):
    raise _Hang(f"took longer than {_GUARD_SECONDS} s")


def test_there_are_at_least_sixty_distinct_cases():
    assert len(CASES) >= 60
    assert len({case.id for case in CASES}) == len(CASES)


@pytest.mark.parametrize("case", CASES, ids=lambda c: c.id)
def test_check_gives_one_line_and_exit_2(tmp_path, monkeypatch, capsys, case):
    path = _write(tmp_path, case)
    if case.files:
        monkeypatch.syspath_prepend(str(tmp_path))
    previous = signal.signal(signal.SIGALRM, _alarm)
    signal.alarm(_GUARD_SECONDS)  # a guard against hangs, not a speed measurement
    try:
        code = main(["check", str(path)])
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)
    out, err = capsys.readouterr()
    assert code == 2, out + err
    lines = err.splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith(f"stepmeter: error: {path}"), lines[0]
    assert case.fragment in lines[0], lines[0]
    assert "Traceback" not in err and out == ""


def _limit_memory() -> None:
    resource.setrlimit(resource.RLIMIT_AS, (_MEMORY_LIMIT, _MEMORY_LIMIT))


@pytest.mark.parametrize("case", [c for c in CASES if c.heavy], ids=lambda c: c.id)
def test_heavy_cases_in_a_subprocess_under_one_gigabyte(tmp_path, case):
    path = _write(tmp_path, case)
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(_REPO), env.get("PYTHONPATH", "")) if p)
    result = subprocess.run(
        [sys.executable, "-m", "runner", "check", str(path)],
        env=env,
        capture_output=True,
        text=True,
        timeout=60,  # start-up takes seconds on a loaded machine; this only stops a hang
        preexec_fn=_limit_memory,
    )
    assert result.returncode == 2, result.stderr
    lines = result.stderr.splitlines()
    assert len(lines) == 1 and case.fragment in lines[0], result.stderr
    assert "Traceback" not in result.stderr and "MemoryError" not in result.stderr
