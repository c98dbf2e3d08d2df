"""Reading the exports teams have: per-arm results and order-level files, as spreadsheets and shop systems write them.

A file may separate its columns by commas, semicolons or tabs, and may write decimals with a comma (``15500,5``,
``1.234,56``: the usual export of European spreadsheets). Both are recognised from the file itself. Every problem
names the file, the line and the column. Nothing here writes a file.
"""

from __future__ import annotations

import csv
import io
import math
import re
from collections import defaultdict
from dataclasses import dataclass, field
from pathlib import Path

from archive.records.problems import Problem

DELIMITERS = (",", ";", "\t")
ID_COLUMNS = ("order_id", "visitor_id")
_DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab"}

# a number as written with a decimal comma: 1234,5 or 1.234,5 or 1 234,5 (thousands by dots or spaces)
_COMMA_DECIMAL = re.compile(r"^[+-]?(?:\d{1,3}(?:[. \u00a0\u202f]\d{3})+|\d+)(?:,\d+)?$")
# a number as written with a decimal point: 1234.5 or 1,234.5
_POINT_DECIMAL = re.compile(r"^[+-]?(?:\d{1,3}(?:,\d{3})+|\d+)(?:\.\d+)?(?:[eE][+-]?\d+)?$")
# a whole number with thousands grouped by dots, commas or spaces (a count cannot have decimals)
_GROUPED_WHOLE = re.compile(r"^[+-]?\d{1,3}(?:[., \u00a0\u202f]\d{3})+$")
_HAS_DECIMAL_COMMA = re.compile(r"^[+-]?[\d. \u00a0\u202f]*\d,\d+$")


class ExportError(ValueError):
    """A file that cannot be read as asked; ``problems`` locate each fault."""

    def __init__(self, problems: list[Problem]):
        super().__init__("\n".join(str(p) for p in problems))
        self.problems = problems


@dataclass
class Sheet:
    """A delimited file read as text: normalised column names and rows with their line numbers."""

    path: str
    delimiter: str
    decimal_comma: bool
    columns: list[str]
    rows: list[tuple[int, dict[str, str]]] = field(default_factory=list)

    def number(self, line: int, column: str, text: str, whole: bool = False) -> float | int:
        """A cell as a number in this file's decimal style; :class:`ExportError` with the place if it is not."""
        grouped = _GROUPED_WHOLE.match(text.strip())
        value = parse_number(text, self.decimal_comma) if not (whole and grouped) else float(_digits(text))
        if value is None or (whole and not float(value).is_integer()):
            kind = "a whole number" if whole else "a number"
            style = "decimal comma" if self.decimal_comma else "decimal point"
            raise ExportError([Problem(self.path, line, column, f"{text!r} is not {kind} (file read with {style})")])
        return int(value) if whole else value

    def describe(self) -> str:
        style = "decimal comma" if self.decimal_comma else "decimal point"
        return f"{_DELIMITER_NAMES[self.delimiter]}-separated, {style}"


def _digits(text: str) -> str:
    return ("-" if text.strip().startswith("-") else "") + re.sub(r"\D", "", text)


def column_name(text: str) -> str:
    """``Revenue Sum of Squares`` and ``revenue-sum-of-squares`` are both ``revenue_sum_of_squares``."""
    return "_".join(re.findall(r"[^\W_]+", text.strip().casefold()))


def parse_number(text: str, decimal_comma: bool) -> float | None:
    """A finite number written with a decimal comma or point (and optional thousands separators), else None."""
    text = text.strip()
    if decimal_comma:
        if not _COMMA_DECIMAL.match(text):
            return None
        text = re.sub(r"[. \u00a0\u202f]", "", text).replace(",", ".")
    else:
        if not _POINT_DECIMAL.match(text):
            return None
        text = text.replace(",", "")
    value = float(text)
    return value if math.isfinite(value) else None


def _sniff_delimiter(first_line: str) -> str:
    """The delimiter of the header line: the one of comma, semicolon and tab it holds most often."""
    counts = {d: first_line.count(d) for d in DELIMITERS}
    best = max(DELIMITERS, key=lambda d: counts[d])
    return best if counts[best] else ","


