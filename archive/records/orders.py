"""Order-level revenue files: one CSV row per order, kept next to the record that names it.

Columns: ``arm``, ``value`` and an id column (``order_id`` or ``visitor_id``; with ``visitor_id`` several rows
may belong to one visitor). The file is only read.
"""

from __future__ import annotations

import csv
import io
import os
import re
import stat
from dataclasses import dataclass
from pathlib import Path, PurePosixPath
from typing import Any

from archive.records.problems import Problem

ID_COLUMNS = ("order_id", "visitor_id")

#: Limits of one orders file: bytes, orders, and the value of one order (in any currency).
MAX_ORDERS_BYTES = 200_000_000
MAX_ORDER_ROWS = 5_000_000
MAX_ORDER_VALUE = 1e12
#: Reading stops after this many bad rows (the first ones say what is wrong).
MAX_ROW_PROBLEMS = 100

_DECIMAL = re.compile(r"[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)(?:[eE][-+]?[0-9]+)?\Z")  # no inf, nan, 0x, 1_000


@dataclass(frozen=True)
class Orders:
    """Order values by arm, in file order."""

    path: str
    id_column: str
    values: dict[str, list[float]]
    ids: dict[str, list[str]]


def orders_path(record_path: Path, name: str) -> Path | None:
    """Where an ``orders_file`` entry points, or None when it would leave the record's folder."""
    pure = PurePosixPath(name.replace("\\", "/"))
    if pure.is_absolute() or ".." in pure.parts or not pure.parts:
        return None
    return record_path.parent.joinpath(*pure.parts)


def read_orders(path: Path, arms: set[str]) -> tuple[Orders | None, list[Problem]]:
    """Read and check an orders file. Problems name the CSV line and column.

    The limits are checked before the work they guard: the file size before reading, NUL bytes and the encoding
    before parsing, the cell size and the row count while parsing, and each value's form and range. A file with
    a header and no orders gives a warning and no :class:`Orders`.
    """
    where = str(path)
    try:
        with open(path, "rb", opener=_open_nonblocking) as handle:
            info = os.fstat(handle.fileno())
            if not stat.S_ISREG(info.st_mode):
                return None, [Problem(where, 0, "", "the orders file is not a regular file")]
            if info.st_size > MAX_ORDERS_BYTES:
                return None, [
                    Problem(
                        where,
                        0,
                        "",
                        f"orders file is {info.st_size:,} bytes; the limit is {MAX_ORDERS_BYTES:,} bytes",
                    )
                ]
            raw = handle.read()
    except FileNotFoundError:
        return None, [Problem(where, 0, "", "orders file not found")]
    except OSError as exc:
        return None, [Problem(where, 0, "", f"orders file cannot be read ({exc.strerror or exc})")]
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        return None, [Problem(where, 0, "", "orders file is saved as UTF-16; save it as UTF-8")]
    nul = raw.find(b"\0")
    if nul >= 0:
        line = raw.count(b"\n", 0, nul) + 1
        return None, [Problem(where, line, "", "a NUL byte: an orders file is UTF-8 text (is it binary or UTF-16?)")]
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw.count(b"\n", 0, exc.start) + 1
        byte = raw[exc.start]
        return None, [Problem(where, line, "", f"not valid UTF-8 (byte 0x{byte:02x}); save the file as UTF-8")]
    del raw
    reader = csv.reader(io.StringIO(text))
    try:
        return _read_rows(where, reader, arms)
    except csv.Error as exc:
        return None, [Problem(where, reader.line_num, "", _csv_message(exc))]


def _open_nonblocking(name: str, flags: int) -> int:
    """Open without waiting: a named pipe put where a file should be must not hang the reader."""
    return os.open(name, flags | getattr(os, "O_NONBLOCK", 0))


def _csv_message(exc: csv.Error) -> str:
    if "field limit" in str(exc):
        return f"a cell longer than {csv.field_size_limit():,} characters (the CSV cell limit); is a quote unclosed?"
    return f"CSV syntax: {exc}"


def _read_rows(where: str, reader: Any, arms: set[str]) -> tuple[Orders | None, list[Problem]]:
    header = next(reader, None)
    if header is None:
        return None, [Problem(where, 1, "", "orders file is empty; expected a header arm,order_id,value")]
    columns = [c.strip() for c in header]
    id_column = next((c for c in ID_COLUMNS if c in columns), None)
    missing = [c for c in ("arm", "value") if c not in columns]
    if missing or id_column is None:
        need = ", ".join(missing + ([] if id_column else ["order_id or visitor_id"]))
        return None, [Problem(where, 1, "", f"header lacks {need}; expected arm,order_id,value")]
    i_arm, i_value, i_id = columns.index("arm"), columns.index("value"), columns.index(id_column)
    problems: list[Problem] = []
    values: dict[str, list[float]] = {a: [] for a in sorted(arms)}
    ids: dict[str, list[str]] = {a: [] for a in sorted(arms)}
    rows = 0
    for row in reader:
        line = reader.line_num
        if not row or all(not cell.strip() for cell in row):
            continue
        rows += 1
        if rows > MAX_ORDER_ROWS:
            problems.append(Problem(where, line, "", f"more than {MAX_ORDER_ROWS:,} orders (the limit for one file)"))
            break
        if len(problems) >= MAX_ROW_PROBLEMS:
            problems.append(Problem(where, line, "", f"more than {MAX_ROW_PROBLEMS} bad rows; stopped reading"))
            break
        if len(row) != len(columns):
            problems.append(Problem(where, line, "", f"{len(row)} cells where the header has {len(columns)}"))
            continue
        arm, raw_value, order_id = row[i_arm].strip(), row[i_value].strip(), row[i_id].strip()
        if arm not in values:
            problems.append(Problem(where, line, "arm", f"{_short(arm)!r} is not an arm of the record"))
            continue
        if not _DECIMAL.match(raw_value):
            problems.append(Problem(where, line, "value", f"{_short(raw_value)!r} is not a decimal number"))
            continue
        value = float(raw_value)
        if not 0 <= value <= MAX_ORDER_VALUE:
            problems.append(
                Problem(
                    where,
                    line,
                    "value",
                    f"{_short(raw_value)!r} must be an amount from 0 to {MAX_ORDER_VALUE:g} (the limit for one order)",
                )
            )
            continue
        if not order_id:
            problems.append(Problem(where, line, id_column, "empty id"))
            continue
        values[arm].append(value)
        ids[arm].append(order_id)
    if problems:
        return None, problems
    if rows == 0:
        return None, [
            Problem(
                where,
                1,
                "",
                "the orders file has a header but no orders; revenue is read from the record alone",
                "warning",
            )
        ]
    return Orders(where, id_column, values, ids), []


def _short(text: str) -> str:
    return text if len(text) <= 40 else text[:37] + "..."
