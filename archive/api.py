"""The archive as one Python object: the API that every command of the CLI is a thin layer over.

>>> from archive import Archive
>>> a = Archive.open("path/to/archive")            # doctest: +SKIP
>>> a.index()                                      # doctest: +SKIP
>>> a.pool(by="theme").groups[0].key               # doctest: +SKIP

:meth:`Archive.open` finds the archive root (the first folder, walking up from ``path``, that holds ``records/``)
and its store (SQLite in ``<root>/.archive/`` unless ``db`` or ``ARCHIVE_DB`` names another). Every reading method
first brings the store in line with the records folder (only changed files are read; see
:mod:`archive.store.sync`) unless the archive was opened with ``sync=False``, then reads the store: an unchanged
record is never parsed again, so two methods can never disagree. Methods return the same result objects the CLI
renders; they never print.
"""

from __future__ import annotations

import dataclasses
import os
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal

from archive.analysis.settings import Settings
from archive.planning.hyperprior import Hyperprior

if TYPE_CHECKING:
    import pandas as pd
    from sqlalchemy import Engine

    from archive.analysis import Analysis
    from archive.analysis.segments import SegmentAnalysis
    from archive.planning.calibration import Calibration
    from archive.planning.plan import TestPlan
    from archive.planning.priors import BaselinePrior, InformedLift, LiftPrior
    from archive.pooling.effects import Effect
    from archive.pooling.groups import PoolResult
    from archive.records.model import Record
    from archive.render.model import Memo
    from archive.site.build import BuildReport
    from archive.store.query import Filters
    from archive.store.sync import CheckResult, SyncReport

RECORDS_ENV = "ARCHIVE_RECORDS"
RECORDS_DIR = "records"
SETTINGS_FILE = "archive-settings.yaml"


class NoArchive(LookupError):
    """No archive where the command was run: nothing was created."""


def find_root(start: Path) -> Path | None:
    """The first folder, from ``start`` upwards, that holds a ``records/`` folder."""
    start = start.resolve()
    for folder in (start, *start.parents):
        if (folder / RECORDS_DIR).is_dir():
            return folder
    return None


def read_settings(root: Path) -> Settings:
    """The analysis settings of an archive: defaults, overridden by ``archive-settings.yaml`` at its root. Keys: the
    scalar fields of :class:`~archive.analysis.Settings` (e.g. ``srm_alpha: 0.001``, ``confidence: 0.95``), and
    ``rules:`` with fields of :class:`~archive.analysis.verdict.VerdictRules` (e.g. ``ship_on_probability: true``,
    ``revenue_margin: 0.03``). ``synonyms:`` is read by :func:`read_synonyms`, ``history_prior:`` by
    :func:`read_hyperprior`."""
    from archive.analysis.settings import VerdictRules

    path = root / SETTINGS_FILE
    if not path.is_file():
        return Settings()
    import yaml

    try:
        data = yaml.safe_load(path.read_text(encoding="utf-8")) or {}
    except (yaml.YAMLError, UnicodeDecodeError) as exc:
        raise ValueError(f"{path}:1: -: not readable YAML ({exc.__class__.__name__})") from None
    if not isinstance(data, dict):
        raise ValueError(f"{path}:1: -: expected a mapping of setting: value")
    data = {k: v for k, v in data.items() if k not in ("synonyms", "history_prior")}
    rules = data.pop("rules", None) or {}
    if not isinstance(rules, dict):
        raise ValueError(f"{path}:1: rules: expected a mapping of rule: value")
    try:
        values = _typed(path, "", Settings(), {k: v for k, v in data.items()}, exclude=frozenset({"rules"}))
        values["rules"] = VerdictRules(**_typed(path, "rules.", VerdictRules(), rules))
        return Settings(**values)
    except (TypeError, ValueError) as exc:
        if str(exc).startswith(str(path)):
            raise
        raise ValueError(f"{path}:1: -: {exc}") from None


