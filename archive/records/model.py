"""The record of one test: the models that validate a YAML file, give the JSON Schema and feed the index.

One hierarchy serves all three uses. ``*Core`` classes hold the plain columns; the record models below extend
them with nested parts and validate the YAML; the table models in :mod:`archive.store.tables` inherit the same cores,
so a column cannot drift from the field it stores. Every field carries a description: the field reference in
the docs and the JSON Schema are generated from them.
"""

from __future__ import annotations

import datetime as dt
import json
import re
import unicodedata
from typing import Annotated, Any, Literal, get_args

from pydantic import ConfigDict, Discriminator, StringConstraints, Tag
from sqlalchemy import String
from sqlmodel import Field, SQLModel

SLUG = r"^[a-z0-9]+(?:-[a-z0-9]+)*$"
_SLUG_RE = re.compile(SLUG)

_STRICT = ConfigDict(extra="forbid", strict=True, allow_inf_nan=False)

# Hard limits of the numbers in a record, far beyond any real test, so that no later sum, square or database
# column overflows. A count fits a signed 32-bit column; squares of amounts stay finite in a float.
#: visitors, conversions or orders of one arm (or segment), and planned visitors per arm
MAX_COUNT = 2_000_000_000
#: revenue of one arm or segment, in any currency
MAX_MONEY = 1e15
#: sum over visitors of revenue^2: at most (sum of revenue)^2 for amounts >= 0
MAX_SUM_OF_SQUARES = MAX_MONEY**2
#: the smallest amount of money above 0 (a millionth of a currency unit); less is a typo, and its square
#: vanishes in floating point (checked in archive.records.checks)
MIN_MONEY = 1e-6
#: planned duration
MAX_DAYS = 3660
#: the smallest relative lift worth detecting (10 = +1000%)
MAX_LIFT = 10.0
#: |mean| and standard deviation of log(1 + lift) in a planning prior (e^10 is a 22,000-fold change)
MAX_LOG_LIFT = 10.0


def is_slug(text: str) -> bool:
    return bool(_SLUG_RE.match(text)) and len(text) <= 80


def canonical_label(text: str) -> str:
    """The one spelling of a theme, tag or page area, and the slug of any name that reaches a file path:
    its letters and digits in any script (Unicode NFKC, case-folded), words joined by single hyphens. The
    combining marks that follow a letter belong to its word (the vowel signs of Devanagari or Tamil).
    Empty when the text holds no letter or digit."""
    if _SLUG_RE.fullmatch(text):  # already in its one spelling (the common case)
        return text
    words: list[str] = []
    word = ""
    for char in unicodedata.normalize("NFKC", text).casefold():
        if char.isalnum() or (word and unicodedata.category(char)[0] == "M"):
            word += char
        elif word:
            words.append(word)
            word = ""
    if word:
        words.append(word)
    return "-".join(words)


Status = Literal["planned", "running", "finished", "stopped-early"]
Outcome = Literal["ship", "keep-control", "iterate"]
STATUSES: tuple[str, ...] = get_args(Status)
OUTCOMES: tuple[str, ...] = get_args(Outcome)


class Hypothesis(SQLModel):
    """A hypothesis in four short parts; shown everywhere as one sentence (:meth:`sentence`)."""

    model_config = _STRICT  # type: ignore[assignment]

    change: str = Field(
        min_length=1, description="What the test changes, e.g. 'lowering the free delivery threshold to 50 EUR'."
    )
    audience: str = Field(
        default="", description="For whom, e.g. 'first-time buyers'; leave out when it is every visitor."
    )
    expected: str = Field(
        min_length=1,
        description="The effect expected, as it reads after 'should', e.g. 'raise the share of visits that end "
        "in an order'.",
    )
    observed: str = Field(
        min_length=1,
        description="What was observed that led to the test, as it reads after 'Observed', e.g. 'that a third of "
        "baskets sit just under the threshold'.",
    )

    def sentence(self) -> str:
        """'<Change> for <audience> should <expected>. Observed <observed>.'"""

        def part(text: str) -> str:
            return " ".join(text.split()).rstrip(".")

        change = part(self.change)
        who = f" for {part(self.audience)}" if self.audience.strip() else ""
        return f"{change[:1].upper()}{change[1:]}{who} should {part(self.expected)}. Observed {part(self.observed)}."

    def __str__(self) -> str:
        return self.sentence()


