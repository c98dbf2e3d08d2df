"""The checks a record must pass: on its own (one control, counts that add up, dates in order, ...) and across the
archive (duplicate ids, iterates_on targets, a theme spelled two ways).
"""

from __future__ import annotations

import datetime as dt
import difflib
import re
from collections import defaultdict
from collections.abc import Callable, Hashable, Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path

from archive.records.model import MIN_MONEY, Record, canonical_label, is_slug
from archive.records.orders import Orders, orders_path, read_orders
from archive.records.problems import Problem
from archive.records.yamlsource import YamlDocument, dotted

_TOLERANCE = 1e-6  # relative slack when comparing money sums written with rounding

#: More arms than this is an error: every arm is compared with the control and each gets a share of traffic.
MAX_ARMS = 26
#: More arms than this earns a warning (common practice: tests rarely run more than a handful of arms).
MANY_ARMS = 8
#: A date before this is implausibly old for a test of an online shop (a warning).
OLDEST_DATE = dt.date(1995, 1, 1)
#: Largest planned traffic share (weights are normalised, so 1/1 or 50/50 are the usual forms).
MAX_SPLIT_WEIGHT = 1e6


@dataclass(frozen=True)
class Summary:
    """What the archive-wide checks need to know of one record."""

    path: str
    id: str
    iterates_on: str | None
    themes: tuple[str, ...]
    tags: tuple[str, ...]
    page_area: str

    @classmethod
    def of(cls, path: str, record: Record) -> Summary:
        return cls(path, record.id, record.iterates_on, tuple(record.themes), tuple(record.tags), record.page_area)


_PROMPT = re.compile(r"<[^<>]{3,}>")  # the template's prompts read <like this>


