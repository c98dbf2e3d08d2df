"""How the site looks and behaves as a tool: coloured labels for verdicts and statuses, the answer block at the
top of a test page, the theme overrides, the stylesheet and script, and the search index read without a worker.

Every label shows its name as text beside its colour; colours come from :mod:`archive.render.palette`. Text from
records goes through :func:`archive.render.formats.md_text` like everywhere else on the site.
"""

from __future__ import annotations

import json
import re
from importlib import resources
from pathlib import Path
from typing import TYPE_CHECKING

from archive.records.model import Record
from archive.render.formats import md_text
from archive.render.palette import TONE_COLOURS, tone

if TYPE_CHECKING:
    from archive.site.entries import TestEntry

THEME_DIR = Path(__file__).resolve().parent / "theme"
STATIC_ASSETS = ("archive.js",)  # files of archive/site/assets/ copied as they are to docs/assets/
NOT_ANALYSED = ("planned", "running")  # statuses that show their plan and progress, never a verdict
TONE_COLUMNS = ("verdict", "status")  # memo table columns whose values get a coloured label


def label(name: str, text: str | None = None) -> str:
    """A coloured label: the tone of ``name``, the words of ``text`` (default: the name itself)."""
    return f'<span class="tone tone-{tone(name)}">{md_text(text if text is not None else name)}</span>'


def memo_cell(header: str, value: str) -> str:
    """A memo table cell for the site: verdicts and check statuses as coloured labels, other cells as text."""
    if value.strip() and header.strip().lower() in TONE_COLUMNS:
        return label(value)
    return md_text(value)


def shows_verdict(record: Record) -> bool:
    return record.status not in NOT_ANALYSED


def verdict_labels(entry: TestEntry, record: Record) -> str:
    if not shows_verdict(record):
        return "no verdict yet"
    return ", ".join(f"{md_text(arm)} {label(v)}" for arm, v in sorted(entry.verdicts.items()))


def answer_block(entry: TestEntry, record: Record) -> list[str]:
    """The top of a test page: what the figures say, what was decided and one sentence to act on (a quote block,
    styled as the page's answer)."""
    lines: list[str] = []
    if not shows_verdict(record):
        lines.append(f"**{label(record.status)}** No verdict before the test has finished: {progress(record)}")
        lines.append(
            "Reading a fixed-horizon test before its planned sample inflates the chance of a false winner; the "
            "results appear here once the status is finished."
        )
        return [*(f"> {line}\n>" for line in lines[:-1]), f"> {lines[-1]}", ""]
    if entry.verdicts:
        lines.append(f"**Verdict:** {verdict_labels(entry, record)}")
    if entry.memo_markdown:
        trust = (
            label("passed", "trust checks passed")
            if entry.trusted
            else label("failed", "trust check failed: " + ", ".join(entry.failed_checks))
        )
        lines.append(f"**Trust:** {trust}")
    if record.decision is None:
        lines.append("**Decision:** none recorded yet.")
    else:
        arm = f" {md_text(record.decision.arm)}" if record.decision.arm else ""
        rationale = f" {md_text(record.decision.rationale)}" if record.decision.rationale else ""
        lines.append(f"**Decision:** {label(record.decision.outcome)}{arm}.{rationale}")
    if entry.disagreement:
        lines.append(f"**Note:** {md_text(entry.disagreement)}")
    if entry.summary:
        lines.append(md_text(entry.summary))
    if not entry.memo_markdown:
        lines.append("No results to analyse.")
    return [*(f"> {line}\n>" for line in lines[:-1]), f"> {lines[-1]}", ""]


def progress(record: Record) -> str:
    """Visitors so far against the plan, in words."""
    seen = sum(a.visitors or 0 for a in record.arms)
    plan = record.plan
    if plan is not None and plan.visitors_per_arm:
        target = plan.visitors_per_arm * len(record.arms)
        return f"{seen:,} of {target:,} planned visitors so far ({seen / target:.0%})."
    return f"{seen:,} visitors so far (no planned sample recorded)." if seen else "no visitors yet."


def stylesheet() -> str:
    """Our stylesheet: the static rules plus one rule pair per tone of the palette."""
    static = resources.files("archive.site").joinpath("assets/archive.css").read_text(encoding="utf-8")
    tones = [
        f".tone-{name} {{ color: {ink}; background: {tint}; border-color: {ink}; }}"
        for name, (ink, tint) in sorted(TONE_COLOURS.items())
    ]
    return static + "\n/* tones of archive/render/palette.py */\n" + "\n".join(tones) + "\n"


def asset(name: str) -> bytes:
    return resources.files("archive.site").joinpath(f"assets/{name}").read_bytes()


def _words(*parts: str) -> str:
    return " ".join(" ".join(parts).split())


def search_index(entries: list[TestEntry], records: dict[str, Record], groups: dict[str, list[tuple[str, str]]]) -> str:
    """The site's search index as a script (``window.ARCHIVE_SEARCH``), so a page opened from disk can load it
    with a script tag: a browser refuses workers and fetches on file pages. Each document: title, address from
    the site root, kind, and the text searched; plus the synonym groups of :mod:`archive.store.query`."""
    from archive.store.query import synonym_groups

    docs = []
    for entry in entries:
        r = records[entry.id]
        decision = r.decision.outcome if r.decision else ""
        verdicts = " ".join(entry.verdicts.values()) if shows_verdict(r) else ""
        text = _words(
            r.id,
            r.hypothesis_text(),
            r.page_area,
            " ".join(r.themes),
            " ".join(r.tags),
            r.owner or "",
            r.status,
            decision,
            r.decision.rationale if r.decision else "",
            verdicts,
            " ".join(r.learnings),
            " ".join(f"{a.name} {a.description}" for a in r.arms),
        )
        info = " · ".join(x for x in (r.status, str(r.started or ""), r.page_area, decision) if x)
        docs.append({"t": r.title, "u": f"tests/{r.id}.html", "k": info, "x": text})
    for folder, keys in sorted(groups.items()):
        noun = "theme" if folder == "themes" else "page area"
        for key, page in sorted(keys):
            docs.append({"t": key, "u": f"{folder}/{page}.html", "k": noun, "x": _words(key, noun)})
    merged = synonym_groups()
    synonyms = {word: sorted(group - {word}) for word, group in sorted(merged.items())}
    payload = json.dumps({"docs": docs, "synonyms": synonyms}, ensure_ascii=False, sort_keys=True)
    # a JSON text is a JavaScript expression; escape what could end a script element or break a line in JS
    payload = re.sub(r"[<>&\u2028\u2029]", lambda m: f"\\u{ord(m[0]):04x}", payload)
    return f"window.ARCHIVE_SEARCH = {payload};\n"


def inline_chart(svg_bytes: bytes) -> list[str]:
    """An SVG written into the page (so its links work), as one raw HTML block without blank lines."""
    body = "\n".join(line for line in svg_bytes.decode("utf-8").splitlines() if line.strip())
    return ['<div class="chart">', body, "</div>", ""]
