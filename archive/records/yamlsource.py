"""Reading one YAML record safely, keeping the line of every field.

PyYAML's safe loader silently keeps the last of two equal keys and forgets where each value stood. This module
composes the document with the C (libyaml) safe parser when it is available, then builds plain Python values
itself, so that it can

* refuse any tag that the safe constructor does not know (no object is ever constructed from a tag),
* report duplicate keys with both lines,
* remember the 1-based line of every mapping key and sequence item, addressed by its path
  (``("arms", 0, "visitors")``), so that validation errors can name the line a person must edit,
* read numbers as YAML 1.2 does (decimal digits, a dot, an exponent), leaving the YAML 1.1 forms that other tools
  read differently (``031722`` as octal, ``8:48:42`` as base 60, hex, binary, ``1_000``) as text with a note, so
  that a count or an amount written that way is refused with a reason instead of being misread,
* enforce hard limits before the work: the file size, the nesting depth and how far aliases may expand.

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
#: The deepest a record goes is segments.<dimension>.<value>.<arm>.<count> (5 levels); deeper input is refused.
MAX_DEPTH = 16
#: Aliases (*name) may repeat what an anchor (&name) holds, but the expanded record may be at most this many times
#: the size written in the file, plus a small allowance (sizes count values and their characters).
ALIAS_FACTOR = 4
ALIAS_ALLOWANCE = 10_000
#: Integers with more digits than this are refused before they are converted (the field limits are far lower).
MAX_DIGITS = 100

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
# YAML 1.2 (core schema) numbers; the only forms a count or an amount may take in a record
_DECIMAL_INT = re.compile(r"[-+]?[0-9]+\Z")
_DECIMAL_FLOAT = re.compile(r"[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)(?:[eE][-+]?[0-9]+)?\Z")
# Number forms that YAML 1.1 leaves as text but 1.2 reads as numbers (1e+27, 1.5e3, 0o17): resolved as numbers
# here so that they are read (floats) or refused with a reason (octal), not passed on as words.
_YAML12_ONLY = (
    (_FLOAT, re.compile(r"[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)[eE][-+]?[0-9]+\Z")),
    (_INT, re.compile(r"[-+]?0o[0-7]+\Z")),
)
_NOT_FINITE = frozenset({".inf", "+.inf", "-.inf", ".nan"})
#: tags a key may carry: the ones plain scalars resolve to (a key is read as its text)
_KEY_TAGS = frozenset(tag for resolvers in yaml.SafeLoader.yaml_implicit_resolvers.values() for tag, _ in resolvers) | {
    _STR,
    _INT,
    _FLOAT,
}
_YAML11_FLOAT = next(regexp for tag, regexp in yaml.SafeLoader.yaml_implicit_resolvers["1"] if tag == _FLOAT)


class _ComposingLoader(_Loader):  # type: ignore[valid-type,misc]
    """The safe loader with cheaper resolver hooks: the parser calls them for every node.

    The safe loader has no path resolvers, so descending and ascending do nothing and a node's tag depends only
    on its kind and text; the implicit resolvers are looked up once by first character. Tags come out the same.
    """

    _by_first: dict[str, tuple[tuple[str, re.Pattern[str]], ...]] = {
        first: tuple(resolvers)
        + (_YAML12_ONLY if first in "+-.0123456789" else ())
        + tuple(_Loader.yaml_implicit_resolvers.get(None, ()))
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
    """A parsed record: the plain data and the line of each path in it.

    ``number_notes`` holds, by path, why a value that looks like a number was kept as text (``031722``,
    ``8:48:42``, ``0x1f``): where the record expects a number, that is the reason it is refused.
    """

    path: str
    data: Any
    lines: dict[PathKey, int] = field(default_factory=dict)
    number_notes: dict[PathKey, str] = field(default_factory=dict)
    #: floats in forms only YAML 1.2 reads as numbers (``1e+27``, ``1.5e3``), by path, with the text written:
    #: where the record expects text, the text is what the user meant (see :meth:`as_text`)
    float_texts: dict[PathKey, str] = field(default_factory=dict)

    def line_of(self, loc: Sequence[Hashable]) -> int:
        """The line of ``loc``, or of the nearest enclosing path that has one."""
        key = tuple(loc)
        while key:
            line = self.lines.get(key)
            if line is not None:
                return line
            key = key[:-1]
        return self.lines.get((), 1)

    def as_text(self, locs: Sequence[PathKey]) -> bool:
        """Put back the text written for the YAML 1.2 floats at ``locs`` (a field that wants text got one).
        Returns whether anything changed."""
        changed = False
        for loc in locs:
            text = self.float_texts.pop(loc, None)
            if text is None or not loc:
                continue
            holder = self.data
            try:
                for part in loc[:-1]:
                    holder = holder[part]
                holder[loc[-1]] = text
            except (KeyError, IndexError, TypeError):  # pragma: no cover - the paths come from the data itself
                continue
            changed = True
        return changed


class YamlProblem(Exception):
    """The file could not be read as a record; ``problems`` says where and why."""

    def __init__(self, *problems: Problem):
        super().__init__("; ".join(str(p) for p in problems))
        self.problems = list(problems)


def too_large(path: str, size: int) -> Problem:
    """The problem of a record file of ``size`` bytes, over :data:`MAX_RECORD_BYTES`."""
    return Problem(
        path,
        0,
        "",
        f"file is {size / 1e6:.1f} MB; a record may be at most {MAX_RECORD_BYTES / 1e6:.0f} MB "
        "(the size limit; put per-order data in an orders file next to the record)",
    )


def _decode(path: str, raw: bytes) -> str:
    if len(raw) > MAX_RECORD_BYTES:
        raise YamlProblem(too_large(path, len(raw)))
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        raise YamlProblem(Problem(path, 0, "", "the file is saved as UTF-16; save it as UTF-8"))
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise YamlProblem(
            Problem(path, line, "", f"not valid UTF-8 (byte 0x{raw[exc.start]:02x}); save the file as UTF-8")
        ) from None
    if text.startswith("\ufeff"):  # a byte-order mark, as some editors write: accepted
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
    except RecursionError:  # pragma: no cover - only the pure-Python composer recurses; libyaml limits depth itself
        raise YamlProblem(Problem(path, 0, "", f"nested more than {MAX_DEPTH} levels deep (the limit)")) from None
    if root is None:
        raise YamlProblem(Problem(path, 0, "", "file holds no YAML document; start from `archive new`"))
    if not isinstance(root, yaml.MappingNode):
        kind = "a list" if isinstance(root, yaml.SequenceNode) else "a single value"
        raise YamlProblem(
            Problem(path, root.start_mark.line + 1, "", f"the file is {kind}; a record is a mapping of fields")
        )
    if "&" in text:  # anchors, so perhaps aliases: measure what they expand to before building anything
        _check_aliases(path, root)
    doc = YamlDocument(path, None, {(): root.start_mark.line + 1})
    builder = _Builder(doc)
    doc.data = builder.build(root, ())
    if builder.problems:
        raise YamlProblem(*builder.problems)
    return doc


def _children(node: yaml.Node) -> list[yaml.Node]:
    if isinstance(node, yaml.SequenceNode):
        return list(node.value)
    if isinstance(node, yaml.MappingNode):
        return [part for pair in node.value for part in pair]
    return []


def _check_aliases(path: str, root: yaml.Node) -> None:
    """Refuse a document whose aliases refer to their own container or expand it past the alias limit.

    The composer shares one node for an anchor and each of its aliases, so the document is a graph. Its size as
    written counts each node once; its expanded size counts a node each time it is reached. Both are summed
    bottom-up over the graph without recursion and without building anything, so a 1 KB "billion laughs" costs
    microseconds here. A size is a node plus the characters of a scalar.
    """
    expanded: dict[int, int] = {}  # id(node) -> expanded size of the subtree
    written = 0
    open_nodes: set[int] = set()
    stack: list[tuple[yaml.Node, bool]] = [(root, False)]
    while stack:
        node, closing = stack.pop()
        key = id(node)
        if closing:
            open_nodes.discard(key)
            expanded[key] = 1 + sum(expanded[id(child)] for child in _children(node))
            continue
        if key in expanded:
            continue
        if key in open_nodes:
            raise YamlProblem(
                Problem(
                    path,
                    node.start_mark.line + 1,
                    "",
                    "an alias (*name) refers to the list or mapping that holds it (the anchor is on this line); "
                    "a record cannot contain itself",
                )
            )
        if isinstance(node, yaml.ScalarNode):
            written += 1 + len(node.value)
            expanded[key] = 1 + len(node.value)
            continue
        written += 1
        open_nodes.add(key)
        stack.append((node, True))
        stack.extend((child, False) for child in _children(node) if id(child) not in expanded)
    total = expanded[id(root)]
    limit = ALIAS_FACTOR * written + ALIAS_ALLOWANCE
    if total > limit:
        shown = f"{total:,}" if total < 10**15 else f"about 10^{len(str(total)) - 1}"
        raise YamlProblem(
            Problem(
                path,
                root.start_mark.line + 1,
                "",
                f"aliases (*name) would expand this record to a size of {shown} from the {written:,} written; "
                f"the alias limit is {ALIAS_FACTOR} times the written size plus {ALIAS_ALLOWANCE:,} ({limit:,}): "
                "write the values out instead",
            )
        )


def dotted(loc: Sequence[Hashable]) -> str:
    """``("arms", 0, "visitors")`` -> ``arms[0].visitors``; a key with a line break or another unprintable
    character is shown quoted, so that a problem stays on one line, and a long key is cut short."""
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            text = part if isinstance(part, str) and part.isprintable() else repr(part)
            if len(text) > 60:  # a key pasted by mistake: enough of it to find it
                text = text[:57] + "..."
            out += ("." if out else "") + text
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
        if len(loc) >= MAX_DEPTH:  # the guard that keeps the recursion short, whatever the input
            self._problem(node, loc, f"nested more than {MAX_DEPTH} levels deep (the limit for a record)")
            return None
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
                # Keys are names (of fields, arms, segments): read as the text written, whatever it looks like, so
                # that `2024:`, `yes:` or `031722:` name what they say; a key tagged otherwise (!!binary) is refused.
                key = key_node.value
                if key_node.tag not in _KEY_TAGS:
                    self._problem(key_node, loc, f"YAML tag {key_node.tag!r} is not allowed on a key; remove it")
                    continue
                if key == "<<":
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
        if tag in (_INT, _FLOAT):
            return self._number(node, loc)
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
        return value

    def _number(self, node: yaml.ScalarNode, loc: PathKey) -> Any:
        """A scalar that YAML 1.1 or 1.2 resolves as a number, read by YAML 1.2 rules: decimal digits only.

        Other forms are kept as the text written, with a note of how other readers would take them: a field that
        wants a number then refuses the value with that reason; a field that wants text keeps the text.
        """
        tag, text = node.tag, node.value
        if _DECIMAL_INT.match(text):
            digits = text.lstrip("+-")
            if len(digits) > MAX_DIGITS:
                self._problem(
                    node, loc, f"a number of {len(digits)} digits, beyond any count or amount (limit: {MAX_DIGITS})"
                )
                return None
            if len(digits) > 1 and digits[0] == "0":
                octal = f"octal {int(digits, 8):,}" if "8" not in digits and "9" not in digits else "an octal form"
                return self._odd_number(
                    loc,
                    text,
                    f"{text} starts with a zero, which YAML 1.1 readers take as {octal} and YAML 1.2 readers "
                    f"as {int(text):,}; write it without the leading zero",
                )
            return float(text) if tag == _FLOAT else int(text)
        if _DECIMAL_FLOAT.match(text):
            yaml12_only = not _YAML11_FLOAT.match(text)  # 1e+27, 1.5e3: text to YAML 1.1 readers
            number = float(text)
            if not math.isfinite(number):
                self._problem(node, loc, f"{text} is beyond the range of a number (about 1.8e308)")
                return None
            if yaml12_only:
                self.doc.float_texts[loc] = text
            return number
        if text.lower() in _NOT_FINITE:
            self._problem(node, loc, f"{text!r} is not a finite number")
            return None
        shown = repr(text if len(text) <= 40 else text[:37] + "...")
        if text.isprintable() and len(text) <= 40 and "'" not in text:
            shown = text
        lowered = text.lower().lstrip("+-")
        if lowered.startswith(("0x", "0o", "0b")):
            kind = {"0x": "hexadecimal", "0o": "octal", "0b": "binary"}[lowered[:2]]
            reason = f"{shown} is a {kind} number; write counts and amounts in decimal digits"
        elif ":" in text:
            reason = (
                f"{shown} is a base-60 number in YAML 1.1 (a time of day to some readers, text to others); "
                "write counts and amounts in decimal digits, and quote text"
            )
        elif "_" in text:
            reason = f"{shown}: write numbers without '_' between the digits ({shown.replace('_', '')})"
        else:
            reason = f"{shown} is not a decimal number"
        return self._odd_number(loc, text, reason)

    def _odd_number(self, loc: PathKey, text: str, reason: str) -> str:
        self.doc.number_notes[loc] = reason
        return text


def read_yaml(path: Path) -> YamlDocument:
    return parse_yaml(str(path), path.read_bytes())