def read_sheet(path: Path, what: str, required: tuple[str, ...], numeric: tuple[str, ...]) -> Sheet:
    """Read a delimited file whose header names at least ``required``; ``numeric`` columns decide the decimal
    style (a decimal comma only where the columns are not separated by commas)."""
    where = str(path)
    try:
        text = path.read_bytes().decode("utf-8-sig")
    except FileNotFoundError:
        raise ExportError([Problem(where, 0, "", f"{what} not found")]) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ExportError([Problem(where, 0, "", f"cannot read the {what} as UTF-8 text: {exc}")]) from None
    lines = text.splitlines()
    if not lines or not lines[0].strip():
        raise ExportError([Problem(where, 1, "", f"the {what} is empty; expected a header {','.join(required)}")])
    delimiter = _sniff_delimiter(lines[0])
    reader = csv.reader(io.StringIO(text), delimiter=delimiter)
    columns = [column_name(c) for c in next(reader)]
    missing = [c for c in required if c not in columns]
    if missing:
        raise ExportError(
            [
                Problem(
                    where,
                    1,
                    "",
                    f"the header lacks {', '.join(missing)}; expected the columns {', '.join(required)} "
                    f"(found {', '.join(columns) or 'none'}, {_DELIMITER_NAMES[delimiter]}-separated)",
                )
            ]
        )
    rows: list[tuple[int, dict[str, str]]] = []
    problems: list[Problem] = []
    for cells in reader:
        line = reader.line_num
        if not cells or all(not c.strip() for c in cells):
            continue
        if len(cells) != len(columns):
            problems.append(Problem(where, line, "", f"{len(cells)} cells where the header has {len(columns)}"))
            continue
        rows.append((line, {c: v.strip() for c, v in zip(columns, cells, strict=True)}))
    if problems:
        raise ExportError(problems)
    decimal_comma = delimiter != "," and any(
        _HAS_DECIMAL_COMMA.match(row.get(c, "")) for _, row in rows for c in numeric
    )
    return Sheet(where, delimiter, decimal_comma, columns, rows)


@dataclass(frozen=True)
class ArmTotals:
    """What an order-level export says about one arm."""

    arm: str
    orders: int
    revenue: float
    revenue_sum_of_squares: float
    buyers: int | None  # distinct visitors with an order (known with visitor ids only)


@dataclass(frozen=True)
class OrderExport:
    """An order-level export: the totals per arm and the rows in the form an ``orders_file`` has."""

    path: str
    id_column: str
    totals: dict[str, ArmTotals]
    rows: list[tuple[str, str, float]]  # (arm, id, value) in file order
    layout: str

    def orders_csv(self) -> str:
        """The rows as an orders file: comma-separated, decimal point, header ``arm,<id column>,value``."""
        out = io.StringIO()
        writer = csv.writer(out, lineterminator="\n")
        writer.writerow(["arm", self.id_column, "value"])
        writer.writerows([arm, ident, repr(value)] for arm, ident, value in self.rows)
        return out.getvalue()


def read_order_export(path: Path) -> OrderExport:
    """Orders, revenue and the sum over visitors of squared revenue per arm, from one row per order.

    With ``visitor_id`` a visitor's orders are added up before squaring (the sum of squares the revenue variance
    needs). With ``order_id`` alone every order counts as its own visitor: the sum of squares is then a lower
    bound when some visitors ordered more than once.
    """
    sheet = read_sheet(path, "orders export", ("arm", "value"), ("value",))
    id_column = next((c for c in ID_COLUMNS if c in sheet.columns), None)
    if id_column is None:
        raise ExportError(
            [Problem(sheet.path, 1, "", "the header lacks an id column: order_id or visitor_id (one row per order)")]
        )
    problems: list[Problem] = []
    rows: list[tuple[str, str, float]] = []
    for line, row in sheet.rows:
        arm, ident = row["arm"], row[id_column]
        if not arm:
            problems.append(Problem(sheet.path, line, "arm", "empty arm name"))
        if not ident:
            problems.append(Problem(sheet.path, line, id_column, "empty id"))
        try:
            value = float(sheet.number(line, "value", row["value"]))
        except ExportError as exc:
            problems += exc.problems
            continue
        if value < 0:
            problems.append(Problem(sheet.path, line, "value", f"{row['value']!r}: an order value is at least 0"))
        if arm and ident and value >= 0:
            rows.append((arm, ident, value))
    if not rows and not problems:
        problems.append(Problem(sheet.path, 2, "", "no orders in the export"))
    if problems:
        raise ExportError(problems)
    values: dict[str, list[float]] = defaultdict(list)
    per_visitor: dict[str, dict[str, float]] = defaultdict(lambda: defaultdict(float))
    for arm, ident, value in rows:
        values[arm].append(value)
        per_visitor[arm][ident] += value
    totals = {}
    for arm, amounts in values.items():
        visitor_totals = list(per_visitor[arm].values()) if id_column == "visitor_id" else amounts
        totals[arm] = ArmTotals(
            arm=arm,
            orders=len(amounts),
            revenue=round(math.fsum(amounts), 6),
            revenue_sum_of_squares=round(math.fsum(v * v for v in visitor_totals), 6),
            buyers=len(per_visitor[arm]) if id_column == "visitor_id" else None,
        )
    return OrderExport(sheet.path, id_column, totals, rows, sheet.describe())
