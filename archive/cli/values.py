"""Values typed on the command line that need more than a type: shares written as 5% or 0.05."""

from __future__ import annotations

import re

import typer

_PERCENT = re.compile(r"^([+-]?\d+(?:[.,]\d+)?)\s*%$")
_FRACTION = re.compile(r"^[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)$")


def parse_share(text: str) -> float:
    """A share (a relative lift, a margin) written as a percentage (``5%``) or a fraction (``0.05``).

    A bare number of 1 or more (``5``) is refused: it could mean 5% or 500%. A decimal comma is accepted.
    """
    cleaned = text.strip()
    percent = _PERCENT.match(cleaned)
    if percent:
        return float(percent[1].replace(",", ".")) / 100
    if not _FRACTION.match(cleaned):
        raise ValueError(f"{text!r} is not a share: write a percentage such as 5% or a fraction such as 0.05")
    value = float(cleaned.replace(",", "."))
    if abs(value) >= 1:
        raise ValueError(
            f"{text!r} is ambiguous: write {cleaned}% for {cleaned} percent, or {value / 100:g} as a fraction"
        )
    return value


def share_option(text: str) -> float:
    """``parse_share`` for a typer option: a positive share, or a usage error (exit 2)."""
    try:
        value = parse_share(text)
    except ValueError as exc:
        raise typer.BadParameter(str(exc)) from None
    if value <= 0:
        raise typer.BadParameter(f"{text!r}: give a share above 0, e.g. 5% or 0.05")
    return value
