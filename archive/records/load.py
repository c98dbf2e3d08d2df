"""The one loader: finds the record files of an archive, reads and validates each (with its orders file), and checks
the archive as a whole. Nothing here writes to a file.
"""

from __future__ import annotations

import difflib
import gc
import hashlib
import os
import types
import typing
from collections.abc import Callable, Hashable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ValidationError

from archive.records.checks import RecordChecks, Summary, archive_problems
from archive.records.model import HYPOTHESIS_FORMS, Record
from archive.records.orders import Orders, orders_path
from archive.records.problems import Problem
from archive.records.yamlsource import YamlDocument, YamlProblem, dotted, parse_yaml, read_yaml

RECORD_SUFFIXES = (".yaml", ".yml")


@dataclass
class LoadedRecord:
    path: str
    record: Record
    doc: YamlDocument
    orders: Orders | None = None  # the record's orders file, read and checked

    @property
    def summary(self) -> Summary:
        return Summary.of(self.path, self.record)


@dataclass
class CheckReport:
    records: list[LoadedRecord] = field(default_factory=list)
    problems: list[Problem] = field(default_factory=list)
    files: int = 0


def record_files(records_dir: Path) -> list[Path]:
    """The record files of an archive folder (top level only), sorted."""
    if not records_dir.is_dir():
        raise FileNotFoundError(f"records folder {records_dir} does not exist; create it or pass --records")
    found = [p for p in records_dir.iterdir() if p.suffix in RECORD_SUFFIXES and p.is_file()]
    # Paths in one folder sort as their names do (case-folded where the OS folds case); the key spares the
    # slow comparison of whole paths.
    return sorted(found, key=lambda p: os.path.normcase(p.name))


def load_record(
    path: Path, raw: bytes | None = None, expect_stem: bool = True
) -> tuple[LoadedRecord | None, list[Problem]]:
    """Parse and check one record file. Returns the record (None if it cannot be built) and its problems.
    ``expect_stem=False`` (a draft read from any file) makes an id that differs from the file name a warning."""
    where = str(path)
    try:
        doc = parse_yaml(where, path.read_bytes() if raw is None else raw)
    except YamlProblem as exc:
        return None, exc.problems
    try:
        record = Record.model_validate(doc.data)
    except ValidationError as exc:
        return None, [_from_pydantic(doc, err) for err in exc.errors(include_url=False)]
    checks = RecordChecks(path, doc, record, expect_stem)
    problems = checks.run()
    return LoadedRecord(where, record, doc, checks.orders), problems


def _from_pydantic(doc: YamlDocument, err: Any) -> Problem:
    loc: tuple[Hashable, ...] = tuple(p for i, p in enumerate(err["loc"]) if not _is_form_tag(err["loc"], i))
    kind = err["type"]
    if kind == "extra_forbidden":
        known = _fields_at(loc[:-1])
        near = difflib.get_close_matches(str(loc[-1]), known, n=1, cutoff=0.6)
        hint = f"; did you mean {near[0]!r}?" if near else f"; known fields here: {', '.join(known)}"
        message = f"unknown field {loc[-1]!r}{hint}"
    elif kind == "missing":
        message = "required field is missing"
    else:
        shown = repr(err.get("input"))
        if len(shown) > 40:
            shown = shown[:37] + "..."
        message = f"{err['msg']} (got {shown})"
        if kind == "string_type" and isinstance(err.get("input"), bool):
            message += "; YAML reads yes/no/on/off as true/false: put the word in quotes"
        if kind == "date_type" and isinstance(err.get("input"), str):
            message = f"expected a date written YYYY-MM-DD without quotes (got {shown})"
    return Problem(doc.path, doc.line_of(loc), dotted(loc), message)


def _is_form_tag(loc: Sequence[Hashable], i: int) -> bool:
    """True for the tag pydantic puts after ``hypothesis`` to say which of its forms was tried."""
    return i == 1 and loc[0] == "hypothesis" and loc[1] in HYPOTHESIS_FORMS


