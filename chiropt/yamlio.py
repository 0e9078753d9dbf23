"""YAML reading with line numbers, and key checking with suggestions.

Turns a YAML file into plain Python data plus a map from key path
(``particles[0].radius_nm``) to line number, so that every input error can name
the key path *and* the line. Hostile input is bounded: file size, nesting depth,
list/mapping lengths, alias use and expanded size; only the standard tags of the
YAML 1.2 core schema are accepted, and exponent numbers without a dot (``1e-5``)
are floats as in YAML 1.2.
"""

from __future__ import annotations

import difflib
import re
from pathlib import Path
from typing import Any

import yaml

from chiropt.errors import InputError

MAX_FILE_BYTES = 1_000_000     # design and goal files are a few kB
MAX_DEPTH = 64                 # nesting of mappings and lists
MAX_ITEMS = 10_000             # entries of one list or mapping
MAX_ALIASES = 100              # uses of '*anchor'
MAX_NODES = 100_000            # values after expanding aliases

# the core schema's tags (YAML 1.2, section 10.3) and PyYAML's spellings of them
_STANDARD_TAGS = {"tag:yaml.org,2002:" + t for t in ("str", "int", "float", "bool", "null",
                                                     "seq", "map")} | {"!"}

# YAML 1.2 core schema float (section 10.3.2): the dot is optional before an exponent
_FLOAT_12 = re.compile(r"^[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)(?:[eE][-+]?[0-9]+)$")


class _BoundedLoader(yaml.SafeLoader):
    """SafeLoader that refuses non-standard tags and bounds depth, lengths and aliases."""

    def __init__(self, stream):
        super().__init__(stream)
        self._depth = 0
        self._aliases = 0

    def _refuse(self, mark, message: str):
        where = f"line {mark.line + 1}: " if mark is not None else ""
        raise InputError("", f"{self.name}: {where}{message}")

    def compose_node(self, parent, index):
        event = self.peek_event()
        if isinstance(event, yaml.AliasEvent):
            self._aliases += 1
            if self._aliases > MAX_ALIASES:
                self._refuse(event.start_mark, f"more than {MAX_ALIASES} aliases (*name); "
                                               "limit on alias use")
        else:
            tag = getattr(event, "tag", None)
            if tag is not None and tag not in _STANDARD_TAGS:
                self._refuse(event.start_mark, f"tag {tag!r} is not allowed; chiropt reads plain "
                                               "YAML (mappings, lists, numbers, strings)")
        self._depth += 1
        if self._depth > MAX_DEPTH:
            self._refuse(event.start_mark, f"nesting deeper than {MAX_DEPTH} levels; "
                                           "limit on nesting depth")
        try:
            return super().compose_node(parent, index)
        finally:
            self._depth -= 1

    def compose_sequence_node(self, anchor):
        start_event = self.get_event()
        tag = start_event.tag
        if tag is None or tag == "!":
            tag = self.resolve(yaml.SequenceNode, None, start_event.implicit)
        node = yaml.SequenceNode(tag, [], start_event.start_mark, None,
                                 flow_style=start_event.flow_style)
        if anchor is not None:
            self.anchors[anchor] = node
        index = 0
        while not self.check_event(yaml.SequenceEndEvent):
            if index >= MAX_ITEMS:
                self._refuse(start_event.start_mark, f"a list longer than {MAX_ITEMS} entries; "
                                                     "limit on list length")
            node.value.append(self.compose_node(node, index))
            index += 1
        node.end_mark = self.get_event().end_mark
        return node

    def compose_mapping_node(self, anchor):
        start_event = self.get_event()
        tag = start_event.tag
        if tag is None or tag == "!":
            tag = self.resolve(yaml.MappingNode, None, start_event.implicit)
        node = yaml.MappingNode(tag, [], start_event.start_mark, None,
                                flow_style=start_event.flow_style)
        if anchor is not None:
            self.anchors[anchor] = node
        while not self.check_event(yaml.MappingEndEvent):
            if len(node.value) >= MAX_ITEMS:
                self._refuse(start_event.start_mark, f"a mapping with more than {MAX_ITEMS} "
                                                     "keys; limit on mapping size")
            item_key = self.compose_node(node, None)
            item_value = self.compose_node(node, item_key)
            node.value.append((item_key, item_value))
        node.end_mark = self.get_event().end_mark
        return node


