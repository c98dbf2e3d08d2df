"""Small SVG charts written directly, for the pages that exist once per test.

matplotlib draws the archive-level plots; a site of 10,000 tests needs thousands of per-test charts, and at
~50 ms a figure matplotlib would dominate the build. These charts are a few polylines and labels, written as
text in well under a millisecond, deterministic byte for byte.
"""

from __future__ import annotations

import html
import math
from collections.abc import Sequence

from archive.render.palette import PALETTE

WIDTH, PLOT_LEFT, PLOT_RIGHT = 640, 150, 620
FONT = 11  # px, the smallest text of every chart; pages show charts at their own size (scrolling on a phone)
# forest plots: a wide label column (titles wrap, never cut), the plot, then a note column (e.g. the verdict)
FOREST_WIDTH, FOREST_LEFT, FOREST_RIGHT, LABEL_CHARS, LINE = 780, 320, 620, 44, 13


def _esc(text: str) -> str:
    return html.escape(text, quote=True)


def _num(x: float) -> str:
    return f"{x:.1f}"


def _ticks(low: float, high: float, count: int = 6) -> list[float]:
    span = high - low
    if span <= 0:
        return [low]
    raw = span / count
    magnitude = 10 ** math.floor(math.log10(raw))
    step = next(m * magnitude for m in (1, 2, 2.5, 5, 10) if m * magnitude >= raw)
    start = math.ceil(low / step) * step
    ticks = []
    value = start
    while value <= high + 1e-12:
        ticks.append(round(value, 10))
        value += step
    return ticks


def _frame(height: int, title: str, width: int = WIDTH) -> list[str]:
    return [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width} {height}" width="{width}" height="{height}" '
        f'role="img" aria-label="{_esc(title)}" font-family="sans-serif" font-size="{FONT}">',
        f"<title>{_esc(title)}</title>",
        f'<rect width="{width}" height="{height}" fill="#ffffff"/>',
    ]


def _x_axis(
    lines: list[str],
    low: float,
    high: float,
    y: float,
    top: float,
    label: str,
    left: float = PLOT_LEFT,
    right: float = PLOT_RIGHT,
) -> None:
    def sx(v: float) -> float:
        return left + (v - low) / (high - low) * (right - left)

    lines.append(f'<line x1="{left}" y1="{_num(y)}" x2="{right}" y2="{_num(y)}" stroke="#555"/>')
    for t in _ticks(low, high):
        x = sx(t)
        lines.append(f'<line x1="{_num(x)}" y1="{_num(y)}" x2="{_num(x)}" y2="{_num(y + 4)}" stroke="#555"/>')
        lines.append(f'<text x="{_num(x)}" y="{_num(y + 16)}" text-anchor="middle">{t * 100:g}%</text>')
    if low < 0 < high:
        x0 = sx(0.0)
        lines.append(
            f'<line x1="{_num(x0)}" y1="{_num(top)}" x2="{_num(x0)}" y2="{_num(y)}" stroke="#333" '
            'stroke-dasharray="4 3"/>'
        )
    lines.append(f'<text x="{(left + right) / 2:.1f}" y="{_num(y + 32)}" text-anchor="middle">{_esc(label)}</text>')


def wrap_label(text: str, width: int) -> list[str]:
    """Words of ``text`` in lines of at most ``width`` characters (a longer word is cut, never dropped)."""
    lines: list[str] = []
    current = ""
    for word in text.split():
        while len(word) > width:
            if current:
                lines.append(current)
                current = ""
            lines.append(word[:width])
            word = word[width:]
        if current and len(current) + 1 + len(word) > width:
            lines.append(current)
            current = word
        else:
            current = f"{current} {word}" if current else word
    if current or not lines:
        lines.append(current)
    return lines


