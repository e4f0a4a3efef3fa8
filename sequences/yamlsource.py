"""YAML loading that remembers where every key, value and list item came from.

Recipe, station and UUT files are written by hand, so every complaint about them must name the
file, line and column of the offending text. PyYAML's composer already records marks on nodes; this
module composes the node graph with ``yaml.SafeLoader`` and builds ordinary ``dict``/``list``
values (subclasses) that keep those marks beside the data. Consumers read the data as plain Python
and ask the container for positions when they need to complain::

    doc = load_yaml("bench.yaml")          # MarkedDict (a dict) for a mapping document
    doc["stage"]["axes"]                   # plain access
    doc.ref_of("stage")                    # SourceRef of the value under "stage"
    doc.key_ref("stage")                   # SourceRef of the key text itself
    doc["steps"].ref_of(2)                 # SourceRef of the third list item

Scalars stay plain (``int``, ``str`` ...): their position is asked of the container that holds them.
A document whose top level is not a container comes back as a :class:`MarkedScalar` so that the
caller can still point at it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Hashable, Union

import yaml

__all__ = [
    "SourceRef",
    "Problem",
    "SourceError",
    "MarkedDict",
    "MarkedList",
    "MarkedScalar",
    "MarkedNode",
    "load_yaml",
    "ref_in",
    "is_number",
    "bounded_safe_load",
    "MAX_DEPTH",
    "MAX_EXPANDED_NODES",
    "MAX_TEXT_BYTES",
]

MAX_DEPTH = 64
"""Deepest nesting of mappings and lists a hand-written file may have (ours need under 10)."""
MAX_EXPANDED_NODES = 100_000
"""Values in a document once every alias is expanded: bounds what readers of the data walk
(a "billion laughs" file of nested aliases is a few hundred bytes and 10^9 values)."""
MAX_TEXT_BYTES = 4 * 1024 * 1024
"""Largest input file read (station, UUT, recipe and geometry files are a few kB)."""


@dataclass(frozen=True, order=True)
class SourceRef:
    """A place in a text file; ``line`` and ``column`` are 1-based, as editors show them."""

    file: str
    line: int
    column: int

    def __str__(self) -> str:
        return f"{self.file}:{self.line}:{self.column}"


@dataclass(frozen=True)
class Problem:
    """One thing wrong with a file: where, what, and (optionally) what would fix it."""

    where: SourceRef
    message: str
    hint: str = ""

    def __str__(self) -> str:
        text = f"{self.where}: {_sentence(self.message)}"
        if self.hint:
            text += f" {_sentence(self.hint)}"
        return text


def _sentence(text: str) -> str:
    text = text.rstrip(". ")
    return text if text.endswith(("?", "!")) else text + "."


class SourceError(ValueError):
    """Raised with every problem found in a file, so the author can fix them all in one pass."""

    def __init__(self, problems: list[Problem]) -> None:
        self.problems: list[Problem] = sorted(
            problems, key=lambda p: (p.where.file, p.where.line, p.where.column)
        )
        super().__init__(str(self))

    def __str__(self) -> str:
        return "\n".join(str(p) for p in self.problems)


def _ref(file: str, node: yaml.Node) -> SourceRef:
    mark = node.start_mark
    return SourceRef(file, mark.line + 1, mark.column + 1)


class MarkedDict(dict):
    """A ``dict`` built from a YAML mapping, remembering where its keys and values are."""

    def __init__(self, where: SourceRef) -> None:
        super().__init__()
        self._where = where
        self._key_refs: dict[Hashable, SourceRef] = {}
        self._value_refs: dict[Hashable, SourceRef] = {}

    def ref(self) -> SourceRef:
        """Where the mapping itself starts."""
        return self._where

    def ref_of(self, key: Hashable) -> SourceRef:
        """Where the value under ``key`` starts (the mapping's start if the key is absent)."""
        return self._value_refs.get(key, self._where)

    def key_ref(self, key: Hashable) -> SourceRef:
        """Where the key text itself is (the mapping's start if the key is absent)."""
        return self._key_refs.get(key, self._where)


class MarkedList(list):
    """A ``list`` built from a YAML sequence, remembering where each item is."""

    def __init__(self, where: SourceRef) -> None:
        super().__init__()
        self._where = where
        self._item_refs: list[SourceRef] = []

    def ref(self) -> SourceRef:
        """Where the sequence itself starts."""
        return self._where

    def ref_of(self, index: int) -> SourceRef:
        """Where item ``index`` starts (the sequence's start if out of range)."""
        try:
            return self._item_refs[index]
        except IndexError:
            return self._where


@dataclass(frozen=True)
class MarkedScalar:
    """A document whose top level is a single scalar (or empty): its value and where it is."""

    value: Any
    where: SourceRef = field(compare=False)

    def ref(self) -> SourceRef:
        return self.where


MarkedNode = Union[MarkedDict, MarkedList, MarkedScalar]


def ref_in(container: Any, key: Any, fallback: SourceRef) -> SourceRef:
    """Position of ``container[key]`` if the container knows it, else ``fallback``.

    Handy when code walks data that may have been built in Python rather than loaded from YAML.
    """
    if isinstance(container, (MarkedDict, MarkedList)):
        return container.ref_of(key)
    return fallback


def is_number(value: Any, *, integer: bool = False) -> bool:
    """True for a finite int/float (an int when `integer`); YAML booleans are not numbers."""
    if isinstance(value, bool) or not isinstance(value, int if integer else (int, float)):
        return False
    return math.isfinite(float(value))


class _Builder:
    """Turns a composed node graph into marked containers, collecting problems as it goes."""

    def __init__(self, file: str) -> None:
        self.file = file
        self.loader = yaml.SafeLoader("")
        self.problems: list[Problem] = []
        self._done: dict[int, Any] = {}

    def build(self, node: yaml.Node) -> Any:
        # Aliases share the node object: build it once so anchors keep their identity.
        if id(node) in self._done:
            return self._done[id(node)]
        if isinstance(node, yaml.MappingNode):
            return self._mapping(node)
        if isinstance(node, yaml.SequenceNode):
            out_list = MarkedList(_ref(self.file, node))
            self._done[id(node)] = out_list
            for item in node.value:
                out_list.append(self.build(item))
                out_list._item_refs.append(_ref(self.file, item))
            return out_list
        try:
            value = self.loader.construct_object(node, deep=True)
        except yaml.YAMLError as exc:
            self.problems.append(
                Problem(_ref(self.file, node), f"cannot read this value ({exc})",
                        "quote it if it is meant as text")
            )
            value = node.value
        self._done[id(node)] = value
        return value

    def _mapping(self, node: yaml.MappingNode) -> MarkedDict:
        out = MarkedDict(_ref(self.file, node))
        self._done[id(node)] = out
        own_keys = {id(k) for k, _ in node.value}
        try:
            self.loader.flatten_mapping(node)  # resolves "<<" merge keys in place
        except yaml.YAMLError as exc:
            self.problems.append(Problem(_ref(self.file, node), f"bad merge key ({exc})",
                                         "'<<' must refer to a mapping or a list of mappings"))
        own_key: dict[Hashable, bool] = {}
        for key_node, value_node in node.value:
            key = self.build(key_node)
            key_where = _ref(self.file, key_node)
            if not isinstance(key, Hashable) or isinstance(key, (dict, list)):
                self.problems.append(Problem(key_where, "a mapping key must be a plain value",
                                             "write the key as a name followed by ':'"))
                continue
            is_own = id(key_node) in own_keys
            if key in out and is_own and own_key[key]:
                first = out._key_refs[key]
                self.problems.append(Problem(
                    key_where, f"key '{key}' appears twice in this mapping",
                    f"the first is at line {first.line}; keep only one"))
                continue
            # A key written in the mapping overrides one brought in by a '<<' merge.
            own_key[key] = is_own
            out[key] = self.build(value_node)
            out._key_refs[key] = key_where
            out._value_refs[key] = _ref(self.file, value_node)
        return out


def _syntax_problem(file: str, exc: yaml.YAMLError) -> Problem:
    mark = getattr(exc, "problem_mark", None) or getattr(exc, "context_mark", None)
    where = SourceRef(file, mark.line + 1, mark.column + 1) if mark else SourceRef(file, 1, 1)
    parts = [getattr(exc, "context", None), getattr(exc, "problem", None)]
    what = ", ".join(p for p in parts if p) or str(exc)
    hint = "check the indentation, a missing ':' or an unclosed quote or bracket near here"
    context_mark = getattr(exc, "context_mark", None)
    if context_mark is not None and mark is not None and context_mark.line != mark.line:
        hint += f" (the construct began at line {context_mark.line + 1})"
    return Problem(where, f"YAML syntax error: {what}", hint)


def _check_depth(file: str, text: str) -> None:
    """Refuse nesting deeper than MAX_DEPTH before composing (PyYAML's composer recurses, so
    5,000 nested brackets would end in a RecursionError); the parser's events are flat."""
    depth = 0
    for event in _events_until_error(file, text):
        if isinstance(event, (yaml.SequenceStartEvent, yaml.MappingStartEvent)):
            depth += 1
            if depth > MAX_DEPTH:
                raise _too_deep(file, event.start_mark)
        elif isinstance(event, (yaml.SequenceEndEvent, yaml.MappingEndEvent)):
            depth -= 1


def _too_deep(file: str, mark: Any) -> SourceError:
    where = SourceRef(file, mark.line + 1, mark.column + 1) if mark else SourceRef(file, 1, 1)
    return SourceError([Problem(where, f"mappings and lists are nested more than {MAX_DEPTH} "
                                       "deep here",
                                "an input file needs only a few levels; check for unclosed "
                                "brackets")])


def _events_until_error(file: str, text: str) -> Any:
    """Parser events up to the first syntax error (the composer then reports that error with
    PyYAML's own marks); the C parser when PyYAML has it. Newer C scanners refuse deep nesting
    themselves while reading ahead: that is the same mistake, reported the same way."""
    try:
        yield from yaml.parse(text, Loader=getattr(yaml, "CSafeLoader", yaml.SafeLoader))
    except yaml.YAMLError as exc:
        if "nesting depth" in str(exc):
            raise _too_deep(file, getattr(exc, "problem_mark", None)) from None
        return


def _check_expansion(file: str, root: yaml.Node) -> None:
    """Count the values the document holds once aliases are expanded (each node's expanded
    size computed once, so this is linear in the file); refuse past MAX_EXPANDED_NODES or an
    alias that contains itself, naming the line where the growth happens."""
    sizes: dict[int, int] = {}
    stack: list[tuple[yaml.Node, bool]] = [(root, False)]
    open_nodes: set[int] = set()
    while stack:
        node, children_done = stack.pop()
        key = id(node)
        if key in sizes and not children_done:
            continue
        if isinstance(node, yaml.ScalarNode):
            sizes[key] = 1
            continue
        items = ([v for pair in node.value for v in pair] if isinstance(node, yaml.MappingNode)
                 else list(node.value))
        if not children_done:
            if key in open_nodes:
                continue
            open_nodes.add(key)
            stack.append((node, True))
            for child in items:
                if id(child) in open_nodes and id(child) not in sizes:
                    raise SourceError([Problem(_ref(file, child), "an alias refers to the "
                                               "mapping or list that contains it",
                                               "an alias must point at a finished value")])
                if id(child) not in sizes:
                    stack.append((child, False))
            continue
        total = 1 + sum(sizes[id(child)] for child in items)
        sizes[key] = total
        open_nodes.discard(key)
        if total > MAX_EXPANDED_NODES:
            raise SourceError([Problem(
                _ref(file, node), f"once its aliases (*name) are expanded this holds more than "
                f"{MAX_EXPANDED_NODES} values", "an input file needs far fewer; check the "
                "aliases used here")])


def bounded_safe_load(text: str, source: str = "<text>") -> Any:
    """A YAML value from text (a --set value, say) with the same bounds as files; plain Python
    values (dict, list, scalars) come back. Problems raise SourceError naming `source`."""
    node = load_yaml(source, text=text)
    return _plain(node.value if isinstance(node, MarkedScalar) else node)


def _plain(value: Any) -> Any:
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_plain(v) for v in value]
    return value


