"""Order-level revenue files: one CSV row per order, kept next to the record that names it.

Columns: ``arm``, ``value`` and an id column (``order_id`` or ``visitor_id``; with ``visitor_id`` several rows
may belong to one visitor). The file is only read.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from pathlib import Path, PurePosixPath

from archive.records.problems import Problem

ID_COLUMNS = ("order_id", "visitor_id")


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
    """Read and check an orders file. Problems name the CSV line and column."""
    where = str(path)
    try:
        text = path.read_bytes().decode("utf-8-sig")
    except FileNotFoundError:
        return None, [Problem(where, 0, "", "orders file not found")]
    except UnicodeDecodeError:
        return None, [Problem(where, 0, "", "orders file is not UTF-8 text")]
    reader = csv.reader(io.StringIO(text))
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
    for line, row in enumerate(reader, start=2):
        if not row or all(not cell.strip() for cell in row):
            continue
        if len(row) != len(columns):
            problems.append(Problem(where, line, "", f"{len(row)} cells where the header has {len(columns)}"))
            continue
        arm, raw_value, order_id = row[i_arm].strip(), row[i_value].strip(), row[i_id].strip()
        if arm not in values:
            problems.append(Problem(where, line, "arm", f"{arm!r} is not an arm of the record"))
            continue
        try:
            value = float(raw_value)
        except ValueError:
            problems.append(Problem(where, line, "value", f"{raw_value!r} is not a number"))
            continue
        if not math.isfinite(value) or value < 0:
            problems.append(Problem(where, line, "value", f"{raw_value!r} must be a finite amount >= 0"))
            continue
        if not order_id:
            problems.append(Problem(where, line, id_column, "empty id"))
            continue
        values[arm].append(value)
        ids[arm].append(order_id)
    if problems:
        return None, problems
    return Orders(where, id_column, values, ids), []
