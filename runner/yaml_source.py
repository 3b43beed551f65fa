"""Read YAML safely while remembering the line of every key path, so errors can point at the file."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from runner.errors import ConfigError

__all__ = ["KeyPath", "SourceText", "format_path", "read_yaml"]

KeyPath = tuple[str | int, ...]
_STR_TAG = "tag:yaml.org,2002:str"


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
    """A loaded YAML document: its data, text, file name and the 1-based line of each key path.

    Mapping keys that are not text (`1000:`, `yes:`) appear in paths as their text form.
    """

    file: str
    text: str
    data: Any
    lines: dict[KeyPath, int]
    block_starts: dict[KeyPath, int] = field(default_factory=dict)

    def line(self, path: KeyPath) -> int:
        """Line of the deepest known prefix of path (a missing key points at its parent)."""
        for end in range(len(path), -1, -1):
            if path[:end] in self.lines:
                return self.lines[path[:end]]
        return 1

    def content_line(self, path: KeyPath, row: int) -> int:
        """File line of line `row` of a text value; block scalars ('|', '>') start below their indicator."""
        if path in self.block_starts:
            return self.block_starts[path] + 1 + row
        return self.line(path)

    def error(self, path: KeyPath, message: str) -> ConfigError:
        """A ConfigError reading 'file:line: key.path: message'."""
        return ConfigError(f"{self.file}:{self.line(path)}: {format_path(path)}: {message}")


def read_yaml(path: str | Path) -> SourceText:
    """Load one YAML file with the safe loader; duplicate keys and syntax errors become ConfigError."""
    name = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(f"{name}: no such experiment file") from None
    except (OSError, UnicodeDecodeError) as err:
        raise ConfigError(f"{name}: cannot read the experiment file ({err})") from None
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
    source = SourceText(name, text, _text_keys(data), {}, {})
    if node is not None:
        _walk(node, (), source)
    return source


def _key_text(key_node: yaml.Node) -> str:
    """A mapping key as text: plain strings as written, other scalars (1000, yes, ~) as Python shows them."""
    if key_node.tag == _STR_TAG:
        return key_node.value
    return str(yaml.safe_load(yaml.serialize(key_node)))


def _text_keys(data: Any) -> Any:
    """The same data with every mapping key turned into text, matching the paths of `_walk`."""
    if isinstance(data, dict):
        return {k if isinstance(k, str) else str(k): _text_keys(v) for k, v in data.items()}
    if isinstance(data, list):
        return [_text_keys(v) for v in data]
    return data


def _walk(node: yaml.Node, path: KeyPath, source: SourceText) -> None:
    source.lines.setdefault(path, node.start_mark.line + 1)
    if isinstance(node, yaml.ScalarNode) and node.style in ("|", ">"):
        source.block_starts[path] = node.start_mark.line + 1
    if isinstance(node, yaml.MappingNode):
        seen: set[str] = set()
        for key_node, value_node in node.value:
            key = _key_text(key_node)
            if key in seen:
                raise ConfigError(
                    f"{source.file}:{key_node.start_mark.line + 1}: {format_path((*path, key))}: "
                    "key given twice; expected each key once"
                )
            seen.add(key)
            source.lines[(*path, key)] = key_node.start_mark.line + 1
            _walk(value_node, (*path, key), source)
    elif isinstance(node, yaml.SequenceNode):
        for i, item in enumerate(node.value):
            source.lines[(*path, i)] = item.start_mark.line + 1
            _walk(item, (*path, i), source)
