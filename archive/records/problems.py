"""Problems found in the archive: data with a location, a message and a remedy.

Every check in the package reports through :class:`Problem`; nothing prints. A problem renders as
``path:line: field: message`` and problems sort by file, then line, then field.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Literal

Severity = Literal["error", "warning"]


@dataclass(frozen=True, order=True)
class Problem:
    """One thing wrong with one place in one file. ``line`` counts from 1 (0 = the file as a whole)."""

    path: str
    line: int
    field: str
    message: str
    severity: Severity = "error"

    def __str__(self) -> str:
        prefix = "warning: " if self.severity == "warning" else ""
        return f"{self.path}:{self.line}: {self.field or '-'}: {prefix}{self.message}"

    def as_dict(self) -> dict[str, object]:
        return {
            "path": self.path,
            "line": self.line,
            "field": self.field,
            "message": self.message,
            "severity": self.severity,
        }


def errors(problems: Iterable[Problem]) -> list[Problem]:
    return [p for p in problems if p.severity == "error"]


def blocking(problems: Iterable[Problem], strict: bool = False) -> list[Problem]:
    """The problems that make a command fail: errors, and warnings too when ``strict``."""
    return [p for p in problems if strict or p.severity == "error"]


class ArchiveInvalid(Exception):
    """Raised by library functions that refuse to work on an archive with errors."""

    def __init__(self, problems: list[Problem]):
        self.problems = sorted(problems)
        n = len(errors(self.problems))
        super().__init__(f"the archive has {n} error(s); run `archive check` to see them")
