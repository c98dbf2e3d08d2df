"""Numbers and record text as people read them; rounding happens here and only here."""

from __future__ import annotations

import html
import re

STATUS_MARK = {"ok": "ok", "warning": "check", "failed": "FAILED"}


def pct(value: float | None, digits: int = 1, signed: bool = False) -> str:
    if value is None:
        return "n/a"
    return f"{value * 100:+.{digits}f}%" if signed else f"{value * 100:.{digits}f}%"


def interval(low: float | None, high: float | None, digits: int = 1) -> str:
    if low is None or high is None:
        return "n/a"
    return f"[{pct(low, digits, True)}, {pct(high, digits, True)}]"


def money(value: float | None, signed: bool = False, currency: str = "") -> str:
    """An amount with two decimals (and its currency when given): ``3.28 EUR``, ``+0.41 EUR``."""
    if value is None:
        return "n/a"
    text = f"{value:+,.2f}" if signed else f"{value:,.2f}"
    return f"{text} {currency}" if currency else text


def pvalue(p: float | None) -> str:
    if p is None:
        return "n/a"
    return "<0.0001" if p < 1e-4 else f"{p:.4f}"


def prob(p: float) -> str:
    return f"{p:.3f}"


def interval_plain(low: float, high: float) -> str:
    return f"[{pct(low, 2)}, {pct(high, 2)}]"


def interval_plain_rate(r) -> str:  # type: ignore[no-untyped-def]
    if r.low is None:
        return ""
    return f"[{pct(r.low, 0)}, {pct(r.high, 0)}]"


# Characters Markdown or an extension of the site reads as syntax anywhere in a line: backslash escapes (all in
# Python-Markdown's escapable set: code, emphasis, links and images, attribute lists, table cells); ``~`` is not
# escapable there, so it becomes a character reference (fenced code). ``<`` and ``&`` are HTML-escaped first.
_MD_SPECIAL = re.compile(r"([\\`*_{}\[\]|])")


_MD_LINE_START = re.compile(r"^(?:([#+\-=])(?=\s|$)|(>)|(\d+)([.)])(?=\s|$))")

_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f]")


def md_text(text: str) -> str:
    """Text from a record made safe for Markdown and HTML: one line, control characters dropped, HTML escaped,
    Markdown syntax escaped (so no raw HTML, link, emphasis, attribute list, code fence or table cell break
    survives)."""
    one_line = " ".join(_CONTROL.sub(" ", text).split())
    escaped = _MD_SPECIAL.sub(r"\\\1", html.escape(one_line, quote=False)).replace("~", "&#126;")
    return _MD_LINE_START.sub(lambda m: "\\" + (m[1] or m[2]) if m[1] or m[2] else m[3] + "\\" + m[4], escaped)
