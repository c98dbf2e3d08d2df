"""Starting a record: a commented YAML skeleton, optionally filled from a CSV of per-arm results and an order-level
export.

The results CSV has one row per arm and the columns ``arm, visitors, conversions`` (``revenue``, ``orders``,
``revenue_sum_of_squares`` and ``description`` may follow); an order-level export (``arm``, ``order_id`` or
``visitor_id``, ``value``) gives orders, revenue and the revenue sum of squares per arm. Both may be comma, semicolon
or tab separated, with a decimal point or comma (see :mod:`archive.records.exports`). The generated text is parsed
and validated before it is returned, so a scaffold is always a loadable record.
"""

from __future__ import annotations

import datetime as dt
import json
import math
from dataclasses import dataclass, field
from pathlib import Path

from pydantic import ValidationError

from archive.records.exports import ExportError, OrderExport, read_sheet
from archive.records.model import STATUSES, Arm, Record, canonical_label, is_slug
from archive.records.problems import Problem
from archive.records.yamlsource import parse_yaml

RESULT_COLUMNS = ("arm", "visitors", "conversions")
#: what the template writes under ``hypothesis:`` for the parts not given (text in angle brackets)
PLACEHOLDER_PARTS = {
    "change": "<what the test changes, e.g. lowering the free delivery threshold>",
    "audience": "<for whom, e.g. first-time buyers; delete the line when it is every visitor>",
    "expected": "<the effect expected, as it reads after 'should', e.g. raise the share of visits ending in orders>",
    "observed": "<what was observed that led to the test, e.g. that a third of baskets sit just under the threshold>",
}
#: arm descriptions the template writes when none is given (a reminder, not a description)
PLACEHOLDER_DESCRIPTIONS = ("what visitors saw before", "the change")
#: number columns of a results CSV and whether each holds whole numbers
_NUMBERS = {"visitors": True, "conversions": True, "orders": True, "revenue": False, "revenue_sum_of_squares": False}


ScaffoldError = ExportError


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
    hypothesis: str | dict[str, str] = ""  # one sentence, or parts (see hypothesis_parts)
    plan: dict[str, object] | None = None  # filled plan values (from `archive plan --write`)
    orders_file: str | None = None  # an orders file next to the record


def arms_from_names(names: list[str], control: str | None = None) -> list[Arm]:
    control = control or names[0]
    if control not in names:
        raise ScaffoldError([Problem("--control", 0, "control", f"{control!r} is not one of the arms {names}")])
    return [Arm(name=n, control=(n == control)) for n in names]


def arms_from_csv(path: Path, control: str | None = None) -> list[Arm]:
    """Per-arm results from a CSV (comma, semicolon or tab separated; decimal point or comma); problems name the
    CSV line and column."""
    sheet = read_sheet(path, "results CSV", RESULT_COLUMNS, tuple(_NUMBERS))
    problems: list[Problem] = []
    rows: list[tuple[int, dict[str, object]]] = []
    for line, row in sheet.rows:
        values: dict[str, object] = {"name": row["arm"], "description": row.get("description", "")}
        for column, whole in _NUMBERS.items():
            if row.get(column, "") == "":
                continue
            try:
                values[column] = sheet.number(line, column, row[column], whole)
            except ScaffoldError as exc:
                problems += exc.problems
        rows.append((line, values))
    if not rows and not problems:
        problems.append(Problem(sheet.path, 2, "", "no arms in the CSV"))
    if problems:
        raise ScaffoldError(problems)
    return _arms(sheet.path, rows, control)


def _arms(where: str, rows: list[tuple[int, dict[str, object]]], control: str | None) -> list[Arm]:
    names = [str(r["name"]) for _, r in rows]
    chosen = control or ("control" if "control" in names else names[0])
    if chosen not in names:
        raise ScaffoldError(
            [Problem(where, 0, "arm", f"control arm {chosen!r} is not among the arms {', '.join(names)}")]
        )
    arms, problems = [], []
    for line, values in rows:
        try:
            arms.append(Arm.model_validate({**values, "control": values["name"] == chosen}, strict=False))
        except ValidationError as exc:
            err = exc.errors()[0]
            problems.append(Problem(where, line, ".".join(map(str, err["loc"])), err["msg"]))
    if problems:
        raise ScaffoldError(problems)
    return arms