def density_chart(curves: Sequence[tuple[str, Sequence[float], Sequence[float], float, float]], title: str) -> bytes:
    """Curves as (label, lifts, densities, credible low, credible high); shaded between the credible bounds."""
    height, top, bottom = 200 + 60 + 18 * len(curves), 30, 200
    lines = _frame(height, title)
    lines.append(f'<text x="{WIDTH / 2:.1f}" y="18" text-anchor="middle" font-size="12">{_esc(title)}</text>')
    all_x = [x for _, xs, _, _, _ in curves for x in xs]
    peak = max((max(ds) for _, _, ds, _, _ in curves if len(ds)), default=1.0) or 1.0
    low, high = min(all_x), max(all_x)

    def sx(v: float) -> float:
        return PLOT_LEFT + (v - low) / (high - low) * (PLOT_RIGHT - PLOT_LEFT)

    def sy(d: float) -> float:
        return bottom - d / peak * (bottom - top)

    for i, (label, xs, ds, c_low, c_high) in enumerate(curves):
        colour = PALETTE[i % len(PALETTE)]
        inside = [(x, d) for x, d in zip(xs, ds, strict=True) if c_low <= x <= c_high]
        if inside:
            area = [f"{_num(sx(inside[0][0]))},{_num(bottom)}"]
            area += [f"{_num(sx(x))},{_num(sy(d))}" for x, d in inside]
            area.append(f"{_num(sx(inside[-1][0]))},{_num(bottom)}")
            lines.append(f'<polygon points="{" ".join(area)}" fill="{colour}" fill-opacity="0.15"/>')
        points = " ".join(f"{_num(sx(x))},{_num(sy(d))}" for x, d in zip(xs, ds, strict=True))
        lines.append(f'<polyline points="{points}" fill="none" stroke="{colour}" stroke-width="1.8"/>')
        y_label = bottom + 52 + 18 * i
        lines.append(f'<rect x="{PLOT_LEFT}" y="{y_label - 9}" width="12" height="3" fill="{colour}"/>')
        lines.append(f'<text x="{PLOT_LEFT + 18}" y="{y_label - 4}">{_esc(label)}</text>')
    _x_axis(lines, low, high, bottom, top, "relative lift in conversion against control; shaded: 95% credible")
    lines.append("</svg>")
    return ("\n".join(lines) + "\n").encode("utf-8")


def forest_chart(
    rows: Sequence[tuple[str, float, float, float, bool]],
    title: str,
    links: Sequence[str | None] | None = None,
    notes: Sequence[tuple[str, str] | None] | None = None,
) -> bytes:
    """Rows as (label, estimate, low, high, is_summary): squares with intervals, diamonds for summaries. Labels
    wrap onto as many lines as they need; ``links`` (one per row, or None) make a row's label a link; ``notes``
    (one per row: text and colour, or None) are written at the right of the row, in that colour."""
    top = 36
    wrapped = [wrap_label(label, LABEL_CHARS) for label, *_ in rows]
    heights = [max(22, LINE * len(w) + 9) for w in wrapped]
    bottom = top + sum(heights)
    height = bottom + 50
    left, right = FOREST_LEFT, FOREST_RIGHT
    lines = _frame(height, title, FOREST_WIDTH)
    lines.append(f'<text x="{FOREST_WIDTH / 2:.1f}" y="18" text-anchor="middle" font-size="12">{_esc(title)}</text>')
    values = [v for _, e, lo, hi, _ in rows for v in (e, lo, hi) if math.isfinite(v)]
    low, high = (min(values), max(values)) if values else (-0.1, 0.1)
    pad = (high - low) * 0.08 or 0.01
    low, high = min(low - pad, -pad), max(high + pad, pad)

    def sx(v: float) -> float:
        return left + (min(max(v, low), high) - low) / (high - low) * (right - left)

    y_top = float(top)
    for i, (label, estimate, lo, hi, summary) in enumerate(rows):
        y = y_top + heights[i] / 2
        first = y + 4 - LINE * (len(wrapped[i]) - 1) / 2
        spans = "".join(
            f'<tspan x="8" y="{_num(first + LINE * k)}">{_esc(part)}</tspan>' for k, part in enumerate(wrapped[i])
        )
        text = f'<text class="forest-label">{spans}</text>'
        link = links[i] if links is not None else None
        lines.append(f'<a href="{_esc(link)}"><title>{_esc(label)}</title>{text}</a>' if link else text)
        if i % 2 == 0:
            stripe = f'<rect x="0" y="{_num(y_top)}" width="{FOREST_WIDTH}" height="{heights[i]}" fill="#f6f4ef"/>'
            lines.insert(3, stripe)
        if summary:
            pts = f"{_num(sx(lo))},{_num(y)} {_num(sx(estimate))},{_num(y - 6)} {_num(sx(hi))},{_num(y)} "
            pts += f"{_num(sx(estimate))},{_num(y + 6)}"
            lines.append(f'<polygon points="{pts}" fill="#333333"/>')
        else:
            lines.append(
                f'<line x1="{_num(sx(lo))}" y1="{_num(y)}" x2="{_num(sx(hi))}" y2="{_num(y)}" '
                f'stroke="{PALETTE[0]}" stroke-width="1.6"/>'
            )
            lines.append(
                f'<rect x="{_num(sx(estimate) - 3.5)}" y="{_num(y - 3.5)}" width="7" height="7" fill="{PALETTE[0]}"/>'
            )
        note = notes[i] if notes is not None else None
        if note:
            lines.append(
                f'<text class="forest-note" x="{right + 12}" y="{_num(y + 4)}" fill="{_esc(note[1])}" '
                f'font-weight="bold">{_esc(note[0])}</text>'
            )
        y_top += heights[i]
    _x_axis(lines, low, high, bottom, top, "relative lift against control, 95% interval", left, right)
    lines.append("</svg>")
    return ("\n".join(lines) + "\n").encode("utf-8")


