"""Starting a record: a commented YAML skeleton, optionally filled from a CSV of per-arm results.

The CSV has one row per arm and the columns ``arm, visitors, conversions, revenue`` (``orders``,
``revenue_sum_of_squares`` and ``description`` may follow). The generated text is parsed and validated before it
is returned, so a scaffold is always a loadable record.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import json
import math
from dataclasses import dataclass, field
from pathlib import Path

from pydantic import ValidationError

from archive.records.model import STATUSES, Arm, Record, canonical_label, is_slug
from archive.records.problems import Problem
from archive.records.yamlsource import parse_yaml

RESULT_COLUMNS = ("arm", "visitors", "conversions", "revenue")
PLACEHOLDER_HYPOTHESIS = "Because we saw <evidence>, we believe <change> for <visitors> will raise conversion."
_OPTIONAL = {"orders": int, "revenue_sum_of_squares": float, "description": str}


class ScaffoldError(ValueError):
    def __init__(self, problems: list[Problem]):
        super().__init__("\n".join(str(p) for p in problems))
        self.problems = problems


@dataclass
class Draft:
    id: str
    title: str
    page_area: str
    themes: list[str]
    arms: list[Arm] = field(default_factory=list)
    status: str = "finished"
    owner: str | None = None
    started: dt.date | None = None
    ended: dt.date | None = None
    hypothesis: str = ""
    plan: dict[str, object] | None = None  # filled plan values (from `archive plan --write`)


def arms_from_names(names: list[str], control: str | None = None) -> list[Arm]:
    control = control or names[0]
    if control not in names:
        raise ScaffoldError([Problem("--control", 0, "control", f"{control!r} is not one of the arms {names}")])
    return [Arm(name=n, control=(n == control)) for n in names]


def arms_from_csv(path: Path, control: str | None = None) -> list[Arm]:
    """Per-arm results from a CSV; problems name the CSV line and column."""
    where = str(path)
    try:
        text = path.read_bytes().decode("utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise ScaffoldError([Problem(where, 0, "", f"cannot read the results CSV: {exc}")]) from None
    reader = csv.DictReader(io.StringIO(text))
    header = [c.strip() for c in reader.fieldnames or []]
    missing = [c for c in RESULT_COLUMNS if c not in header]
    if missing:
        raise ScaffoldError([Problem(where, 1, "", f"missing columns {', '.join(missing)}; need {RESULT_COLUMNS}")])
    problems: list[Problem] = []
    rows: list[dict[str, object]] = []
    for line, raw in enumerate(reader, start=2):
        row = {(k or "").strip(): (v or "").strip() for k, v in raw.items()}
        values: dict[str, object] = {"name": row["arm"], "description": row.get("description", "")}
        for column, kind in (("visitors", int), ("conversions", int), ("revenue", float), *_OPTIONAL.items()):
            if column == "description" or column not in row or row[column] == "":
                continue
            try:
                number = kind(row[column])
                if isinstance(number, float) and not math.isfinite(number):
                    raise ValueError
                values[column] = number
            except ValueError:
                kind_name = "a whole number" if kind is int else "a number"
                problems.append(Problem(where, line, column, f"{row[column]!r} is not {kind_name}"))
        rows.append(values)
    if not rows and not problems:
        problems.append(Problem(where, 2, "", "no arms in the CSV"))
    if problems:
        raise ScaffoldError(problems)
    names = [str(r["name"]) for r in rows]
    chosen = control or ("control" if "control" in names else names[0])
    if chosen not in names:
        raise ScaffoldError([Problem(where, 0, "arm", f"control arm {chosen!r} is not in the CSV")])
    arms = []
    for line, values in enumerate(rows, start=2):
        try:
            arms.append(Arm.model_validate({**values, "control": values["name"] == chosen}, strict=False))
        except ValidationError as exc:
            err = exc.errors()[0]
            problems.append(Problem(where, line, str(err["loc"][0]), err["msg"]))
    if problems:
        raise ScaffoldError(problems)
    return arms


def _q(text: str) -> str:
    """A YAML double-quoted scalar (JSON strings are valid YAML)."""
    return json.dumps(text, ensure_ascii=False)


def _num(value: float | int | None) -> str:
    if value is None:
        return ""
    return repr(value) if isinstance(value, float) else str(value)


def render(draft: Draft) -> str:
    """The record text for a draft, with comments that guide the person filling it in."""
    problems: list[Problem] = []
    if not is_slug(draft.id):
        problems.append(Problem("--id", 0, "id", f"{draft.id!r}: use lowercase letters, digits and single hyphens"))
    if draft.status not in STATUSES:
        problems.append(Problem("--status", 0, "status", f"{draft.status!r}: choose one of {', '.join(STATUSES)}"))
    if not draft.themes:
        problems.append(Problem("--theme", 0, "themes", "give at least one theme"))
    if problems:
        raise ScaffoldError(problems)
    arms = draft.arms or arms_from_names(["control", "b"])
    out = [
        f"# Test record {draft.id}. Field reference: `archive schema --markdown`; check with `archive check`.",
        f"id: {draft.id}",
        f"title: {_q(draft.title)}",
        f"status: {draft.status}  # planned | running | finished | stopped-early",
        f"owner: {_q(draft.owner)}" if draft.owner else "owner:  # who ran it",
        f"started: {draft.started or ''}  # first day of traffic, YYYY-MM-DD",
        f"ended: {draft.ended or ''}  # last day of traffic",
        f"page_area: {canonical_label(draft.page_area)}",
        "themes:  # what kind of change this is; reuse the spellings already in the archive",
        *[f"  - {canonical_label(t)}" for t in draft.themes],
        "tags: []",
        "hypothesis: >-",
        f"  {draft.hypothesis or PLACEHOLDER_HYPOTHESIS}",
        "",
        *_plan_lines(draft, arms),
        "",
        "arms:  # exactly one arm has control: true",
    ]
    for arm in arms:
        out += [
            f"  - name: {_q(arm.name)}",
            *(["    control: true"] if arm.control else []),
            f"    description: {_q(arm.description or ('what visitors saw before' if arm.control else 'the change'))}",
            f"    visitors: {_num(arm.visitors)}".rstrip(),
            f"    conversions: {_num(arm.conversions)}  # visitors who ordered at least once",
            f"    orders: {_num(arm.orders)}".rstrip(),
            f"    revenue: {_num(arm.revenue)}".rstrip(),
            *(
                [f"    revenue_sum_of_squares: {_num(arm.revenue_sum_of_squares)}"]
                if arm.revenue_sum_of_squares is not None
                else []
            ),
        ]
    out += [
        "",
        "# orders_file: orders.csv   # optional, next to this file: arm,order_id,value per order",
        "# segments:                 # optional: dimension -> value -> arm -> visitors, conversions, revenue",
        "#   device:",
        "#     mobile:",
        f"#       {arms[0].name}: {{visitors: 0, conversions: 0, revenue: 0}}",
        "",
        "# decision:                 # once decided: ship | keep-control | iterate",
        "#   outcome: ship",
        "#   arm: b",
        "#   rationale: >-",
        "#     why",
        "learnings: []",
        "links: []",
        "",
    ]
    text = "\n".join(out)
    _self_check(text, draft)
    return text


def _plan_lines(draft: Draft, arms: list[Arm]) -> list[str]:
    plan = draft.plan or {}

    def value(key: str, comment: str = "") -> str:
        shown = plan.get(key)
        text = f"  {key}: {'' if shown is None else shown}"
        return f"{text}  # {comment}" if comment else text

    lines = [
        "plan:  # what was fixed before launch",
        value("baseline_rate", "control's expected conversion rate, e.g. 0.031"),
        value("minimum_lift", "smallest relative lift worth detecting, e.g. 0.05 for +5%"),
        value("alpha") if "alpha" in plan else "  alpha: 0.05",
        value("power") if "power" in plan else "  power: 0.8",
        value("visitors_per_arm"),
        *([value("days")] if "days" in plan else []),
        "  split:",
    ]
    weights = plan.get("split") or {a.name: 1 for a in arms}
    lines += [f"    {_q(name)}: {w}" for name, w in weights.items()]  # type: ignore[attr-defined]
    prior = plan.get("prior")
    if isinstance(prior, dict):
        lines += ["  prior:", *(f"    {k}: {_q(v) if isinstance(v, str) else v}" for k, v in prior.items())]
    return lines


def render_plan(draft: Draft, result, weights: list[float], prior) -> str:  # type: ignore[no-untyped-def]
    """A planned record (pre-registration) from an :class:`archive.planning.TestPlan`."""
    draft.status = "planned"
    draft.plan = {
        "baseline_rate": round(result.baseline, 6),
        "minimum_lift": result.minimum_lift,
        "alpha": result.alpha,
        "power": result.power,
        "visitors_per_arm": result.visitors_per_arm,
        "split": {a.name: w for a, w in zip(draft.arms, weights, strict=True)},
    }
    if result.days:
        draft.plan["days"] = result.days
    if prior is not None:
        draft.plan["prior"] = {
            "source": f"{prior.source} ({prior.comparisons} comparisons)",
            "mean_log_lift": round(prior.mean, 6),
            "sd_log_lift": round(prior.sd, 6),
        }
    return render(draft)


def _self_check(text: str, draft: Draft) -> None:
    doc = parse_yaml(f"{draft.id}.yaml", text.encode("utf-8"))
    data = {k: v for k, v in doc.data.items() if v is not None}
    data["plan"] = {k: v for k, v in (data.get("plan") or {}).items() if v is not None}
    if isinstance(data["plan"].get("split"), dict):
        data["plan"]["split"] = {k: float(v) for k, v in data["plan"]["split"].items()}
    data["arms"] = [{k: v for k, v in arm.items() if v is not None} for arm in data["arms"]]
    try:
        Record.model_validate(data)
    except ValidationError as exc:  # a bad option value, e.g. an empty title
        raise ScaffoldError(
            [Problem("options", 0, ".".join(map(str, e["loc"])), e["msg"]) for e in exc.errors()]
        ) from None
