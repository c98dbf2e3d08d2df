"""File names of the site: every path the site writes is built from a slug made here, never from raw record text."""

from __future__ import annotations

import hashlib
from pathlib import Path

from archive.records.model import canonical_label

MAX_SLUG = 60


class OutsideBuild(ValueError):
    """A generated path would leave the build folder."""


def slug(text: str) -> str:
    """The file-name form of a label or name: its canonical label (letters and digits of any script, hyphens) when
    the text already is one, otherwise that label (or ``label`` when it is empty) followed by a hash of the exact
    text, so two different names never share a file and the same name always gets the same one."""
    canon = canonical_label(text)
    if canon and canon == text and len(canon) <= MAX_SLUG:
        return canon
    base = canon[:MAX_SLUG].strip("-") or "label"
    return f"{base}-{hashlib.sha256(text.encode('utf-8')).hexdigest()[:10]}"


def segment_chart_name(record_id: str, arm: str) -> str:
    return f"{slug(record_id)}-segments-{slug(arm)}.svg"


def inside(base: Path, rel: str) -> Path:
    """``base / rel`` after checking that it resolves inside ``base`` (raises :class:`OutsideBuild`)."""
    root = base.resolve()
    target = (root / rel).resolve()
    if Path(rel).is_absolute() or ".." in Path(rel).parts or root not in target.parents:
        raise OutsideBuild(f"refusing to write {rel!r}: it is not inside the build folder {base}")
    return target