def _typed(
    path: Path, prefix: str, defaults: Any, data: dict[str, Any], exclude: frozenset[str] = frozenset()
) -> dict[str, Any]:
    """Values of ``data`` checked against the fields (and types of the defaults) of a settings dataclass."""
    known = {f.name for f in dataclasses.fields(defaults)} - exclude
    values: dict[str, Any] = {}
    for key, value in data.items():
        if key not in known:
            raise ValueError(f"{path}:1: {prefix}{key}: unknown setting; known: {', '.join(sorted(known))}")
        default = getattr(defaults, key)
        if key == "prior" and isinstance(value, list):
            value = tuple(float(v) for v in value)
        elif isinstance(default, bool):
            if not isinstance(value, bool):
                raise ValueError(f"{path}:1: {prefix}{key}: expected true or false, got {value!r}")
        elif isinstance(default, float) and isinstance(value, int | float) and not isinstance(value, bool):
            value = float(value)
        elif default is not None and not isinstance(value, type(default)):
            raise ValueError(f"{path}:1: {prefix}{key}: expected {type(default).__name__}, got {value!r}")
        values[key] = value
    return values


def read_hyperprior(root: Path) -> Hyperprior:
    """The history model's hyperprior: defaults, overridden by ``history_prior:`` in ``archive-settings.yaml`` with
    fields of :class:`~archive.planning.hyperprior.Hyperprior` (e.g. ``between_themes_scale: 0.04``)."""
    path = root / SETTINGS_FILE
    if not path.is_file():
        return Hyperprior()
    import yaml

    data = yaml.safe_load(path.read_text(encoding="utf-8")) or {}
    found = (data.get("history_prior") if isinstance(data, dict) else None) or {}
    if not isinstance(found, dict):
        raise ValueError(f"{path}:1: history_prior: expected a mapping of setting: value")
    try:
        return Hyperprior(**_typed(path, "history_prior.", Hyperprior(), found))
    except (TypeError, ValueError) as exc:
        if str(exc).startswith(str(path)):
            raise
        raise ValueError(f"{path}:1: history_prior: {exc}") from None


def read_synonyms(root: Path) -> dict[str, list[str]]:
    """Extra search synonyms of an archive: ``synonyms: {word: [other, words]}`` in ``archive-settings.yaml``."""
    path = root / SETTINGS_FILE
    if not path.is_file():
        return {}
    import yaml

    data = yaml.safe_load(path.read_text(encoding="utf-8")) or {}
    found = data.get("synonyms") if isinstance(data, dict) else None
    if found is None:
        return {}
    if not isinstance(found, dict) or not all(
        isinstance(k, str) and isinstance(v, list) and all(isinstance(w, str) for w in v) for k, v in found.items()
    ):
        raise ValueError(f"{path}:1: synonyms: expected a mapping of word: [other, words]")
    return found


@dataclass
class TestAnalysis:
    """One analysed test: the analysis, its segment results (when asked for) and the memo rendered from them."""

    analysis: Analysis
    segments: SegmentAnalysis | None
    memo: Memo
    history: tuple[LiftPrior, list[InformedLift]] | None = None


@dataclass
class PriorResult:
    lift: LiftPrior
    baseline: BaselinePrior | None


