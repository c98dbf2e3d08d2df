"""Segment analysis: interaction, adjustment, Simpson's paradox, small segments (constructed, invented data)."""

from __future__ import annotations

import datetime as dt
import json
import math
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import yaml
from typer.testing import CliRunner

from archive.analysis.segments import SegmentRow, UnknownDimension, _adjust, analyze_segments
from archive.cli.main import app
from archive.records.model import Record
from archive.stats.proportions import compare_rates, mantel_haenszel_rr

runner = CliRunner()


def seg_record(cells_by_dim: dict[str, dict[str, dict[str, tuple[int, int]]]], **plan: Any) -> Record:
    """Arm totals are the sums over the first dimension's segments."""
    first = next(iter(cells_by_dim.values()))
    totals: dict[str, list[int]] = {}
    for cells in first.values():
        for arm, (n, x) in cells.items():
            totals.setdefault(arm, [0, 0])
            totals[arm][0] += n
            totals[arm][1] += x
    return Record.model_validate(
        {
            "id": "seg",
            "title": "Segmented test",
            "status": "finished",
            "started": dt.date(2025, 5, 5),
            "ended": dt.date(2025, 6, 1),
            "page_area": "product-page",
            "themes": ["product-imagery"],
            "hypothesis": "h",
            "plan": {"visitors_per_arm": 100, **plan},
            "arms": [
                {"name": a, "control": a == "control", "visitors": n, "conversions": x} for a, (n, x) in totals.items()
            ],
            "segments": {
                dim: {
                    value: {arm: {"visitors": n, "conversions": x} for arm, (n, x) in cells.items()}
                    for value, cells in by_value.items()
                }
                for dim, by_value in cells_by_dim.items()
            },
        }
    )


def test_effect_that_differs_by_device() -> None:
    r = seg_record(
        {
            "device": {
                "desktop": {"control": (20_000, 800), "b": (20_000, 960)},  # +20%
                "mobile": {"control": (30_000, 600), "b": (30_000, 540)},  # -10%
            }
        }
    )
    (dim,) = analyze_segments(r, ["device"]).dimensions
    (test,) = dim.effect_tests
    assert test.differs and test.interaction_p_value is not None and test.interaction_p_value < 0.001
    assert "differs by device" in test.statement
    # with two segments, Cochran's Q equals the squared Altman-Bland z (same test)
    assert test.q == pytest.approx(test.interaction_z**2, rel=1e-10)  # type: ignore[operator]
    assert dim.label == "exploratory"


def test_consistent_effect_whatever_the_separate_p_values() -> None:
    r = seg_record(
        {
            "device": {
                "desktop": {"control": (60_000, 2400), "b": (60_000, 2640)},  # +10%, significant alone
                "mobile": {"control": (6_000, 120), "b": (6_000, 130)},  # +8%, not significant alone
            }
        },
        segments=["device"],
    )
    (dim,) = analyze_segments(r, ["device"]).dimensions
    rows = {row.segment: row for row in dim.rows}
    assert rows["desktop"].p_value < 0.05 < rows["mobile"].p_value
    (test,) = dim.effect_tests
    assert not test.differs and "consistent with one common effect" in test.statement
    assert dim.preregistered and dim.label == "pre-registered"


def test_small_segments_left_out_of_the_heterogeneity_test() -> None:
    r = seg_record(
        {
            "source": {
                "paid": {"control": (20_000, 600), "b": (20_000, 650)},
                "organic": {"control": (20_000, 640), "b": (20_000, 660)},
                "social": {"control": (150, 2), "b": (150, 5)},  # 150 x 2.3% = 3.5 expected conversions
            }
        }
    )
    (dim,) = analyze_segments(r, ["source"]).dimensions
    small = {row.segment for row in dim.rows if row.small}
    assert small == {"social"}
    (test,) = dim.effect_tests
    assert test.segments_excluded == ["social"] and test.interaction_p_value is not None


def test_simpsons_paradox_is_flagged() -> None:
    # b converts worse than control on every device, yet better pooled, because its traffic is mostly desktop
    r = seg_record(
        {
            "device": {
                "desktop": {"control": (1_000, 110), "b": (9_000, 900)},
                "mobile": {"control": (9_000, 198), "b": (1_000, 20)},
            }
        }
    )
    (dim,) = analyze_segments(r, ["device"]).dimensions
    (mix,) = dim.mix_checks
    assert mix.reversal and mix.warning is not None and "Simpson" in mix.warning
    assert mix.pooled_lift is not None and mix.pooled_lift > 0
    assert mix.adjusted_lift is not None and mix.adjusted_lift < 0
    assert all(row.srm_p_value is not None and row.srm_p_value < 1e-10 for row in dim.rows)


