"""The one loader: finds the record files of an archive, reads and validates each (with its orders file), and checks
the archive as a whole. Nothing here writes to a file.
"""

from __future__ import annotations

import difflib
import gc
import hashlib
import os
import stat
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
from archive.records.yamlsource import (
    MAX_RECORD_BYTES,
    YamlDocument,
    YamlProblem,
    dotted,
    parse_yaml,
    read_yaml,
    too_large,
)

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
    """The record files of an archive folder (top level only), sorted.

    Only regular files are listed (a symbolic link counts when it points to a file inside the folder): a folder,
    a dangling link or a link that leaves the folder named like a record is not read; `check` reports it (see
    :func:`unusable_record_paths`).
    """
    return _scan(records_dir)[0]


def unusable_record_paths(records_dir: Path) -> list[Problem]:
    """Entries of the records folder named like a record that are not read as one, each with the reason."""
    return _scan(records_dir)[1]


def _scan(records_dir: Path) -> tuple[list[Path], list[Problem]]:
    if not records_dir.is_dir():
        raise FileNotFoundError(f"records folder {records_dir} does not exist; create it or pass --records")
    found: list[Path] = []
    unusable: list[Problem] = []
    folder: Path | None = None
    with os.scandir(records_dir) as entries:
        for entry in entries:
            if not entry.name.endswith(RECORD_SUFFIXES):
                continue
            path = records_dir / entry.name
            if not entry.is_symlink() and entry.is_file():  # the common case: no further system call
                found.append(path)
                continue
            if folder is None:
                folder = records_dir.resolve()
            reason = _unusable(path, folder)
            if reason is None:
                found.append(path)
            else:
                unusable.append(Problem(str(path), 0, "", reason))
    # Paths in one folder sort as their names do (case-folded where the OS folds case); the key spares the
    # slow comparison of whole paths.
    found.sort(key=lambda p: os.path.normcase(p.name))
    return found, unusable


def _unusable(path: Path, folder: Path) -> str | None:
    """Why ``path`` (in ``folder``, resolved) is not read as a record file, or None when it is readable."""
    try:
        if path.is_symlink():
            target = Path(os.readlink(path))
            resolved = path.resolve()
            if not resolved.exists():
                return f"is a symbolic link to {target}, which does not exist; remove the link or restore the file"
            if not resolved.is_relative_to(folder):
                return (
                    f"is a symbolic link to {resolved}, outside the records folder; it is not followed "
                    "(copy the record into the folder)"
                )
        mode = path.stat().st_mode
    except (OSError, RuntimeError) as exc:  # RuntimeError: a loop of symbolic links
        return f"cannot be read ({exc.strerror if isinstance(exc, OSError) else 'a loop of symbolic links'})"
    if stat.S_ISDIR(mode):
        return "is a folder, not a record file; rename it so its name does not end in .yaml or .yml"
    if not stat.S_ISREG(mode):
        return "is not a regular file (a device, pipe or socket); it is not read"
    return None


def _read_record(path: Path) -> bytes:
    """The bytes of a record file, refusing before any read what no record can be. Raises :class:`YamlProblem`."""
    where = str(path)
    try:
        with open(path, "rb", opener=_open_plain) as handle:
            info = os.fstat(handle.fileno())
            if stat.S_ISREG(info.st_mode):
                if info.st_size > MAX_RECORD_BYTES:
                    raise YamlProblem(too_large(where, info.st_size))
                return handle.read()
    except OSError:
        pass  # a link (not followed by the first open), a folder, a missing file: looked at closer below
    reason = _unusable(path, path.parent.resolve())
    if reason is not None:
        raise YamlProblem(Problem(where, 0, "", reason))
    try:  # a link to a file inside the folder
        with open(path, "rb", opener=_open_nonblocking) as handle:
            info = os.fstat(handle.fileno())
            if info.st_size > MAX_RECORD_BYTES:
                raise YamlProblem(too_large(where, info.st_size))
            return handle.read()
    except OSError as exc:
        raise YamlProblem(Problem(where, 0, "", f"cannot be read ({exc.strerror or exc})")) from None


def _open_nonblocking(name: str, flags: int) -> int:
    """Open without waiting: a named pipe where a record should be must not hang the reader."""
    return os.open(name, flags | getattr(os, "O_NONBLOCK", 0))


