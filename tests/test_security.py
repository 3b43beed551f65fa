"""Experiment files and stored results never run code by themselves, and no name or id can reach outside results/."""

import ast
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from runner.config import load_experiment
from runner.errors import ConfigError, StoreError
from runner.rerun import select_trials
from runner.run import RunOptions, run_experiment
from runner.store import experiment_dir

_REPO = Path(__file__).resolve().parents[1]

_EXPERIMENT = """\
experiment: {name}
description: {description}
seeds: 1
real_steps: 200
evaluation: {{every: 100, episodes: 1}}
environments:
  - label: hall
    grid:
      map: |
        S..
        .#G
    step_limit: 20
agents:
  - label: q
    kind: q_learning
    params:
      alpha: {alpha}
"""


def _write(tmp_path: Path, name: str = "safe", description: str = "plain", alpha: str = "0.1") -> Path:
    path = tmp_path / "experiment.yaml"
    path.write_text(_EXPERIMENT.format(name=name, description=description, alpha=alpha), encoding="utf-8")
    return path


def _cli(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(_REPO), env.get("PYTHONPATH", "")) if p)
    return subprocess.run(
        [sys.executable, "-m", "runner", *args], cwd=cwd, env=env, capture_output=True, text=True, timeout=120
    )


# Each would create the marker file if the YAML were loaded with a loader that builds Python objects.
_MAKERS = [
    '!!python/object/apply:os.system ["touch {marker}"]',
    '!!python/object/apply:subprocess.check_call [["touch", "{marker}"]]',
    "!!python/object/apply:builtins.exec [\"open('{marker}', 'w').close()\"]",
    '!!python/object/new:subprocess.Popen [["touch", "{marker}"]]',
]
_BUILDERS = ["!!python/name:os.system", "!!python/module:os", "!!python/object:argparse.Namespace {{a: 1}}"]


@pytest.mark.parametrize("field", ["description", "alpha"])
@pytest.mark.parametrize("tag", _MAKERS + _BUILDERS)
def test_python_object_tags_are_rejected_and_run_nothing(tmp_path, tag, field):
    marker = tmp_path / "hacked"
    value = tag.format(marker=marker)
    path = _write(tmp_path, **{field: value})
    with pytest.raises(ConfigError) as rejected:
        load_experiment(path)
    message = str(rejected.value)
    line = 2 if field == "description" else 17
    assert message.startswith(f"{path}:{line}: not valid YAML: "), message
    assert "python/" in message and "\n" not in message  # the tag itself was refused, not a syntax slip
    assert not marker.exists()
    with pytest.raises(ConfigError):
        run_experiment(path, results_root=tmp_path / "results", options=RunOptions(jobs=1))
    assert not marker.exists()
    assert not (tmp_path / "results").exists()


def test_the_command_line_rejects_an_object_tag_in_one_line_and_runs_nothing(tmp_path):
    marker = tmp_path / "hacked"
    _write(tmp_path, description=_MAKERS[0].format(marker=marker))
    for command in (("check", "experiment.yaml"), ("run", "experiment.yaml", "--results", "results", "--jobs", "1")):
        result = _cli(*command, cwd=tmp_path)
        assert result.returncode == 2, result.stderr
        lines = result.stderr.splitlines()
        assert len(lines) == 1 and lines[0].startswith("stepmeter: error: experiment.yaml:2: not valid YAML: ")
        assert "Traceback" not in result.stderr
    assert not marker.exists()
    assert not (tmp_path / "results").exists()


@pytest.mark.parametrize("name", ["..", ".", "../evil", "evil/..", "a/b", "/etc", "/", "a\\b", "~root", "", "x" * 65])
def test_experiment_names_that_could_leave_the_results_folder_are_rejected(tmp_path, name):
    path = _write(tmp_path, name=json.dumps(name))
    with pytest.raises(ConfigError, match=r":1: experiment: expected a name of letters, digits"):
        load_experiment(path)
    outside = tmp_path / "evil"
    with pytest.raises(ConfigError):
        run_experiment(path, results_root=tmp_path / "results" / "inner", options=RunOptions(jobs=1))
    assert not (tmp_path / "results").exists() and not outside.exists()


@pytest.mark.parametrize("name", ["..", ".", "", "../sibling", "a/b", "a/..", "a/../../x", "/etc", "/tmp/elsewhere"])
def test_experiment_dir_refuses_names_that_leave_the_results_folder(tmp_path, name):
    root = tmp_path / "results"
    with pytest.raises(StoreError, match="would leave the results folder"):
        experiment_dir(root, name)


