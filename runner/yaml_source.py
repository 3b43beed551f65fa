"""Read YAML safely while remembering the line of every key path, so errors can point at the file."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import yaml

from runner.errors import ConfigError

__all__ = ["KeyPath", "SourceText", "format_path", "read_yaml"]

KeyPath = tuple[str | int, ...]


def format_path(path: KeyPath) -> str:
    """('agents', 2, 'params', 'alpha') -> 'agents[2].params.alpha'."""
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += f".{part}" if out else str(part)
    return out or "(top level)"


@dataclass(frozen=True)
class SourceText:
    """A loaded YAML document: its data, text, file name and the 1-based line of each key path."""

    file: str
    text: str
    data: Any
    lines: dict[KeyPath, int]

    def line(self, path: KeyPath) -> int:
        """Line of the deepest known prefix of path (a missing key points at its parent)."""
        for end in range(len(path), -1, -1):
            if path[:end] in self.lines:
                return self.lines[path[:end]]
        return 1

    def error(self, path: KeyPath, message: str) -> ConfigError:
        """A ConfigError reading 'file:line: key.path: message'."""
        return ConfigError(f"{self.file}:{self.line(path)}: {format_path(path)}: {message}")


def read_yaml(path: str | Path) -> SourceText:
    """Load one YAML file with the safe loader; duplicate keys and syntax errors become ConfigError."""
    name = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(f"{name}: no such study file") from None
    except (OSError, UnicodeDecodeError) as err:
        raise ConfigError(f"{name}: cannot read the study file ({err})") from None
    try:
        node = yaml.compose(text, Loader=yaml.SafeLoader)
        data = yaml.safe_load(text)
    except yaml.MarkedYAMLError as err:
        mark = err.problem_mark or err.context_mark
        line = mark.line + 1 if mark else 1
        problem = err.problem or err.context or "syntax error"
        raise ConfigError(f"{name}:{line}: not valid YAML: {problem}") from None
    except yaml.YAMLError as err:
        raise ConfigError(f"{name}:1: not valid YAML: {err}") from None
    lines: dict[KeyPath, int] = {}
    if node is not None:
        _walk(node, (), lines, name)
    return SourceText(name, text, data, lines)


def _walk(node: yaml.Node, path: KeyPath, lines: dict[KeyPath, int], name: str) -> None:
    lines.setdefault(path, node.start_mark.line + 1)
    if isinstance(node, yaml.MappingNode):
        seen: set[str] = set()
        for key_node, value_node in node.value:
            key = key_node.value
            if key in seen:
                raise ConfigError(
                    f"{name}:{key_node.start_mark.line + 1}: {format_path((*path, key))}: "
                    "key given twice; expected each key once"
                )
            seen.add(key)
            lines[(*path, key)] = key_node.start_mark.line + 1
            _walk(value_node, (*path, key), lines, name)
    elif isinstance(node, yaml.SequenceNode):
        for i, item in enumerate(node.value):
            lines[(*path, i)] = item.start_mark.line + 1
            _walk(item, (*path, i), lines, name)