def bar_chart(bars: Sequence[tuple[str, int]], title: str, axis_label: str = "tests") -> bytes:
    """Vertical bars with their labels underneath (counts per period, empty periods included), and a count axis."""
    height, top, bottom, left, right = 270, 34, 200, 56, WIDTH - 20
    lines = _frame(height, title)
    lines.append(f'<text x="{WIDTH / 2:.1f}" y="18" text-anchor="middle" font-size="12">{_esc(title)}</text>')
    peak = max((n for _, n in bars), default=1) or 1
    raw = peak / 4
    magnitude = 10 ** math.floor(math.log10(raw)) if raw >= 1 else 1
    step = max(1, next(m * magnitude for m in (1, 2, 5, 10) if m * magnitude >= raw))
    ticks = list(range(0, peak + step, step))
    while ticks[-2] >= peak:
        ticks.pop()
    scale_top = ticks[-1]
    width = (right - left) / max(1, len(bars))

    def sy(n: float) -> float:
        return bottom - n / scale_top * (bottom - top)

    for t in ticks:
        y = sy(t)
        lines.append(f'<line x1="{left}" y1="{_num(y)}" x2="{right}" y2="{_num(y)}" stroke="#e4e0d8"/>')
        lines.append(f'<text x="{left - 6}" y="{_num(y + 4)}" text-anchor="end">{int(t)}</text>')
    lines.append(f'<line x1="{left}" y1="{top}" x2="{left}" y2="{bottom}" stroke="#555"/>')
    lines.append(f'<line x1="{left}" y1="{bottom}" x2="{right}" y2="{bottom}" stroke="#555"/>')
    lines.append(
        f'<text x="14" y="{(top + bottom) / 2:.1f}" text-anchor="middle" '
        f'transform="rotate(-90 14 {(top + bottom) / 2:.1f})">{_esc(axis_label)}</text>'
    )
    for i, (label, n) in enumerate(bars):
        x = left + i * width
        h = bottom - sy(n)
        if n:
            lines.append(
                f'<rect x="{_num(x + width * 0.15)}" y="{_num(bottom - h)}" width="{_num(width * 0.7)}" '
                f'height="{_num(h)}" fill="{PALETTE[0]}"/>'
            )
        lines.append(f'<text x="{_num(x + width / 2)}" y="{_num(bottom - h - 4)}" text-anchor="middle">{n}</text>')
        lines.append(
            f'<text x="{_num(x + width / 2)}" y="{bottom + 14}" text-anchor="end" '
            f'transform="rotate(-40 {_num(x + width / 2)} {bottom + 14})">{_esc(label)}</text>'
        )
    lines.append("</svg>")
    return ("\n".join(lines) + "\n").encode("utf-8")