def test_mantel_haenszel_against_statsmodels() -> None:
    from statsmodels.stats.contingency_tables import StratifiedTable

    strata = [(110, 1000, 90, 1000), (40, 800, 30, 900), (12, 300, 15, 280)]
    # statsmodels StratifiedTable: rows (treatment, control), columns (event, no event); riskratio_pooled
    tables = [np.array([[a, n1 - a], [c, n0 - c]]) for a, n1, c, n0 in strata]
    ours = mantel_haenszel_rr(strata)
    assert ours is not None
    assert 1 + ours.lift == pytest.approx(StratifiedTable(tables).riskratio_pooled, rel=1e-12)


def test_greenland_robins_variance_reduces_to_katz_for_one_stratum() -> None:
    # with one stratum, Var(log RR_MH) equals 1/a - 1/n1 + 1/c - 1/n0 (metafor escalc "RR")
    single = mantel_haenszel_rr([(120, 1000, 100, 1000)])
    katz = compare_rates(120, 1000, 100, 1000)
    assert single is not None and katz.log_rr_se is not None
    assert single.log_rr_se == pytest.approx(katz.log_rr_se, rel=1e-12)


def _rows(pvalues: list[float]) -> list[SegmentRow]:
    return [SegmentRow("d", str(i), "b", 1, 0, 1, 0, 0, 0, 0, 0, None, None, None, p) for i, p in enumerate(pvalues)]


BH_P = [
    0.0001,
    0.0004,
    0.0019,
    0.0095,
    0.0201,
    0.0278,
    0.0298,
    0.0344,
    0.0459,
    0.3240,
    0.4262,
    0.5719,
    0.6528,
    0.7590,
    1.000,
]


def test_benjamini_hochberg_array() -> None:
    # Benjamini & Hochberg (1995) §4 example; adjusted values printed in scipy.stats.false_discovery_control's docstring
    rows = _rows(BH_P)
    _adjust(rows, "bh")
    expected = [
        0.0015,
        0.003,
        0.0095,
        0.035625,
        0.0603,
        0.06385714,
        0.06385714,
        0.0645,
        0.0765,
        0.486,
        0.58118182,
        0.714875,
        0.75323077,
        0.81321429,
        1,
    ]
    assert [r.p_adjusted for r in rows] == pytest.approx(expected, abs=1e-8)


def test_holm_array() -> None:
    # R multtest mt.rawp2adjp, statsmodels test_multi.py res_multtest3: Holm 0.01, 0.018, 0.024, 0.028, 0.03, 0.25 x5
    rows = _rows([0.001, 0.002, 0.003, 0.004, 0.005, 0.05, 0.06, 0.07, 0.08, 0.09])
    _adjust(rows, "holm")
    assert [r.p_adjusted for r in rows] == pytest.approx([0.01, 0.018, 0.024, 0.028, 0.03] + [0.25] * 5, rel=1e-12)


def test_unknown_dimension() -> None:
    r = seg_record({"device": {"desktop": {"control": (100, 5), "b": (100, 6)}}})
    with pytest.raises(UnknownDimension, match="no segments by browser"):
        analyze_segments(r, ["browser"])


def test_cli_by_dimension(tmp_path: Path) -> None:
    r = seg_record(
        {
            "device": {
                "desktop": {"control": (20_000, 800), "b": (20_000, 960)},
                "mobile": {"control": (30_000, 600), "b": (30_000, 540)},
            }
        }
    )
    (tmp_path / "seg.yaml").write_text(yaml.safe_dump(r.model_dump(exclude_none=True), sort_keys=False))
    assert runner.invoke(app, ["index", "--records", str(tmp_path)]).exit_code == 0
    common = ["analyze", "seg", "--records", str(tmp_path), "--by", "device"]
    result = runner.invoke(app, [*common, "--format", "json", "--forest", str(tmp_path / "forest.svg")])
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    assert data["segments"]["dimensions"][0]["effect_tests"][0]["differs"] is True
    assert (tmp_path / "forest-b.svg").read_bytes().startswith(b"<?xml")
    result = runner.invoke(app, [*common, "--format", "markdown", "--adjust", "holm"])
    assert "## Segments by device (exploratory)" in result.stdout and "Holm p" in result.stdout
    result = runner.invoke(app, ["analyze", "seg", "--records", str(tmp_path), "--by", "browser"])
    assert result.exit_code == 2 and "no segments by browser" in result.stderr
    assert not math.isnan(data["segments"]["dimensions"][0]["rows"][0]["p_adjusted"])


def test_every_segment_json_key_is_documented() -> None:
    import re

    from tests.test_analysis import _keys

    r = seg_record(
        {
            "device": {
                "desktop": {"control": (2000, 80), "b": (2000, 96)},
                "mobile": {"control": (3000, 60), "b": (3000, 54)},
            }
        }
    )
    data = analyze_segments(r, ["device"]).to_dict()
    doc = (Path(__file__).resolve().parents[1] / "site" / "reference" / "analysis-json.md").read_text()
    assert _keys(data) - set(re.findall(r"`([a-z_]+)`", doc)) == set()
