"""YAML reading with line numbers, and key checking with suggestions.

Owns: turning a YAML file into plain Python data plus a map from key path
(``particles[0].radius_nm``) to line number, so that every input error can name
the key path *and* the line. Must not import: physics modules, store, report, cli.
"""

from __future__ import annotations

import difflib
from pathlib import Path
from typing import Any

import yaml

from chiropt.errors import InputError


def _walk(node: yaml.Node, path: str, lines: dict[str, int]) -> Any:
    lines[path] = node.start_mark.line + 1
    if isinstance(node, yaml.MappingNode):
        out: dict[str, Any] = {}
        for key_node, value_node in node.value:
            key = key_node.value
            if key in out:
                line = key_node.start_mark.line + 1
                raise InputError(_join(path, key), f"duplicate key (line {line})")
            out[key] = _walk(value_node, _join(path, key), lines)
        return out
    if isinstance(node, yaml.SequenceNode):
        return [_walk(item, f"{path}[{i}]", lines) for i, item in enumerate(node.value)]
    return yaml.safe_load(yaml.serialize(node))


def _join(path: str, key: str) -> str:
    return f"{path}.{key}" if path else str(key)


class Located(dict):
    """A dict of parsed YAML data that also knows the line of every key path."""

    def __init__(self, data: dict, lines: dict[str, int], source: str):
        super().__init__(data)
        self.lines = lines
        self.source = source

    def where(self, path: str) -> str:
        """``file:line`` for a key path, falling back to its nearest parent."""
        probe = path
        while probe and probe not in self.lines:
            probe = probe.rsplit(".", 1)[0] if "." in probe else ""
        line = self.lines.get(probe)
        return f"{self.source}:{line}" if line else self.source


def load_yaml(path: str | Path) -> Located:
    """Read a YAML mapping from ``path``; malformed YAML is an :class:`InputError`."""
    path = Path(path)
    try:
        text = path.read_text()
    except OSError as exc:
        raise InputError("", f"cannot read {path}: {exc.strerror}") from None
    return parse_yaml(text, source=str(path))


def parse_yaml(text: str, source: str = "<string>") -> Located:
    """Parse YAML text holding one mapping, keeping line numbers of every key path."""
    try:
        node = yaml.compose(text, Loader=yaml.SafeLoader)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or str(exc)
        raise InputError("", f"{source}: malformed YAML{where}: {problem}") from None
    if node is None or not isinstance(node, yaml.MappingNode):
        raise InputError("", f"{source}: expected a mapping of keys at the top level")
    lines: dict[str, int] = {}
    data = _walk(node, "", lines)
    return Located(data, lines, source)


def check_keys(mapping: Any, allowed: dict[str, str] | set[str], path: str) -> None:
    """Raise :class:`InputError` for keys of ``mapping`` not in ``allowed``.

    The message names the key path, lists the allowed keys and suggests the
    closest one.
    """
    if not isinstance(mapping, dict):
        raise InputError(path, f"expected a mapping, got {type(mapping).__name__}: {mapping!r}")
    names = sorted(allowed)
    for key in mapping:
        if key not in allowed:
            close = difflib.get_close_matches(str(key), names, n=1, cutoff=0.5)
            hint = f"; did you mean '{close[0]}'?" if close else ""
            raise InputError(
                _join(path, str(key)), f"unknown key; allowed here: {', '.join(names)}{hint}"
            )
