"""Reading one YAML record safely, keeping the line of every field.

PyYAML's safe loader silently keeps the last of two equal keys and forgets where each value stood. This module
composes the document with the C (libyaml) safe parser when it is available, then builds plain Python values
itself, so that it can

* refuse any tag that the safe constructor does not know (no object is ever constructed from a tag),
* report duplicate keys with both lines,
* remember the 1-based line of every mapping key and sequence item, addressed by its path
  (``("arms", 0, "visitors")``), so that validation errors can name the line a person must edit.

The file is only read, never written.
"""

from __future__ import annotations

import math
import re
from collections.abc import Hashable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from archive.records.problems import Problem

try:  # libyaml is a speed-up only; behaviour is the same without it
    _Loader: type[yaml.SafeLoader] = yaml.CSafeLoader  # type: ignore[assignment]
except AttributeError:  # pragma: no cover - depends on how PyYAML was built
    _Loader = yaml.SafeLoader

#: Records hold words and counts; anything larger than this is almost surely order-level data pasted inline.
MAX_RECORD_BYTES = 1_000_000

PathKey = tuple[Hashable, ...]

_STR = "tag:yaml.org,2002:str"
_INT = "tag:yaml.org,2002:int"
_FLOAT = "tag:yaml.org,2002:float"
_BOOL = "tag:yaml.org,2002:bool"
_SEQ = "tag:yaml.org,2002:seq"
_MAP = "tag:yaml.org,2002:map"
_SAFE_TAGS = frozenset(yaml.SafeLoader.yaml_constructors) - {None}
_PLAIN_FLOAT = re.compile(r"[0-9]+\.[0-9]+\Z")  # read by the safe constructor exactly as float() reads it
_PLAIN_BOOLS = {"true": True, "false": False}


class _ComposingLoader(_Loader):  # type: ignore[valid-type,misc]
    """The safe loader with cheaper resolver hooks: the parser calls them for every node.

    The safe loader has no path resolvers, so descending and ascending do nothing and a node's tag depends only
    on its kind and text; the implicit resolvers are looked up once by first character. Tags come out the same.
    """

    _by_first: dict[str, tuple[tuple[str, re.Pattern[str]], ...]] = {
        first: tuple(resolvers) + tuple(_Loader.yaml_implicit_resolvers.get(None, ()))
        for first, resolvers in _Loader.yaml_implicit_resolvers.items()
        if first is not None
    }
    _wildcard = tuple(_Loader.yaml_implicit_resolvers.get(None, ()))
    _plain_tags: dict[str, str] = {}  # short plain scalars seen before (keys, words) -> tag

    def descend_resolver(self, current_node: Any, current_index: Any) -> None:
        pass

    def ascend_resolver(self) -> None:
        pass

    def resolve(self, kind: Any, value: Any, implicit: Any) -> Any:
        if kind is yaml.ScalarNode:
            if implicit[0]:
                tag = self._plain_tags.get(value)
                if tag is not None:
                    return tag
                tag = _STR
                for candidate, regexp in self._by_first.get(value[:1], self._wildcard):
                    if regexp.match(value):
                        tag = candidate
                        break
                if len(value) <= 24:
                    if len(self._plain_tags) >= 20_000:
                        self._plain_tags.clear()
                    self._plain_tags[value] = tag
                return tag
            return _STR
        if kind is yaml.SequenceNode:
            return _SEQ
        if kind is yaml.MappingNode:
            return _MAP
        return None


#: the shortcuts above hold for the safe loader as PyYAML ships it; fall back to it if it was ever extended
_Composer: type[yaml.SafeLoader] = (
    _Loader if _Loader.yaml_path_resolvers or _Loader.DEFAULT_SCALAR_TAG != _STR else _ComposingLoader
)


@dataclass
class YamlDocument:
    """A parsed record: the plain data and the line of each path in it."""

    path: str
    data: Any
    lines: dict[PathKey, int] = field(default_factory=dict)

    def line_of(self, loc: Sequence[Hashable]) -> int:
        """The line of ``loc``, or of the nearest enclosing path that has one."""
        key = tuple(loc)
        while key:
            line = self.lines.get(key)
            if line is not None:
                return line
            key = key[:-1]
        return self.lines.get((), 1)


class YamlProblem(Exception):
    """The file could not be read as a record; ``problems`` says where and why."""

    def __init__(self, *problems: Problem):
        super().__init__("; ".join(str(p) for p in problems))
        self.problems = list(problems)


def _decode(path: str, raw: bytes) -> str:
    if len(raw) > MAX_RECORD_BYTES:
        raise YamlProblem(
            Problem(
                path,
                0,
                "",
                f"file is {len(raw) / 1e6:.1f} MB; a record may be at most {MAX_RECORD_BYTES / 1e6:.0f} MB "
                "(put per-order data in an orders file next to the record)",
            )
        )
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise YamlProblem(
            Problem(path, line, "", f"not valid UTF-8 (byte 0x{raw[exc.start]:02x}); save the file as UTF-8")
        ) from None
    if text.startswith("\ufeff"):
        text = text[1:]
    return text