def test_experiment_dir_accepts_plain_names_and_refuses_a_symlink_out(tmp_path):
    root = tmp_path / "results"
    root.mkdir()
    assert experiment_dir(root, "plain-name_1.0") == root.resolve() / "plain-name_1.0"
    assert experiment_dir(root, "a..b") == root.resolve() / "a..b"
    (tmp_path / "elsewhere").mkdir()
    (root / "link").symlink_to(tmp_path / "elsewhere")
    with pytest.raises(StoreError, match="would leave the results folder"):
        experiment_dir(root, "link")


@pytest.fixture(scope="module")
def stored(tmp_path_factory) -> Path:
    tmp_path = tmp_path_factory.mktemp("stored")
    run_experiment(_write(tmp_path), results_root=tmp_path / "results", options=RunOptions(jobs=1))
    return tmp_path / "results" / "safe"


@pytest.mark.parametrize(
    "given", ["../../etc/passwd", "/etc/passwd", "abcd/..", "abcd/", "..", "abcd\\x", "abcd\x00", "ab cd", "%2e%2e"]
)
def test_rerun_ids_with_path_characters_are_rejected(stored, given):
    with pytest.raises(StoreError, match="is not a trial id; expected 4 to 16 hex digits"):
        select_trials(stored, [given], None, False, 0)


def test_rerun_id_with_path_characters_is_one_line_on_the_command_line(stored):
    result = _cli("rerun", str(stored), "../../../etc/passwd", cwd=stored.parent)
    assert result.returncode == 2
    assert result.stderr.splitlines() == [
        "stepmeter: error: '../../../etc/passwd' is not a trial id; expected 4 to 16 hex digits as in "
        "`stepmeter report`"
    ]


def test_an_entry_point_that_is_not_an_environment_is_a_config_error(tmp_path):
    path = tmp_path / "entry.yaml"
    path.write_text(
        "experiment: entry\nseeds: 1\nreal_steps: 100\nenvironments:\n  - entry: builtins:dict\nagents:\n"
        "  - {label: q, kind: q_learning}\n",
        encoding="utf-8",
    )
    with pytest.raises(ConfigError, match=r"entry\.yaml:5: environments\[0\]"):
        load_experiment(path)


_BANNED_MODULES = {"pickle", "cPickle", "_pickle", "dill", "cloudpickle", "shelve", "marshal", "jsonpickle"}
_BANNED_YAML = {"load", "load_all", "unsafe_load", "unsafe_load_all", "full_load", "full_load_all"}
_UNSAFE_LOADERS = {"Loader", "UnsafeLoader", "FullLoader", "CLoader", "CUnsafeLoader", "CFullLoader"}


def _sources() -> list[Path]:
    return sorted((_REPO / "runner").rglob("*.py"))


def _problems(path: Path) -> list[str]:
    """What in one source file could unpickle data or build Python objects from YAML."""
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found += [f"import {a.name}" for a in node.names if a.name.split(".")[0] in _BANNED_MODULES]
        elif isinstance(node, ast.ImportFrom):
            module = node.module or ""
            if module.split(".")[0] in _BANNED_MODULES:
                found.append(f"from {module} import ...")
            if module == "yaml":
                found += [f"from yaml import {a.name}" for a in node.names if a.name in _BANNED_YAML | _UNSAFE_LOADERS]
        elif isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name) and node.value.id == "yaml":
            if node.attr in _BANNED_YAML | _UNSAFE_LOADERS:
                found.append(f"yaml.{node.attr}")
        elif isinstance(node, ast.keyword) and node.arg == "allow_pickle":
            if not (isinstance(node.value, ast.Constant) and node.value.value is False):
                found.append("allow_pickle=...")
        elif isinstance(node, ast.Attribute) and node.attr in ("read_pickle", "to_pickle"):
            found.append(node.attr)
    return [f"{path.name}:{problem}" for problem in found]


def test_no_module_unpickles_or_loads_yaml_unsafely():
    sources = _sources()
    assert len(sources) >= 20 and _REPO / "runner" / "yaml_source.py" in sources
    problems = [p for path in sources for p in _problems(path)]
    assert problems == []
    text = "\n".join(path.read_text(encoding="utf-8") for path in sources)
    assert "yaml.SafeLoader" in text  # the scan reads the real loader


def test_the_scan_catches_what_it_looks_for(tmp_path):
    bad = tmp_path / "bad.py"
    bad.write_text(
        "import pickle\nimport yaml\nfrom yaml import unsafe_load\nimport numpy as np\n"
        "yaml.load(t, Loader=yaml.Loader)\nnp.load('x', allow_pickle=True)\n",
        encoding="utf-8",
    )
    assert sorted(p.split(":", 1)[1] for p in _problems(bad)) == sorted(
        ["import pickle", "from yaml import unsafe_load", "yaml.load", "yaml.Loader", "allow_pickle=..."]
    )