def _open_plain(name: str, flags: int) -> int:
    """Open a file that is not a symbolic link, without waiting on a pipe."""
    return os.open(name, flags | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_NOFOLLOW", 0))


def load_record(
    path: Path, raw: bytes | None = None, expect_stem: bool = True
) -> tuple[LoadedRecord | None, list[Problem]]:
    """Parse and check one record file. Returns the record (None if it cannot be built) and its problems.

    Given ``raw``, those bytes are checked as the content of ``path`` and the file is not read.
    ``expect_stem=False`` (a draft read from any file) makes an id that differs from the file name a warning.
    """
    where = str(path)
    try:
        doc = parse_yaml(where, _read_record(path) if raw is None else raw)
    except YamlProblem as exc:
        return None, exc.problems
    try:
        record = _validate(doc)
    except ValidationError as exc:
        return None, [_from_pydantic(doc, err) for err in exc.errors(include_url=False)]
    checks = RecordChecks(path, doc, record, expect_stem)
    problems = checks.run()
    return LoadedRecord(where, record, doc, checks.orders), problems


_NUMBER_ERRORS = ("int_", "float_", "less_than", "greater_than", "finite_number", "multiple_of")


def _validate(doc: YamlDocument) -> Record:
    """The record model of the document. A float written in a YAML 1.2-only form (``1e3``) where the record
    wants text is read as the text written, and the record validated again."""
    try:
        return Record.model_validate(doc.data)
    except ValidationError as exc:
        if not doc.float_texts:
            raise
        wanted_text = [
            tuple(err["loc"]) for err in exc.errors(include_url=False) if not err["type"].startswith(_NUMBER_ERRORS)
        ]
        if not doc.as_text(wanted_text):
            raise
    return Record.model_validate(doc.data)


def _from_pydantic(doc: YamlDocument, err: Any) -> Problem:
    loc: tuple[Hashable, ...] = tuple(p for i, p in enumerate(err["loc"]) if not _is_form_tag(err["loc"], i))
    kind = err["type"]
    if kind == "extra_forbidden":
        known = _fields_at(loc[:-1])
        near = difflib.get_close_matches(str(loc[-1]), known, n=1, cutoff=0.6)
        hint = f"; did you mean {near[0]!r}?" if near else f"; known fields here: {', '.join(known)}"
        message = f"unknown field {_shown(loc[-1])}{hint}"
    elif kind == "missing":
        message = "required field is missing"
    elif loc in doc.number_notes:  # written in a number form that readers disagree on, kept as text
        message = doc.number_notes[loc]
    elif kind == "int_type" and isinstance(err.get("input"), float):
        message = f"expected a whole number in decimal digits, like 31722 (got {err['input']!r})"
    elif kind in ("less_than_equal", "less_than", "greater_than_equal", "greater_than") and "ctx" in err:
        bound = next(iter(err["ctx"].values()))
        sign = {"less_than_equal": "at most", "less_than": "below", "greater_than_equal": "at least"}
        shown = f"{bound:,}" if isinstance(bound, int) else f"{bound:,g}"
        message = f"must be {sign.get(kind, 'above')} {shown} (got {_shown(err.get('input'))})"
        if kind in ("less_than_equal", "less_than"):
            message += "; that is the limit for this field"
    elif kind == "too_long" and "ctx" in err and isinstance(err.get("input"), list):
        message = f"holds {len(err['input'])} items; the limit is {err['ctx'].get('max_length')}"
    else:
        shown = _shown(err.get("input"))
        message = f"{err['msg']} (got {shown})"
        if kind == "string_type" and isinstance(err.get("input"), bool):
            message += "; YAML reads yes/no/on/off as true/false: put the word in quotes"
        if kind == "date_type" and isinstance(err.get("input"), str):
            message = f"expected a date written YYYY-MM-DD without quotes (got {shown})"
    return Problem(doc.path, doc.line_of(loc), dotted(loc), message)


def _is_form_tag(loc: Sequence[Hashable], i: int) -> bool:
    """True for the tag pydantic puts after ``hypothesis`` to say which of its forms was tried."""
    return i == 1 and loc[0] == "hypothesis" and loc[1] in HYPOTHESIS_FORMS
def _shown(value: Any) -> str:
    if isinstance(value, int) and not isinstance(value, bool) and abs(value) >= 10**15:
        return f"{value:.3g}"  # a count of 31 digits reads better as 1e+30
    shown = repr(value)
    return shown if len(shown) <= 40 else shown[:37] + "..."


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
    paths, unusable = _scan(records_dir)
    report.problems.extend(unusable)
    report.files = len(paths) + len(unusable)
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