class RecordChecks:
    """The checks that need a whole, well-typed record."""

    def __init__(self, path: Path, doc: YamlDocument, record: Record, expect_stem: bool = True):
        self.path, self.doc, self.r = path, doc, record
        self.expect_stem = expect_stem  # False: a draft in any file, where another name is only a warning
        self.problems: list[Problem] = []
        self.orders: Orders | None = None

    def add(self, loc: Sequence[Hashable], message: str, severity: str = "error") -> None:
        self.problems.append(
            Problem(self.doc.path, self.doc.line_of(loc), dotted(loc), message, severity)  # type: ignore[arg-type]
        )

    def run(self) -> list[Problem]:
        self.identity()
        self.labels()
        self.arms()
        self.names()
        self.dates_and_status()
        self.dates()
        self.plan()
        self.segments()
        self.decision()
        self.orders_file()
        self.links()
        self.template_left()
        return self.problems

    def template_left(self) -> None:
        """Warnings (failures under --strict) for what the `new` template wrote to be replaced: angle-bracketed
        prompts, the placeholder arm descriptions, and plan numbers left empty."""
        from archive.records.template import PLACEHOLDER_DESCRIPTIONS

        hypothesis = self.r.hypothesis
        if isinstance(hypothesis, str):
            parts: dict[str, str] = {"": hypothesis}
        else:
            parts = {name: getattr(hypothesis, name) or "" for name in ("change", "audience", "expected", "observed")}
        for name, text in parts.items():
            if _PROMPT.search(text):
                loc: tuple[Hashable, ...] = ("hypothesis", name) if name else ("hypothesis",)
                self.add(loc, "template text left in place: write your own words (or delete the line)", "warning")
        if _PROMPT.search(self.r.title):
            self.add(("title",), "template text left in place: write the test's title", "warning")
        for i, arm in enumerate(self.r.arms):
            if arm.description in PLACEHOLDER_DESCRIPTIONS:
                self.add(("arms", i, "description"), "template text left in place: say what this arm showed", "warning")
        raw_plan = self.doc.data.get("plan") if isinstance(self.doc.data, dict) else None
        if isinstance(raw_plan, dict):
            for key, value in raw_plan.items():
                if value is None:
                    self.add(("plan", key), "left empty: fill in the planned value or delete the line", "warning")

    def identity(self) -> None:
        r = self.r
        if not is_slug(r.id):
            self.add(("id",), f"{r.id!r} is not a safe id: use lowercase letters, digits and single hyphens")
        elif r.id != self.path.stem:
            self.add(
                ("id",),
                f"id {r.id!r} does not match the file name {self.path.name!r}; rename one",
                "error" if self.expect_stem else "warning",
            )
        if r.iterates_on is not None and r.iterates_on == r.id:
            self.add(("iterates_on",), "a test cannot iterate on itself")
        elif r.iterates_on is not None and not is_slug(r.iterates_on):
            shown = repr(r.iterates_on) if len(r.iterates_on) <= 40 else repr(r.iterates_on[:37] + "...")
            self.add(("iterates_on",), f"{shown} is not a record id (lowercase letters, digits, single hyphens)")

    def labels(self) -> None:
        r = self.r
        for name, values in (("themes", r.themes), ("tags", r.tags)):
            seen: dict[str, int] = {}
            for i, value in enumerate(values):
                canon = canonical_label(value)
                if not canon:
                    self.add((name, i), "empty label")
                elif canon in seen:
                    self.add((name, i), f"{value!r} repeats {values[seen[canon]]!r}")
                elif canon != value:
                    self.add((name, i), f"write {canon!r} (lowercase, hyphens) so it groups with others", "warning")
                seen.setdefault(canon, i)
        if canonical_label(r.page_area) != r.page_area:
            self.add(("page_area",), f"write {canonical_label(r.page_area)!r} (lowercase, hyphens)", "warning")

    def arms(self) -> None:
        arms = self.r.arms
        if len(arms) > MAX_ARMS:
            self.add(("arms",), f"{len(arms)} arms; the limit is {MAX_ARMS} (split the test into several records)")
        elif len(arms) > MANY_ARMS:
            self.add(
                ("arms",),
                f"{len(arms)} arms, more than {MANY_ARMS}: each arm gets little traffic and many comparisons "
                "raise the chance of a false winner",
                "warning",
            )
        controls = [i for i, a in enumerate(arms) if a.control]
        if not controls:
            self.add(("arms",), "no arm is the control; mark one with control: true")
        for i in controls[1:]:
            self.add(("arms", i, "control"), f"second control (arm {arms[controls[0]].name!r} is already control)")
        seen: dict[str, int] = {}
        for i, arm in enumerate(arms):
            if arm.name in seen:
                self.add(("arms", i, "name"), f"arm name {arm.name!r} is used twice")
            seen.setdefault(arm.name, i)
            here = ("arms", i)
            if arm.visitors is not None and arm.conversions is not None and arm.conversions > arm.visitors:
                self.add(here + ("conversions",), f"{arm.conversions} conversions exceed {arm.visitors} visitors")
            if arm.orders is not None and arm.conversions is not None and arm.orders < arm.conversions:
                self.add(here + ("orders",), f"{arm.orders} orders but {arm.conversions} converting visitors")
            for name, least in (("revenue", MIN_MONEY), ("revenue_sum_of_squares", MIN_MONEY**2)):
                amount = getattr(arm, name)
                if amount is not None and 0 < amount < least:
                    self.add(here + (name,), f"{amount:g} is above 0 but below {least:g}, the smallest amount")
            if arm.revenue and (arm.conversions == 0 or arm.orders == 0):
                self.add(here + ("revenue",), "revenue without any conversion or order")
            if arm.revenue_sum_of_squares is not None:
                buyers = arm.conversions or arm.visitors
                if arm.revenue is None or not buyers:
                    self.add(here + ("revenue_sum_of_squares",), "needs revenue and conversions beside it")
                elif arm.revenue_sum_of_squares < arm.revenue**2 / buyers * (1 - _TOLERANCE):
                    # Cauchy-Schwarz: sum of squares over n buyers >= (sum)^2 / n
                    self.add(
                        here + ("revenue_sum_of_squares",),
                        f"impossible: at least revenue^2/conversions = {arm.revenue**2 / buyers:.6g}",
                    )

    def names(self) -> None:
        """Arm and segment names become parts of file names on the site: each needs a letter or digit, and two
        arms may not share a slug."""
        slugs: dict[str, int] = {}
        for i, arm in enumerate(self.r.arms):
            slug = canonical_label(arm.name)
            if not slug:
                self.add(("arms", i, "name"), f"{arm.name!r} has no letter or digit; name the arm with words")
            elif slug in slugs and self.r.arms[slugs[slug]].name != arm.name:
                other = self.r.arms[slugs[slug]].name
                self.add(("arms", i, "name"), f"{arm.name!r} and {other!r} give one file name {slug!r}; rename one")
            slugs.setdefault(slug, i)
        for dim, by_value in self.r.segments.items():
            if not canonical_label(dim):
                self.add(("segments", dim), f"segment dimension {dim!r} has no letter or digit; name it with words")
            for value in by_value:
                if not canonical_label(value):
                    self.add(("segments", dim, value), f"segment {value!r} has no letter or digit; name it with words")
        if self.r.plan is not None:
            for i, dim in enumerate(self.r.plan.segments):
                if not canonical_label(dim):
                    self.add(("plan", "segments", i), f"{dim!r} has no letter or digit; name the dimension with words")

    def dates(self) -> None:
        """Dates a person would question: in the future for what already happened, implausibly old, or a
        decision taken before the test started."""
        r = self.r
        today = dt.date.today()
        decided = r.decision.decided if r.decision is not None else None
        dated = [(("started",), r.started), (("ended",), r.ended), (("decision", "decided"), decided)]
        for loc, day in dated:
            if day is not None and day < OLDEST_DATE:
                self.add(loc, f"{day} is before {OLDEST_DATE.year}, implausibly old for a test; a typo?", "warning")
        happened = [(("started",), r.started), (("decision", "decided"), decided)] if r.status != "planned" else []
        if r.status in ("finished", "stopped-early"):
            happened.append((("ended",), r.ended))
        for loc, day in happened:
            if day is not None and day > today:
                self.add(loc, f"{day} is in the future (today is {today}) for a {r.status} test", "warning")
        if decided is not None and r.started is not None and decided < r.started:
            self.add(("decision", "decided"), f"decided on {decided}, before the test started ({r.started})", "warning")

    def dates_and_status(self) -> None:
        r = self.r
        if r.started and r.ended and r.ended < r.started:
            self.add(("ended",), f"ends ({r.ended}) before it starts ({r.started})")
        has_results = any(a.visitors or a.conversions or a.orders or a.revenue for a in r.arms)
        if r.status == "planned":
            if has_results:
                self.add(("status",), "status is planned but arms have results; set status to running or finished")
            if r.segments:
                self.add(("segments",), "a planned test cannot have segment results yet")
            if r.decision is not None:
                self.add(("decision",), "a planned test has no decision yet", "warning")
        if r.status in ("finished", "stopped-early"):
            for i, arm in enumerate(r.arms):
                for name in ("visitors", "conversions"):
                    if getattr(arm, name) is None:
                        self.add(("arms", i, name), f"a {r.status} test needs {name} for every arm")
                if arm.visitors == 0:
                    self.add(("arms", i, "visitors"), "arm has no visitors", "warning")
            for name in ("started", "ended"):
                if getattr(r, name) is None:
                    self.add((name,), f"a {r.status} test needs its {name} date")
            if r.decision is None:
                self.add(("status",), "no decision recorded; add decision: outcome", "warning")
            if not r.learnings:
                self.add(("status",), "no learnings recorded", "warning")
        if r.status == "running" and r.decision is not None:
            self.add(("decision",), "a running test has a decision; set status to finished", "warning")

    def plan(self) -> None:
        plan = self.r.plan
        if plan is None:
            if self.r.status != "planned":
                self.add(("status",), "no plan recorded; sample size cannot be judged", "warning")
            return
        names = {a.name for a in self.r.arms}
        if plan.split is not None:
            for arm, weight in plan.split.items():
                if arm not in names:
                    self.add(("plan", "split", arm), f"{arm!r} is not an arm of this test")
                if weight <= 0:
                    self.add(("plan", "split", arm), "a traffic share must be > 0")
                elif weight > MAX_SPLIT_WEIGHT:
                    self.add(("plan", "split", arm), f"a traffic share is a weight of at most {MAX_SPLIT_WEIGHT:g}")
            for arm in sorted(names - set(plan.split)):
                self.add(("plan", "split"), f"arm {arm!r} has no planned share")
        for i, dim in enumerate(plan.segments):
            if self.r.status in ("finished", "stopped-early") and dim not in self.r.segments:
                self.add(("plan", "segments", i), f"pre-registered dimension {dim!r} has no results", "warning")

    def segments(self) -> None:
        arms = {a.name: a for a in self.r.arms}
        for dim, by_value in self.r.segments.items():
            totals: dict[str, dict[str, float]] = defaultdict(lambda: defaultdict(float))
            for value, by_arm in by_value.items():
                for arm_name, counts in by_arm.items():
                    here = ("segments", dim, value, arm_name)
                    if arm_name not in arms:
                        self.add(here, f"{arm_name!r} is not an arm of this test (arms: {', '.join(arms)})")
                        continue
                    if counts.conversions > counts.visitors:
                        self.add(here + ("conversions",), f"{counts.conversions} exceed {counts.visitors} visitors")
                    if counts.revenue is not None and 0 < counts.revenue < MIN_MONEY:
                        self.add(here + ("revenue",), f"{counts.revenue:g} is above 0 but below {MIN_MONEY:g}")
                    totals[arm_name]["visitors"] += counts.visitors
                    totals[arm_name]["conversions"] += counts.conversions
                    totals[arm_name]["revenue"] += counts.revenue or 0.0
            for arm_name, sums in totals.items():
                arm = arms[arm_name]
                for name, total in sums.items():
                    limit = getattr(arm, name)
                    if limit is not None and total > limit * (1 + _TOLERANCE) + 1e-9:
                        self.add(
                            ("segments", dim),
                            f"{name} of arm {arm_name!r} add up to {total:g} across {dim!r} segments, "
                            f"more than the arm's {limit:g}",
                        )

    def decision(self) -> None:
        d = self.r.decision
        if d is None:
            return
        names = {a.name: a for a in self.r.arms}
        if d.arm is not None and d.arm not in names:
            self.add(("decision", "arm"), f"{d.arm!r} is not an arm of this test (arms: {', '.join(names)})")
            return
        if d.outcome == "ship":
            if d.arm is None:
                self.add(("decision", "arm"), "outcome ship needs the arm that was shipped")
            elif names[d.arm].control:
                self.add(("decision", "arm"), "shipping the control is outcome keep-control")
        if d.outcome == "keep-control" and d.arm is not None and not names[d.arm].control:
            self.add(("decision", "arm"), f"outcome keep-control but arm {d.arm!r} is not the control")

    def orders_file(self) -> None:
        name = self.r.orders_file
        if name is None:
            return
        target = orders_path(self.path, name)
        if target is None:
            self.add(("orders_file",), "must be a file name next to the record (no '..', no absolute path)")
            return
        folder = self.path.parent.resolve()
        if target.is_symlink() or not target.parent.resolve().is_relative_to(folder):
            resolved = target.resolve()
            if resolved.exists() and not resolved.is_relative_to(folder):
                self.add(
                    ("orders_file",),
                    f"{target} is a symbolic link to {resolved}, outside the archive folder; it is not followed "
                    "(copy the file next to the record)",
                )
                return
        if not target.is_file():
            self.add(("orders_file",), f"{target} not found" + (" (a folder)" if target.is_dir() else ""))
            return
        orders, problems = read_orders(target, {a.name for a in self.r.arms})
        self.problems.extend(problems)
        if orders is None:
            return
        self.orders = orders
        for i, arm in enumerate(self.r.arms):
            values = orders.values[arm.name]
            if arm.orders is not None and orders.id_column == "order_id" and len(values) != arm.orders:
                self.add(("arms", i, "orders"), f"{arm.orders} orders, but {len(values)} in {name}", "warning")
            if arm.revenue is not None and abs(sum(values) - arm.revenue) > max(0.01 * arm.revenue, 0.01):
                self.add(("arms", i, "revenue"), f"differs from the {sum(values):.2f} summed in {name}", "warning")

    def links(self) -> None:
        for i, link in enumerate(self.r.links):
            if not link.url.lower().startswith(("http://", "https://")):
                self.add(("links", i, "url"), "only http(s) links are published", "warning")