_BoundedLoader.add_implicit_resolver("tag:yaml.org,2002:float", _FLOAT_12,
                                     list("-+0123456789."))


class _Walker:
    """Turns a composed node graph into plain data, counting values (aliases expanded)."""

    def __init__(self, loader: _BoundedLoader, lines: dict[str, int]):
        self.loader = loader
        self.lines = lines
        self.count = 0

    def walk(self, node: yaml.Node, path: str) -> Any:
        self.count += 1
        if self.count > MAX_NODES:
            raise InputError("", f"{self.loader.name}: more than {MAX_NODES} values after "
                                 "expanding aliases; limit on expanded size")
        self.lines.setdefault(path, node.start_mark.line + 1)
        if isinstance(node, yaml.MappingNode):
            out: dict[str, Any] = {}
            for key_node, value_node in node.value:
                line = key_node.start_mark.line + 1
                if not isinstance(key_node, yaml.ScalarNode):
                    raise InputError(path, f"a key must be a plain name (line {line})")
                key = key_node.value
                if key in out:
                    raise InputError(_join(path, key), f"duplicate key (line {line})")
                out[key] = self.walk(value_node, _join(path, key))
            return out
        if isinstance(node, yaml.SequenceNode):
            return [self.walk(item, f"{path}[{i}]") for i, item in enumerate(node.value)]
        try:
            return self.loader.construct_object(node)
        except yaml.YAMLError as exc:
            line = node.start_mark.line + 1
            raise InputError(path, f"{_one_line(exc)} ({self.loader.name}:{line})") from None


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
    """Read a YAML mapping from ``path``; malformed or hostile YAML is an :class:`InputError`.

    The size is checked before anything is read; the bytes must be UTF-8 text.
    """
    path = Path(path)
    try:
        size = path.stat().st_size
        if path.is_file() and size > MAX_FILE_BYTES:
            raise InputError("", f"{path}: {size} bytes, larger than the {MAX_FILE_BYTES} "
                                 "bytes allowed for a design or goal file; limit on file size")
        with path.open("rb") as fh:
            raw = fh.read(MAX_FILE_BYTES + 1)
    except OSError as exc:
        raise InputError("", f"cannot read {path}: {exc.strerror}") from None
    if len(raw) > MAX_FILE_BYTES:
        raise InputError("", f"{path}: larger than the {MAX_FILE_BYTES} bytes allowed for a "
                             "design or goal file; limit on file size")
    if b"\0" in raw:
        raise InputError("", f"{path}: a binary file (it holds NUL bytes), not a YAML text file")
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError("", f"{path}: not UTF-8 text (byte 0x{raw[exc.start]:02x} at offset "
                             f"{exc.start}); save the file as UTF-8") from None
    return parse_yaml(text, source=str(path))


def _one_line(exc: Exception) -> str:
    problem = getattr(exc, "problem", None) or str(exc)
    return " ".join(str(problem).split())


def parse_yaml(text: str, source: str = "<string>") -> Located:
    """Parse YAML text holding one mapping, keeping line numbers of every key path."""
    loader = _BoundedLoader(text)
    loader.name = source
    try:
        node = loader.get_single_node()
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        raise InputError("", f"{source}: malformed YAML{where}: {_one_line(exc)}") from None
    finally:
        loader.dispose()
    if node is None or not isinstance(node, yaml.MappingNode):
        raise InputError("", f"{source}: expected a mapping of keys at the top level")
    lines: dict[str, int] = {}
    data = _Walker(loader, lines).walk(node, "")
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