def arms_with_orders(arms: list[Arm] | None, export: OrderExport, control: str | None = None) -> list[Arm]:
    """Fill orders, revenue and revenue sum of squares of each arm from an order-level export (and converting
    visitors, when the export has visitor ids and the results do not give them). Without ``arms`` the arms are
    the export's, in order of first appearance."""
    if arms is None:
        names = list(dict.fromkeys(arm for arm, _, _ in export.rows))
        arms = _arms(export.path, [(0, {"name": n}) for n in names], control)
    known = {a.name for a in arms}
    problems = [
        Problem(export.path, 0, "arm", f"arm {name!r} of the orders export is not among the arms {', '.join(known)}")
        for name in export.totals
        if name not in known
    ]
    filled = []
    for arm in arms:
        t = export.totals.get(arm.name)
        update: dict[str, object] = {
            "orders": t.orders if t else 0,
            "revenue": t.revenue if t else 0.0,
            "revenue_sum_of_squares": t.revenue_sum_of_squares if t else 0.0,
        }
        if arm.revenue is not None and not math.isclose(arm.revenue, float(update["revenue"]), abs_tol=0.01):  # type: ignore[arg-type]
            problems.append(
                Problem(
                    export.path,
                    0,
                    "value",
                    f"arm {arm.name!r}: the orders add up to {update['revenue']} but the results give revenue "
                    f"{arm.revenue}; give one of the two or make them agree",
                )
            )
        if arm.conversions is None and t is not None and t.buyers is not None:
            update["conversions"] = t.buyers
        filled.append(arm.model_copy(update=update))
    if problems:
        raise ScaffoldError(problems)
    return filled


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
        *_hypothesis_lines(draft.hypothesis),
        "",
        *_plan_lines(draft, arms),
        "",
        "arms:  # exactly one arm has control: true",
    ]
    for arm in arms:
        out += [
            f"  - name: {_q(arm.name)}",
            *(["    control: true"] if arm.control else []),
            f"    description: {_q(arm.description or PLACEHOLDER_DESCRIPTIONS[0 if arm.control else 1])}",
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
        f"orders_file: {_q(draft.orders_file)}  # next to this file: arm,order_id (or visitor_id),value per order"
        if draft.orders_file
        else "# orders_file: orders.csv   # optional, next to this file: arm,order_id,value per order",
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


def hypothesis_parts(
    text: str = "", observed: str = "", change: str = "", audience: str = "", expected: str = ""
) -> str | dict[str, str]:
    """The hypothesis of a draft: one sentence, or the parts given (the others left as placeholders)."""
    given = {"change": change, "audience": audience, "expected": expected, "observed": observed}
    given = {k: " ".join(v.split()) for k, v in given.items() if v.strip()}
    if text.strip() and given:
        raise ScaffoldError(
            [Problem("--hypothesis", 0, "hypothesis", "give the hypothesis as one sentence or in parts, not both")]
        )
    if text.strip():
        return " ".join(text.split())
    if not given:
        return dict(PLACEHOLDER_PARTS)
    return {k: given.get(k, PLACEHOLDER_PARTS[k]) for k in PLACEHOLDER_PARTS if k in given or k != "audience"}


def _hypothesis_lines(hypothesis: str | dict[str, str]) -> list[str]:
    if isinstance(hypothesis, str) and hypothesis:
        return ["hypothesis: >-", f"  {hypothesis}"]
    parts = hypothesis or dict(PLACEHOLDER_PARTS)
    return [
        "hypothesis:  # shown as: <change> for <audience> should <expected>. Observed <observed>.",
        *(f"  {key}: {_q(value)}" for key, value in parts.items()),  # type: ignore[union-attr]
    ]


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
            "source": prior.source,
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
