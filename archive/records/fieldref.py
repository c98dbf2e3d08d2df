"""The record's field reference in Markdown, generated from the models' descriptions."""

from __future__ import annotations

import re
import typing
from typing import Any

from pydantic import BaseModel

from archive.records.model import (
    Arm,
    Decision,
    Hypothesis,
    HypothesisField,
    Link,
    Plan,
    PlanPrior,
    Record,
    SegmentCounts,
)

SECTIONS: tuple[tuple[str, type[BaseModel], str], ...] = (
    ("Record", Record, "The top level of `records/<id>.yaml`."),
    (
        "hypothesis",
        Hypothesis,
        "Under `hypothesis:` when it is written in parts; shown as one sentence: "
        "`<change> for <audience> should <expected>. Observed <observed>.`",
    ),
    ("plan", Plan, "Under `plan:`."),
    ("plan.prior", PlanPrior, "Under `plan: prior:` (written by `archive plan --write`)."),
    ("arms[]", Arm, "Each item under `arms:`."),
    ("segments.<dimension>.<value>.<arm>", SegmentCounts, "Counts of one arm in one segment."),
    ("decision", Decision, "Under `decision:`."),
    ("links[]", Link, "Each item under `links:`."),
)


def _type_name(annotation: Any) -> str:
    if annotation == typing.get_args(HypothesisField)[0]:
        return "str or the parts below"
    text = str(annotation) if typing.get_origin(annotation) or not isinstance(annotation, type) else annotation.__name__
    text = re.sub(r"\b(?:typing|datetime|archive\.records\.model)\.", "", text)
    text = text.replace("NoneType", "null").replace("None", "null").replace("Literal", "one of ")
    return text.replace("<class '", "").replace("'>", "")


def field_reference() -> str:
    lines = [
        "# Record fields",
        "",
        "Generated from the record models by `archive schema --markdown`; do not edit by hand.",
        "Unknown fields are errors (a likely typo), so a record holds only what is listed here.",
        "",
    ]
    for title, model, intro in SECTIONS:
        lines += [f"## `{title}`", "", intro, "", "| field | type | required | meaning |", "|---|---|---|---|"]
        for name, info in model.model_fields.items():
            required = "yes" if info.is_required() else ""
            meaning = (info.description or "").replace("|", "\\|")
            kind = _type_name(info.annotation).replace("|", "\\|")
            lines.append(f"| `{name}` | {kind} | {required} | {meaning} |")
        lines.append("")
    return "\n".join(lines)
