"""A memo: one neutral model of headings, paragraphs and tables, rendered as Markdown or in the terminal."""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass
class Table:
    headers: list[str]
    rows: list[list[str]]


@dataclass
class Section:
    heading: str
    paragraphs: list[str] = field(default_factory=list)
    tables: list[Table] = field(default_factory=list)
    bullets: list[str] = field(default_factory=list)
    details: bool = False  # the statistics behind the answer: shown on request (--details) in the terminal


@dataclass
class Memo:
    title: str
    lead: list[str]
    sections: list[Section]
