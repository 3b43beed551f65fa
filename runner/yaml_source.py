"""Read YAML safely while remembering the line of every key path, so errors can point at the file.

Hostile files are bounded before they can cost much: the file size, the nesting depth and the number of values
after aliases expand all have limits, a recursive alias is refused, and every YAML problem becomes one line
naming the file and line. Standard merge keys (`<<: *defaults`) are expanded, explicit keys winning.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from runner.errors import ConfigError

__all__ = ["MAX_DEPTH", "MAX_FILE_BYTES", "MAX_VALUES", "KeyPath", "SourceText", "format_path", "read_yaml"]

KeyPath = tuple[str | int, ...]
MAX_FILE_BYTES = 1 << 20
"""An experiment file is a page or two of text; one MiB leaves room for long seed lists and maps."""
MAX_DEPTH = 64
"""Deepest nesting of lists and mappings (the schema itself goes five levels deep)."""
MAX_VALUES = 100_000
"""Most values (scalars, lists, mappings) a file may hold once aliases are expanded: an alias bomb stops here."""

_TAG = "tag:yaml.org,2002:"
_STR_TAG = _TAG + "str"
_MERGE_TAG = _TAG + "merge"


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


def _one_line(text: object) -> str:
    return " ".join(str(text).split())


class _DepthBoundLoader(yaml.SafeLoader):
    """The safe loader, refusing nesting deeper than MAX_DEPTH while it composes (before recursion can fail)."""

    def __init__(self, stream: str) -> None:
        super().__init__(stream)
        self.depth = 0

    def compose_node(self, parent: yaml.Node | None, index: Any) -> yaml.Node:
        self.depth += 1
        try:
            if self.depth > MAX_DEPTH:
                raise yaml.composer.ComposerError(
                    None,
                    None,
                    f"nested deeper than {MAX_DEPTH} levels of lists and mappings",
                    self.peek_event().start_mark,
                )
            return super().compose_node(parent, index)
        finally:
            self.depth -= 1


def _read_text(name: str, path: str | Path) -> str:
    try:
        with open(path, "rb") as stream:
            raw = stream.read(MAX_FILE_BYTES + 1)
    except FileNotFoundError:
        raise ConfigError(f"{name}: no such experiment file") from None
    except OSError as err:
        raise ConfigError(f"{name}: cannot read the experiment file ({_one_line(err.strerror or err)})") from None
    if len(raw) > MAX_FILE_BYTES:
        raise ConfigError(f"{name}: larger than {MAX_FILE_BYTES // 1024} KiB; expected an experiment file of text")
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as err:
        line = raw[: err.start].count(b"\n") + 1
        raise ConfigError(
            f"{name}:{line}: not valid YAML: expected UTF-8 text, got byte 0x{raw[err.start]:02x}"
        ) from None


def read_yaml(path: str | Path) -> SourceText:
    """Load one YAML file with the safe loader into plain data and the line of every key path.

    Duplicate keys, syntax errors, unknown tags, deep nesting, alias bombs and recursive aliases become
    ConfigError (one line with file and line).
    """
    name = str(path)
    text = _read_text(name, path)
    loader = None
    try:
        loader = _DepthBoundLoader(text)
        node = loader.get_single_node()
        source = SourceText(name, text, None, {}, {})
        data = None if node is None else _Builder(source, loader).build(node, ())
    except yaml.MarkedYAMLError as err:
        mark = err.problem_mark or err.context_mark
        line = mark.line + 1 if mark else 1
        problem = ", ".join(part for part in (err.context, err.problem) if part) or "syntax error"
        raise ConfigError(f"{name}:{line}: not valid YAML: {_one_line(problem)}") from None
    except yaml.reader.ReaderError as err:
        line = text[: max(0, err.position)].count("\n") + 1
        raise ConfigError(
            f"{name}:{line}: not valid YAML: unacceptable character #x{err.character:04x} ({err.reason})"
        ) from None
    except yaml.YAMLError as err:
        raise ConfigError(f"{name}:1: not valid YAML: {_one_line(err)}") from None
    finally:
        if loader is not None:
            loader.dispose()
    return SourceText(name, text, data, source.lines, source.block_starts)


class _Builder:
    """Turn a composed node graph into plain data with text keys, recording lines and bounding the expansion."""

    def __init__(self, source: SourceText, loader: yaml.SafeLoader) -> None:
        self.source = source
        self.loader = loader
        self.count = 0
        self.open: set[int] = set()

    def fail(self, node: yaml.Node, message: str) -> ConfigError:
        return ConfigError(f"{self.source.file}:{node.start_mark.line + 1}: not valid YAML: {message}")

    def build(self, node: yaml.Node, path: KeyPath) -> Any:
        self.count += 1
        if self.count > MAX_VALUES:
            raise self.fail(node, f"aliases expand to more than {MAX_VALUES} values; expected a smaller file")
        if len(path) > MAX_DEPTH:
            raise self.fail(node, f"aliases nest deeper than {MAX_DEPTH} levels of lists and mappings")
        self.source.lines.setdefault(path, node.start_mark.line + 1)
        if isinstance(node, yaml.ScalarNode):
            if node.style in ("|", ">"):
                self.source.block_starts[path] = node.start_mark.line + 1
            return self.loader.construct_object(node, deep=True)
        if id(node) in self.open:
            raise self.fail(node, "an alias refers to a list or mapping that contains it (a recursive alias)")
        self.open.add(id(node))
        try:
            if isinstance(node, yaml.SequenceNode):
                self._tag(node, "seq")
                items = []
                for i, item in enumerate(node.value):
                    self.source.lines[(*path, i)] = item.start_mark.line + 1
                    items.append(self.build(item, (*path, i)))
                return items
            self._tag(node, "map")
            out: dict[str, Any] = {}
            for key, key_node, value_node in self._pairs(node, path):
                self.source.lines[(*path, key)] = key_node.start_mark.line + 1
                out[key] = self.build(value_node, (*path, key))
            return out
        finally:
            self.open.discard(id(node))

    def _tag(self, node: yaml.Node, expected: str) -> None:
        if node.tag != _TAG + expected:
            raise self.fail(node, f"could not determine a constructor for the tag {node.tag!r}")

    def _key(self, key_node: yaml.Node) -> str:
        """A mapping key as text: plain strings as written, other scalars (1000, yes, ~) as Python shows them."""
        if not isinstance(key_node, yaml.ScalarNode):
            raise self.fail(key_node, "expected a plain key, got a list or mapping used as a key")
        if key_node.tag == _STR_TAG:
            return key_node.value
        return str(self.loader.construct_object(key_node, deep=True))

    def _pairs(self, node: yaml.MappingNode, path: KeyPath) -> list[tuple[str, yaml.Node, yaml.Node]]:
        """The mapping's (key, key node, value node) triples: merged keys first, explicit keys overriding them."""
        own: dict[str, tuple[yaml.Node, yaml.Node]] = {}
        merged: dict[str, tuple[yaml.Node, yaml.Node]] = {}
        for key_node, value_node in node.value:
            if key_node.tag == _MERGE_TAG:
                for source in self._merge_sources(value_node):
                    for key, k_node, v_node in self._pairs_of_merged(source, path):
                        merged.setdefault(key, (k_node, v_node))
                continue
            key = self._key(key_node)
            if key in own:
                raise ConfigError(
                    f"{self.source.file}:{key_node.start_mark.line + 1}: {format_path((*path, key))}: "
                    "key given twice; expected each key once"
                )
            own[key] = (key_node, value_node)
        pairs = {**{k: v for k, v in merged.items() if k not in own}, **own}
        return [(key, key_node, value_node) for key, (key_node, value_node) in pairs.items()]

    def _merge_sources(self, value: yaml.Node) -> list[yaml.MappingNode]:
        if isinstance(value, yaml.MappingNode):
            return [value]
        if isinstance(value, yaml.SequenceNode) and all(isinstance(v, yaml.MappingNode) for v in value.value):
            return list(value.value)
        raise self.fail(value, "a merge key '<<' expects a mapping or a list of mappings")

    def _pairs_of_merged(self, source: yaml.MappingNode, path: KeyPath) -> list[tuple[str, yaml.Node, yaml.Node]]:
        if id(source) in self.open:
            raise self.fail(source, "a merge key refers to a mapping that contains it (a recursive alias)")
        self.count += len(source.value)
        if self.count > MAX_VALUES:
            raise self.fail(source, f"aliases expand to more than {MAX_VALUES} values; expected a smaller file")
        self.open.add(id(source))
        try:
            self._tag(source, "map")
            return self._pairs(source, path)
        finally:
            self.open.discard(id(source))
