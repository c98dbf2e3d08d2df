"""What the store keeps of each record beside its fields: everything the per-test analysis found.

:func:`derive` runs the analysis of one test once (trust checks, per-arm and per-comparison results, verdicts,
recommendation, the memo, segment results, the effects that pooling uses and the segment effects) and returns
it as JSON. :func:`analysis_version` names the code and settings it was computed with; a record whose stored
version differs is analysed again.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from dataclasses import dataclass
from typing import TYPE_CHECKING

from archive.analysis.settings import Settings

if TYPE_CHECKING:
    from archive.records.model import Record
    from archive.records.orders import Orders

#: bump when the analysis code changes what it computes: every record is analysed again at the next sync
ANALYSIS_CODE_VERSION = "5"

POOLED_STATUSES = ("finished", "stopped-early")  # tests whose comparisons enter pooling


def analysis_version(settings: Settings) -> str:
    """The code version and a hash of the settings: the key of every stored analysis."""
    blob = json.dumps(dataclasses.asdict(settings), sort_keys=True, default=str)
    return f"{ANALYSIS_CODE_VERSION}:{hashlib.sha256(blob.encode()).hexdigest()[:16]}"


@dataclass
class Derived:
    version: str
    error: str | None = None
    trusted: bool | None = None
    action: str | None = None
    result_json: str = "null"
    memo_json: str = "null"
    segments_json: str = "null"
    effects_json: str = "[]"
    segment_effects_json: str = "{}"

    def row(self, record_id: str) -> dict[str, object]:
        return {"record_id": record_id, **dataclasses.asdict(self)}


def derive(record: Record, orders: Orders | None, settings: Settings) -> Derived:
    """The analysis of one record as JSON (an error message instead when it cannot be analysed)."""
    from archive.analysis import CannotAnalyze, analyze
    from archive.analysis.jsonable import dumps
    from archive.analysis.segments import analyze_segments
    from archive.pooling.effects import record_effects_from, segment_effects
    from archive.render.analysis import build_memo

    version = analysis_version(settings)
    try:
        analysis = analyze(record, orders, settings)
    except CannotAnalyze as exc:
        return Derived(version, error=str(exc))
    dims = list(record.segments)
    segments = analyze_segments(record, dims, "bh", settings) if dims else None
    effects = record_effects_from(record, analysis) if record.status in POOLED_STATUSES else []
    by_dimension = {dim: segment_effects(record, dim, settings, effects) for dim in dims} if effects else {}
    return Derived(
        version,
        trusted=analysis.trusted,
        action=analysis.recommendation.action,
        result_json=dumps(analysis),
        memo_json=dumps(build_memo(analysis)),
        segments_json="null" if segments is None else dumps(segments),
        effects_json=dumps(effects),
        segment_effects_json="{" + ",".join(f"{json.dumps(d)}:{dumps(e)}" for d, e in by_dimension.items()) + "}",
    )
