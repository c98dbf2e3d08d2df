"""Shares typed on the command line: 5% or 0.05, never a bare 5 that could mean 5% or 500%."""

from __future__ import annotations

import pytest
from typer.testing import CliRunner

from archive.cli.main import app
from archive.cli.values import parse_share

runner = CliRunner()


@pytest.mark.parametrize(
    ("text", "share"),
    [("5%", 0.05), ("+5%", 0.05), ("2.5 %", 0.025), ("2,5%", 0.025), ("0.05", 0.05), (".05", 0.05), ("0,05", 0.05)],
)
def test_percent_or_fraction(text: str, share: float) -> None:
    assert parse_share(text) == pytest.approx(share)


@pytest.mark.parametrize(("text", "message"), [("5", "ambiguous"), ("1", "ambiguous"), ("five", "not a share")])
def test_ambiguous_or_unreadable_refused(text: str, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        parse_share(text)


def test_plan_refuses_a_bare_5_and_plans_for_5_percent() -> None:
    refused = runner.invoke(app, ["plan", "--minimum-lift", "5", "--baseline", "0.03"])
    assert refused.exit_code == 2 and "ambiguous" in refused.stderr
    as_percent = runner.invoke(app, ["plan", "--minimum-lift", "5%", "--baseline", "0.03", "-f", "json"])
    as_fraction = runner.invoke(app, ["plan", "--minimum-lift", "0.05", "--baseline", "0.03", "-f", "json"])
    assert as_percent.exit_code == 0, as_percent.stdout
    assert as_percent.stdout == as_fraction.stdout  # the same plan either way


def test_analyze_margin_takes_a_percentage() -> None:
    refused = runner.invoke(app, ["analyze", "2023-12-free-delivery-threshold", "--margin", "3"])
    assert refused.exit_code == 2 and "ambiguous" in refused.stderr
    zero = runner.invoke(app, ["analyze", "2023-12-free-delivery-threshold", "--margin", "0%"])
    assert zero.exit_code == 2 and "above 0" in zero.stderr