def parse_yaml(path: str, raw: bytes) -> YamlDocument:
    """Parse the bytes of one record. Raises :class:`YamlProblem` for anything that is not a clean mapping."""
    text = _decode(path, raw)
    if not text.strip():
        raise YamlProblem(Problem(path, 0, "", "file is empty; start from `archive new`"))
    try:
        loader = _Composer(text)
        try:
            root = loader.get_single_node()
        finally:
            loader.dispose()
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line = mark.line + 1 if mark is not None else 0
        what = exc.problem or str(exc)
        raise YamlProblem(Problem(path, line, "", f"YAML syntax: {what}")) from None
    except yaml.YAMLError as exc:
        raise YamlProblem(Problem(path, 0, "", f"YAML syntax: {exc}")) from None
    if root is None:
        raise YamlProblem(Problem(path, 0, "", "file holds no YAML document; start from `archive new`"))
    if not isinstance(root, yaml.MappingNode):
        kind = "a list" if isinstance(root, yaml.SequenceNode) else "a single value"
        raise YamlProblem(
            Problem(path, root.start_mark.line + 1, "", f"the file is {kind}; a record is a mapping of fields")
        )
    doc = YamlDocument(path, None, {(): root.start_mark.line + 1})
    builder = _Builder(doc)
    doc.data = builder.build(root, ())
    if builder.problems:
        raise YamlProblem(*builder.problems)
    return doc


def dotted(loc: Sequence[Hashable]) -> str:
    """``("arms", 0, "visitors")`` -> ``arms[0].visitors``."""
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out


class _Builder:
    """Turns composed nodes into plain values, recording lines and refusing unknown tags."""

    def __init__(self, doc: YamlDocument):
        self.doc = doc
        self.problems: list[Problem] = []
        self.constructor = yaml.SafeLoader.__new__(yaml.SafeLoader)
        yaml.constructor.SafeConstructor.__init__(self.constructor)

    def _problem(self, node: yaml.Node, loc: PathKey, message: str) -> None:
        self.problems.append(Problem(self.doc.path, node.start_mark.line + 1, dotted(loc), message))

    def build(self, node: yaml.Node, loc: PathKey) -> Any:
        # Scalar children are read in place rather than through a call to build: most nodes are scalars.
        scalar_node = yaml.ScalarNode
        if isinstance(node, scalar_node):
            return self._scalar(node, loc)
        lines = self.doc.lines
        if isinstance(node, yaml.SequenceNode):
            if node.tag != _SEQ:
                self._problem(node, loc, f"YAML tag {node.tag!r} is not allowed in a record")
                return None
            items = []
            for i, child in enumerate(node.value):
                here = loc + (i,)
                lines[here] = child.start_mark.line + 1
                if isinstance(child, scalar_node):
                    items.append(child.value if child.tag == _STR else self._scalar(child, here))
                else:
                    items.append(self.build(child, here))
            return items
        if isinstance(node, yaml.MappingNode):
            if node.tag != _MAP:
                self._problem(node, loc, f"YAML tag {node.tag!r} is not allowed in a record")
                return None
            out: dict[Any, Any] = {}
            for key_node, value_node in node.value:
                if not isinstance(key_node, scalar_node):
                    self._problem(key_node, loc, "a key must be a plain word, not a list or mapping")
                    continue
                key = key_node.value if key_node.tag == _STR else self._scalar(key_node, loc)
                if isinstance(key, str) and key == "<<":
                    self._problem(key_node, loc, "YAML merge keys (<<) are not supported in records; write fields out")
                    continue
                here = loc + (key,)
                if key in out:
                    first = lines.get(here, 0)
                    self._problem(key_node, here, f"duplicate key (first given on line {first}); keep one")
                    continue
                lines[here] = key_node.start_mark.line + 1
                if isinstance(value_node, scalar_node):
                    out[key] = value_node.value if value_node.tag == _STR else self._scalar(value_node, here)
                else:
                    out[key] = self.build(value_node, here)
            return out
        raise TypeError(f"unexpected YAML node {node!r}")  # pragma: no cover - composer yields only these

    def _scalar(self, node: yaml.ScalarNode, loc: PathKey) -> Any:
        tag, text = node.tag, node.value
        if tag == _STR:
            return text
        # Common plain forms, read as the safe constructor reads them; anything else takes the general way below.
        if tag == _INT:
            if len(text) <= 18 and text.isascii() and text.isdigit() and (text[0] != "0" or text == "0"):
                return int(text)
        elif tag == _FLOAT:
            if _PLAIN_FLOAT.match(text):
                number = float(text)
                if math.isfinite(number):
                    return number
        elif tag == _BOOL:
            flag = _PLAIN_BOOLS.get(text)
            if flag is not None:
                return flag
        if tag not in _SAFE_TAGS:
            self._problem(node, loc, f"YAML tag {node.tag!r} is not allowed in a record; remove it")
            return None
        try:
            value = self.constructor.yaml_constructors[node.tag](self.constructor, node)
        except (yaml.YAMLError, ValueError) as exc:
            self._problem(node, loc, f"cannot read {node.value!r}: {exc}")
            return None
        except (KeyError, IndexError, AttributeError, TypeError):  # e.g. `!!bool maybe`, `!!int ""`, `!!timestamp x`
            self._problem(node, loc, f"cannot read {node.value!r} as {tag.rsplit(':', 1)[-1]}")
            return None
        if isinstance(value, float) and not math.isfinite(value):
            self._problem(node, loc, f"{node.value!r} is not a finite number")
            return None
        return value


def read_yaml(path: Path) -> YamlDocument:
    return parse_yaml(str(path), path.read_bytes())