LineOf = Callable[[str, Sequence[Hashable]], int]


def archive_problems(summaries: Iterable[Summary], line_of: LineOf, unreadable: Iterable[str] = ()) -> list[Problem]:
    """Checks across records. ``line_of(path, loc)`` gives the line of a field in a file.

    ``unreadable`` names the ids (file stems) of records that exist but failed their own checks: pointing at
    them is not a second error.
    """
    items = list(summaries)
    exists = set(unreadable)
    problems: list[Problem] = []
    by_id: dict[str, list[Summary]] = defaultdict(list)
    for s in items:
        by_id[s.id].append(s)
    for same in by_id.values():
        for s in same[1:]:
            problems.append(Problem(s.path, line_of(s.path, ("id",)), "id", f"id also used by {same[0].path}"))
    for s in items:
        target = s.iterates_on
        if target is not None and target != s.id and target not in by_id and target not in exists and is_slug(target):
            near = difflib.get_close_matches(target, list(by_id), n=1)
            hint = f"; did you mean {near[0]!r}?" if near else ""
            problems.append(
                Problem(s.path, line_of(s.path, ("iterates_on",)), "iterates_on", f"no record {target!r}{hint}")
            )
    label_of: dict[str, str] = {}  # the same few labels recur in every record
    for kind in ("themes", "tags", "page_area"):
        spellings: dict[str, dict[str, Summary]] = defaultdict(dict)
        for s in items:
            values = (s.page_area,) if kind == "page_area" else getattr(s, kind)
            for value in values:
                label = label_of.get(value)
                if label is None:
                    label = label_of[value] = canonical_label(value)
                spellings[label].setdefault(value, s)
        for canon, seen in spellings.items():
            if len(seen) < 2:
                continue
            first, *others = sorted(seen, key=lambda v: (v != canon, v))
            for value in others:
                s = seen[value]
                values = (s.page_area,) if kind == "page_area" else getattr(s, kind)
                loc: tuple[Hashable, ...] = (kind,) if kind == "page_area" else (kind, values.index(value))
                problems.append(
                    Problem(
                        s.path,
                        line_of(s.path, loc),
                        dotted(loc),
                        f"{value!r} is spelled {first!r} in {seen[first].path}; use {canon!r} everywhere",
                    )
                )
    return problems