def _hypothesis_form(value: Any) -> str:
    return "parts" if isinstance(value, dict | Hypothesis) else "text"


#: tags of the two forms of a hypothesis; they are not part of a field's name in messages
HYPOTHESIS_FORMS = ("text", "parts")
HypothesisField = Annotated[
    Annotated[Annotated[str, StringConstraints(min_length=1)], Tag("text")] | Annotated[Hypothesis, Tag("parts")],
    Discriminator(_hypothesis_form),
]


class RecordCore(SQLModel):
    """The single-valued fields of a record (also the columns of the index's record table)."""

    model_config = _STRICT  # type: ignore[assignment]

    id: str = Field(
        description="Unique id, a lowercase slug (letters, digits, hyphens); the file is named <id>.yaml.",
        min_length=1,
        max_length=80,
    )
    title: str = Field(description="One line a colleague would recognise the test by.", min_length=1)
    status: Status = Field(description="planned, running, finished or stopped-early.", sa_type=String)
    owner: str | None = Field(default=None, description="Who ran the test (a person or team).")
    started: dt.date | None = Field(default=None, description="First day of traffic (YYYY-MM-DD).")
    ended: dt.date | None = Field(default=None, description="Last day of traffic (YYYY-MM-DD).")
    page_area: str = Field(
        description="Where in the shop the change lives, e.g. product-page, checkout, basket.", min_length=1
    )
    hypothesis: HypothesisField = Field(
        description="What the test changes, for whom, the effect expected and what was observed that led to it: "
        "the parts under `hypothesis` (see below), or one free sentence (older records).",
        sa_type=String,
    )
    iterates_on: str | None = Field(default=None, description="Id of the earlier test this one is a new round of.")


class PlanPrior(SQLModel):
    """The prior for the true lift taken from the archive when the test was planned (`archive prior`)."""

    model_config = _STRICT  # type: ignore[assignment]

    source: str = Field(min_length=1, description="Which archived comparisons the prior came from.")
    mean_log_lift: float = Field(
        ge=-MAX_LOG_LIFT, le=MAX_LOG_LIFT, description="Mean of log(1 + relative lift) under the prior."
    )
    sd_log_lift: float = Field(
        gt=0, le=MAX_LOG_LIFT, description="Standard deviation of log(1 + relative lift) under the prior."
    )


class Plan(SQLModel):
    """What was decided before the test started (pre-registration)."""

    model_config = _STRICT  # type: ignore[assignment]

    baseline_rate: float | None = Field(
        default=None, gt=0, lt=1, description="Expected conversion rate of control, as a fraction (0.031 = 3.1%)."
    )
    minimum_lift: float | None = Field(
        default=None,
        gt=0,
        le=MAX_LIFT,
        description="Smallest relative lift in conversion worth detecting, as a fraction (0.05 = +5%).",
    )
    alpha: float = Field(default=0.05, gt=0, lt=1, description="Two-sided significance level.")
    power: float = Field(default=0.8, gt=0, lt=1, description="Planned power at the minimum lift.")
    visitors_per_arm: int | None = Field(default=None, gt=0, le=MAX_COUNT, description="Planned visitors in each arm.")
    days: int | None = Field(default=None, gt=0, le=MAX_DAYS, description="Planned duration in days.")
    split: dict[str, float] | None = Field(
        default=None,
        description="Planned share of traffic per arm name (weights, normalised; omitted = equal split).",
    )
    segments: list[str] = Field(
        default_factory=list,
        description="Segment dimensions named before the test started; other cuts are exploratory.",
    )
    prior: PlanPrior | None = Field(default=None, description="The history prior used for planning, if any.")


class ArmCore(SQLModel):
    """Per-arm results (also the columns of the index's arm table)."""

    model_config = _STRICT  # type: ignore[assignment]

    name: str = Field(description="Short name of the arm, unique in the test.", min_length=1, max_length=60)
    control: bool = Field(default=False, description="true for the one arm that is the control.")
    description: str = Field(default="", description="What visitors in this arm saw.")
    visitors: int | None = Field(default=None, ge=0, le=MAX_COUNT, description="Visitors assigned to the arm.")
    conversions: int | None = Field(
        default=None,
        ge=0,
        le=MAX_COUNT,
        description="Visitors who converted (ordered at least once); not the order count.",
    )
    orders: int | None = Field(default=None, ge=0, le=MAX_COUNT, description="Orders placed by the arm's visitors.")
    revenue: float | None = Field(default=None, ge=0, le=MAX_MONEY, description="Total revenue of those orders.")
    revenue_sum_of_squares: float | None = Field(
        default=None,
        ge=0,
        le=MAX_SUM_OF_SQUARES,
        description="Sum over visitors of (revenue of the visitor)^2; makes the variance of revenue known.",
    )