def load_yaml(path: Path | str, text: str | None = None) -> MarkedNode:
    """Load one YAML document keeping positions; raise :class:`SourceError` on any problem.

    ``path`` names the file in every message; if ``text`` is given it is parsed instead of reading
    the file (useful for tests and for text received from elsewhere). Duplicate keys, which plain
    PyYAML silently overwrites, are reported as problems.
    """
    file = str(path)
    if text is None:
        try:
            text = Path(path).read_text(encoding="utf-8")
        except FileNotFoundError:
            raise SourceError([Problem(SourceRef(file, 1, 1), "file not found",
                                       "check the path and the current directory")]) from None
        except (OSError, UnicodeDecodeError) as exc:
            raise SourceError([Problem(SourceRef(file, 1, 1), f"cannot read the file ({exc})",
                                       "check permissions and that it is UTF-8 text")]) from None
    if len(text) > MAX_TEXT_BYTES:
        raise SourceError([Problem(SourceRef(file, 1, 1), f"the file is {len(text)} characters "
                                   f"long, more than the {MAX_TEXT_BYTES} an input file may have",
                                   "check that this is the right file")])
    try:
        _check_depth(file, text)
        root = yaml.compose(text, Loader=yaml.SafeLoader)
    except yaml.YAMLError as exc:
        raise SourceError([_syntax_problem(file, exc)]) from None
    except RecursionError:  # the depth check above makes this unreachable; never a traceback
        raise _too_deep(file, None) from None
    if root is None:
        return MarkedScalar(None, SourceRef(file, 1, 1))
    _check_expansion(file, root)
    builder = _Builder(file)
    value = builder.build(root)
    if builder.problems:
        raise SourceError(builder.problems)
    if isinstance(value, (MarkedDict, MarkedList)):
        return value
    return MarkedScalar(value, _ref(file, root))