class Archive:
    """An archive folder and its store. Open one with :meth:`Archive.open`."""

    def __init__(self, root: Path, records_dir: Path, url: str, settings: Settings, sync: bool = True):
        self.root = root
        self.records_dir = records_dir
        self.url = url
        self.settings = settings
        self.sync_first = sync
        self.last_sync: SyncReport | None = None
        self._engine: Engine | None = None
        self._synced = False
        self._hyperprior: Hyperprior | None = None

    @property
    def hyperprior(self) -> Hyperprior:
        """The history model's hyperprior (``history_prior:`` in ``archive-settings.yaml``, read on first use)."""
        if self._hyperprior is None:
            self._hyperprior = read_hyperprior(self.root)
        return self._hyperprior

    @classmethod
    def open(
        cls,
        path: str | Path | None = None,
        db: str | None = None,
        records: str | Path | None = None,
        sync: bool = True,
        settings: Settings | None = None,
    ) -> Archive:
        """Open the archive holding ``path`` (default: the current folder), or the one whose records folder is
        ``records`` (default: ``ARCHIVE_RECORDS``). ``db`` is an SQLAlchemy URL of the store (default:
        ``ARCHIVE_DB``, then SQLite in ``<root>/.archive/index.sqlite``). Raises :class:`NoArchive` when there
        is no archive; creates nothing."""
        from archive.store.engine import resolve_url

        named = records if records is not None else os.environ.get(RECORDS_ENV) or None
        if named is not None:
            records_dir = Path(named)
            if not records_dir.is_dir():
                raise NoArchive(f"records folder {records_dir} does not exist; check --records / {RECORDS_ENV}")
            root = records_dir.resolve().parent
        else:
            start = Path(path) if path is not None else Path.cwd()
            found = find_root(start)
            if found is None:
                raise NoArchive(
                    f"no archive here: no folder {start.resolve()} or above holds a records/ folder; "
                    "run the command inside an archive or pass --records"
                )
            root, records_dir = found, found / RECORDS_DIR
        return cls(root, records_dir, resolve_url(root, db), settings or read_settings(root), sync)

    # --- the store ---------------------------------------------------------------------------------------

    @property
    def display_url(self) -> str:
        """The store's URL with any password masked."""
        from archive.store.engine import display_url

        return display_url(self.url)

    def engine(self, create: bool = False) -> Engine:
        """The store's SQLAlchemy engine. Refuses a missing SQLite store unless ``create`` (what `index` does)."""
        from archive.store.engine import StoreUnavailable, make_engine, sqlite_file

        if self._engine is None:
            path = sqlite_file(self.url)
            if path is not None and not create and not path.exists():
                raise StoreUnavailable(f"no store at {self.display_url} yet: run `archive index` first")
            self._engine = make_engine(self.url, create_folder=create)
        return self._engine

    def check(self) -> CheckResult:
        """Every problem of every record (``path:line: field: message``), reading only files changed since the
        last sync when the store is current. Writes nothing."""
        from archive.records.load import check_archive
        from archive.store.engine import schema_state, sqlite_file
        from archive.store.sync import CheckResult, check_against_store

        path = sqlite_file(self.url)
        if path is None or path.exists():
            engine = self.engine()
            if schema_state(engine) == "current":
                return check_against_store(self.records_dir, engine)
        report = check_archive(self.records_dir)
        return CheckResult(report.files, report.problems)

    def index(
        self,
        full: bool = False,
        progress: Callable[[int], None] | None = None,
        on_wait: Callable[[], None] | None = None,
    ) -> SyncReport:
        """Sync the store, creating its tables (or rebuilding a store of an older schema)."""
        from archive.store.sync import sync

        report = sync(
            self.records_dir,
            self.engine(create=True),
            self.settings,
            create=True,
            full=full,
            progress=progress,
            on_wait=on_wait,
        )
        self.last_sync, self._synced = report, True
        return report

    def sync(
        self,
        full: bool = False,
        progress: Callable[[int], None] | None = None,
        on_wait: Callable[[], None] | None = None,
    ) -> SyncReport:
        """Bring an existing, current store in line with the records folder (never creates tables)."""
        from archive.store.sync import sync

        report = sync(self.records_dir, self.engine(), self.settings, full=full, progress=progress, on_wait=on_wait)
        self.last_sync, self._synced = report, True
        return report

    def _ready(self) -> Engine:
        """The store, synced once per opened archive when ``sync`` was asked for."""
        from archive.store.engine import require_current

        engine = self.engine()
        if self.sync_first and not self._synced:
            self.sync()
        else:
            require_current(engine, self.url)
        return engine

    # --- finding tests -----------------------------------------------------------------------------------

    def find(self, filters: Filters | None = None) -> list[dict[str, Any]]:
        """Tests matching every filter, as dicts (see :data:`archive.store.query.LIST_COLUMNS`)."""
        from archive.store.query import find_tests, synonym_groups

        return find_tests(self._ready(), filters, synonym_groups(read_synonyms(self.root)))

    def record(self, record_id: str) -> Record:
        """The validated record of a test."""
        from archive.store.query import get_record

        return get_record(self._ready(), record_id)

    def records(self) -> list[Record]:
        """Every filed record, validated, in file-name order."""
        from archive.store.query import all_records

        return all_records(self._ready())

    def values(self, kind: str) -> list[str]:
        """Values in use of theme, tag, page_area, status, outcome or owner."""
        from archive.store.query import label_values

        return label_values(self._ready(), kind)

    def labels(self, kind: str = "theme") -> list[dict[str, Any]]:
        """The themes (or page areas, or tags) in use: per value, its tests, comparisons, how many of them the
        analysis calls winners (the win rate, observed), and the start of its latest test."""
        kinds = {"theme": "themes", "page_area": "page_area", "page-area": "page_area", "tag": "tags"}
        if kind not in kinds:
            raise ValueError("kind is theme, page-area or tag")
        field_name = kinds[kind]
        rows: dict[str, dict[str, Any]] = {}
        for r in self.records():
            values = [r.page_area] if field_name == "page_area" else list(dict.fromkeys(getattr(r, field_name)))
            for value in values:
                row = rows.setdefault(value, {"value": value, "tests": 0, "comparisons": 0, "winners": 0, "last": None})
                row["tests"] += 1
                if r.started and (row["last"] is None or r.started > row["last"]):
                    row["last"] = r.started
        for e in self.effects():
            values = [e.page_area] if field_name == "page_area" else list(dict.fromkeys(getattr(e, field_name)))
            for value in values:
                if value in rows:
                    rows[value]["comparisons"] += 1
                    rows[value]["winners"] += e.verdict == "winner"
        out = sorted(rows.values(), key=lambda row: (-row["tests"], row["value"]))
        for row in out:
            row["win_rate"] = row["winners"] / row["comparisons"] if row["comparisons"] else None
        return out

    def ids(self) -> list[str]:
        """The ids of every filed test, sorted."""
        from archive.store.query import record_ids

        return record_ids(self._ready())

    def tests(self, filters: Filters | None = None) -> pd.DataFrame:
        """One row per test."""
        from archive.store.query import tests_frame

        return tests_frame(self._ready(), filters)

    def arms(self, filters: Filters | None = None) -> pd.DataFrame:
        """One row per arm of each matching test, with its conversion rate."""
        from archive.store.query import arms_frame

        return arms_frame(self._ready(), filters)

    def segments(self, filters: Filters | None = None) -> pd.DataFrame:
        """One row per test, segment dimension, segment value and arm."""
        from archive.store.query import segments_frame

        return segments_frame(self._ready(), filters)

    # --- one test ----------------------------------------------------------------------------------------

    def analyze(
        self,
        record_id: str,
        settings: Settings | None = None,
        by: list[str] | None = None,
        adjust: Literal["bh", "holm"] = "bh",
        prior: str = "uniform",
    ) -> TestAnalysis:
        """The analysis of a filed test: read from the store when the archive's settings apply, recomputed from the
        stored record when ``settings`` differ; ``by`` adds segment results, ``prior='history'`` the lifts under
        the archive's history prior (Gelman et al., BDA3 §2.5 normal-normal update)."""
        from archive.analysis import Analysis
        from archive.analysis.jsonable import loads
        from archive.analysis.segments import analyze_segments
        from archive.render.analysis import build_memo
        from archive.store.query import get_analysis

        if prior not in ("uniform", "history"):
            raise ValueError("--prior is uniform or history")
        engine = self._ready()
        record = self.record(record_id)
        s = settings or self.settings
        if s == self.settings:
            stored = get_analysis(engine, record_id)
            if stored.error is not None:
                from archive.analysis import CannotAnalyze

                raise CannotAnalyze(stored.error)
            analysis = loads(Analysis, stored.result_json)
        else:
            analysis = self._recompute(record, s)
        segments = analyze_segments(record, by, adjust, s) if by else None
        history = self._history(record) if prior == "history" else None
        return TestAnalysis(analysis, segments, build_memo(analysis, segments), history)

    def _recompute(self, record: Record, s: Settings) -> Analysis:
        from archive.analysis import analyze
        from archive.records.orders import orders_path, read_orders

        orders = None
        if record.orders_file:
            target = orders_path(self.records_dir / f"{record.id}.yaml", record.orders_file)
            if target is not None:
                orders, _ = read_orders(target, {a.name for a in record.arms})
        return analyze(record, orders, s)

    def _history(self, record: Record) -> tuple[LiftPrior, list[InformedLift]]:
        from archive.planning.priors import informed_lift, prior_for_record
        from archive.stats.proportions import log_risk_ratio

        chosen = prior_for_record(self.effects(), record, self.hyperprior)
        control = record.control_arm()
        minimum = record.plan.minimum_lift if record.plan else None
        items = []
        for arm in record.arms:
            if arm.control or arm.conversions is None or arm.visitors is None:
                continue
            log_rr, var, _ = log_risk_ratio(
                arm.conversions, arm.visitors, control.conversions or 0, control.visitors or 0
            )
            items.append(informed_lift(arm.name, log_rr, var**0.5, chosen, minimum))
        return chosen, items

    @staticmethod
    def analyze_file(
        path: Path, settings: Settings | None = None, by: list[str] | None = None, adjust: Literal["bh", "holm"] = "bh"
    ) -> TestAnalysis:
        """The analysis of a record file not yet filed (any file name). Raises ``ArchiveInvalid`` on errors."""
        from archive.analysis import analyze
        from archive.analysis.segments import analyze_segments
        from archive.records.load import load_record
        from archive.records.problems import ArchiveInvalid, errors
        from archive.render.analysis import build_memo

        if not path.is_file():
            raise FileNotFoundError(f"{path} not found")
        loaded, problems = load_record(path, expect_stem=False)
        blocking = errors(problems)
        if loaded is None or blocking:
            raise ArchiveInvalid(blocking or problems)
        s = settings or Settings()
        analysis = analyze(loaded.record, loaded.orders, s)
        segments = analyze_segments(loaded.record, by, adjust, s) if by else None
        return TestAnalysis(analysis, segments, build_memo(analysis, segments))

    # --- many tests --------------------------------------------------------------------------------------

    def effects(self, segment: str | None = None) -> list[Effect]:
        """Every comparison of every finished test as an effect for pooling (or its segment effects for one
        dimension), from the store."""
        from archive.analysis.jsonable import rebuild
        from archive.pooling.effects import Effect
        from archive.store.query import stored_effects

        return [rebuild(Effect, item) for item in stored_effects(self._ready(), segment)]

    def pool(
        self, by: str = "theme", method: str = "REML", hksj: bool = True, include_untrusted: bool = False
    ) -> PoolResult:
        """Random-effects pooling by group (REML + HKSJ by default; DerSimonian & Laird 1986 beside it)."""
        from archive.pooling.groups import pool

        grouping, segment = by.replace("-", "_"), None
        if grouping.startswith("segment:"):
            grouping, segment = "segment", by.split(":", 1)[1]
        effects = self.effects(segment)
        if not effects:
            raise ValueError("no finished test with results to pool" + (f" by segment {segment!r}" if segment else ""))
        result = pool(effects, grouping, method=method, hksj=hksj, include_untrusted=include_untrusted)
        if segment:
            result.by = by
        return result

    def prior(self, theme: str, page_area: str | None = None) -> PriorResult:
        """The predictive prior of a new test's lift for a theme (and page area), and the page area's baseline."""
        from archive.planning.priors import baseline_prior, lift_prior

        result = lift_prior(self.effects(), theme, page_area, self.hyperprior)
        baseline = baseline_prior(self.records(), page_area) if page_area else None
        return PriorResult(result, baseline)

    def baseline(self, page_area: str) -> float:
        """The average control conversion rate of a page area (beta-binomial fit over its tests)."""
        from archive.planning.priors import baseline_prior

        fitted = baseline_prior(self.records(), page_area)
        if fitted is None:
            raise ValueError(f"no history of control arms on page area {page_area!r}: give --baseline")
        return fitted.mean

    def plan(
        self,
        baseline: float | None = None,
        minimum_lift: float = 0.05,
        *,
        page_area: str | None = None,
        theme: str | None = None,
        **options: Any,
    ) -> TestPlan:
        """Visitors per arm for a new test (see :func:`archive.planning.plan.plan_test` for ``options``), with
        the theme's history prior and win rate when ``theme`` is given."""
        from archive.planning.plan import plan_test
        from archive.planning.priors import lift_prior
        from archive.pooling.groups import pool

        base = baseline if baseline is not None else self.baseline(page_area) if page_area else None
        if base is None:
            raise ValueError("give --baseline, or --page-area to take it from the archive")
        history = win_rate = None
        if theme:
            effects = self.effects()
            history = lift_prior(effects, theme, page_area, self.hyperprior)
            groups = {g.key: g for g in pool(effects, "theme", permutations=0).groups}
            if theme in groups:
                win_rate = groups[theme].wins.shrunk
        return plan_test(base, minimum_lift, prior=history, theme_win_rate=win_rate, **options)

    def calibrate(self, progress: Callable[[int, int], None] | None = None) -> Calibration:
        """Replay the archive in date order: forecasts from earlier tests against what happened; ``progress`` is
        told (comparisons replayed, all comparisons) as the replay goes."""
        from archive.planning.calibration import calibrate

        return calibrate(self.effects(), self.hyperprior, progress)

    def build_site(
        self,
        out: Path,
        title: str = "Test archive",
        run_mkdocs: bool = True,
        progress: Callable[[str], None] | None = None,
        **options: Any,
    ) -> BuildReport:
        """Generate the site's pages from the store and build the HTML with MkDocs."""
        from archive.site.build import build_site
        from archive.site.entries import entries_from_store

        entries = entries_from_store(self._ready())
        return build_site(
            self.records_dir, out, title, run_mkdocs, progress, entries=entries, hyperprior=self.hyperprior, **options
        )