class Arm(ArmCore):
    """One arm of the test as written in the record."""


class SegmentCounts(SQLModel):
    """One arm's results inside one segment."""

    model_config = _STRICT  # type: ignore[assignment]

    visitors: int = Field(ge=0, le=MAX_COUNT, description="Visitors of the arm in this segment.")
    conversions: int = Field(ge=0, le=MAX_COUNT, description="Converting visitors of the arm in this segment.")
    revenue: float | None = Field(default=None, ge=0, le=MAX_MONEY, description="Revenue of the arm in this segment.")


class Decision(SQLModel):
    """What the team actually did with the result."""

    model_config = _STRICT  # type: ignore[assignment]

    outcome: Outcome = Field(description="ship (roll out an arm), keep-control, or iterate (test again).")
    arm: str | None = Field(default=None, description="The arm shipped, or carried into the next round.")
    rationale: str = Field(default="", description="Why, in the words you would use in the review.")
    decided: dt.date | None = Field(default=None, description="Date of the decision.")


class Link(SQLModel):
    model_config = _STRICT  # type: ignore[assignment]

    label: str = Field(min_length=1, description="What the link points to.")
    url: str = Field(min_length=1, description="An http(s) address.")


SecondaryMetric = Literal["revenue_per_visitor", "average_order_value"]

#: segments[dimension][value][arm] -> counts
Segments = dict[str, dict[str, dict[str, SegmentCounts]]]


class Record(RecordCore):
    """A test as filed in ``records/<id>.yaml``."""

    themes: list[str] = Field(
        min_length=1, description="Hypothesis themes, e.g. social-proof, shipping-cost (lowercase, hyphens)."
    )
    tags: list[str] = Field(default_factory=list, description="Free labels for finding the test again.")
    primary_metric: Literal["conversion"] = Field(
        default="conversion", description="The decision metric: converting visitors per visitor."
    )
    secondary_metrics: list[SecondaryMetric] = Field(
        default_factory=lambda: ["revenue_per_visitor", "average_order_value"],
        description="Metrics read after conversion: revenue_per_visitor, average_order_value.",
    )
    plan: Plan | None = Field(default=None, description="The pre-registered plan.")
    arms: list[Arm] = Field(min_length=1, description="The arms; exactly one has control: true.")
    orders_file: str | None = Field(
        default=None,
        description="CSV next to the record, one row per order: columns arm, order_id (or visitor_id), value.",
    )
    segments: Segments = Field(
        default_factory=dict,
        description="Results by segment: dimension -> segment value -> arm name -> counts.",
    )
    decision: Decision | None = Field(default=None, description="The decision actually taken.")
    learnings: list[str] = Field(default_factory=list, description="What the team learned, one point per item.")
    links: list[Link] = Field(default_factory=list, description="Designs, dashboards, tickets.")

    def hypothesis_text(self) -> str:
        """The hypothesis as one sentence, as shown, searched and indexed."""
        h = self.hypothesis
        return h.sentence() if isinstance(h, Hypothesis) else " ".join(h.split())

    def control_arm(self) -> Arm:
        return next(arm for arm in self.arms if arm.control)

    def arm(self, name: str) -> Arm:
        for candidate in self.arms:
            if candidate.name == name:
                return candidate
        raise KeyError(name)


def record_from_json(body: str) -> Record:
    """Rebuild a record from ``Record.model_dump_json()`` output (strict validation wants real dates back)."""
    data = json.loads(body)
    for holder, key in ((data, "started"), (data, "ended"), (data.get("decision") or {}, "decided")):
        if isinstance(holder.get(key), str):
            holder[key] = dt.date.fromisoformat(holder[key])
    return Record.model_validate(data)


def record_schema() -> dict[str, Any]:
    """JSON Schema of a record, for editors that validate YAML as it is typed."""
    schema = Record.model_json_schema()
    schema["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    schema["title"] = "Test record"
    return schema