def _fields_at(loc: Sequence[Hashable]) -> list[str]:
    """Field names of the model found at ``loc`` inside a record (for 'did you mean')."""
    annotation: Any = Record
    for part in loc:
        annotation = _unwrap(annotation)
        if isinstance(annotation, type) and issubclass(annotation, BaseModel):
            info = annotation.model_fields.get(str(part))
            if info is None:
                return []
            annotation = info.annotation
        else:
            args = typing.get_args(annotation)
            annotation = args[-1] if args else None
    annotation = _unwrap(annotation)
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return sorted(annotation.model_fields)
    return []


def _unwrap(annotation: Any) -> Any:
    """Strip ``X | None``."""
    if isinstance(annotation, types.UnionType) or typing.get_origin(annotation) is typing.Union:
        args = [a for a in typing.get_args(annotation) if a is not type(None)]
        return args[0] if len(args) == 1 else annotation
    return annotation


@contextmanager
def gc_paused() -> Iterator[None]:
    """Pause the cyclic garbage collector while records pile up in memory.

    Loading an archive keeps every record (and its lines) alive until the archive-wide checks have run: millions
    of small objects without reference cycles, which the collector would otherwise scan again and again (a third
    of the time of a large check). Reference counting frees memory as usual meanwhile. Use as a decorator or in
    a ``with`` statement.
    """
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


@gc_paused()
def check_archive(records_dir: Path, progress: Callable[[int], None] | None = None) -> CheckReport:
    """Check every record of a folder. Never writes."""
    report = CheckReport()
    paths = record_files(records_dir)
    report.files = len(paths)
    failed: list[str] = []
    for path in paths:
        loaded, problems = load_record(path)
        report.problems.extend(problems)
        if loaded is not None:
            report.records.append(loaded)
        else:
            failed.append(path.stem)
        if progress is not None:
            progress(1)
    docs = {lr.path: lr.doc for lr in report.records}
    summaries = (lr.summary for lr in report.records)
    report.problems.extend(archive_problems(summaries, lambda p, loc: docs[p].line_of(loc), failed))
    report.problems.sort()
    return report


# --- what changed: stamps, the one hasher, lines of unchanged files -------------------------------------


def file_stamp(record_path: Path, orders_file: str | None) -> str:
    """``size:mtime_ns:inode`` of a record file and of its orders file: when it is unchanged since the last sync,
    the file is not read again (``--full`` reads every file anyway)."""
    parts = [_stamp(record_path)]
    if orders_file:
        target = orders_path(record_path, orders_file)
        parts.append(_stamp(target) if target is not None else "none")
    return "|".join(parts)


def _stamp(path: Path) -> str:
    try:
        st = path.stat()
    except OSError:
        return "missing"
    return f"{st.st_size}:{st.st_mtime_ns}:{st.st_ino}"


def content_hash(record_path: Path, raw: bytes, orders_file: str | None) -> str:
    """SHA-256 of a record's bytes and of its orders file's bytes: the key of everything derived from it."""
    digest = hashlib.sha256(raw).hexdigest()
    if orders_file:
        target = orders_path(record_path, orders_file)
        if target is not None and target.is_file():
            digest += ":" + hashlib.sha256(target.read_bytes()).hexdigest()
        else:
            digest += ":missing"
    return digest


class LineFinder:
    """Lines of fields for archive-wide problems. Documents at hand are used; other files are parsed only when a
    problem needs a line in them."""

    def __init__(self, docs: dict[str, YamlDocument] | None = None):
        self.docs = dict(docs or {})

    def __call__(self, path: str, loc: Sequence[Hashable]) -> int:
        doc = self.docs.get(path)
        if doc is None:
            try:
                doc = self.docs[path] = read_yaml(Path(path))
            except YamlProblem:
                return 0
        return doc.line_of(loc)
