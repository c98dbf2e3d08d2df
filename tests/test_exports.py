"""Filing from the exports teams have: delimiters, decimal commas, order-level exports, located errors."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from archive.cli.main import app
from archive.records.exports import ExportError, parse_number, read_order_export
from archive.records.load import check_archive, load_record
from archive.records.template import arms_from_csv, arms_with_orders
from tests.conftest import good_text, snapshot

runner = CliRunner()
NEW = ["new", "gift-wrap-offer", "--title", "Gift wrap offer", "--page-area", "basket", "--theme", "gift-wrap"]


def run(*args: str) -> tuple[int, str, str]:
    result = runner.invoke(app, list(args))
    return result.exit_code, result.stdout, result.stderr


@pytest.mark.parametrize(
    "text",
    [
        "arm,visitors,conversions,revenue,revenue_sum_of_squares\n"
        "control,10000,310,15500.5,1200000.25\nribbon,10050,342,16800,1350000\n",
        # a European spreadsheet: semicolons, decimal commas, dots grouping thousands
        "arm;visitors;conversions;revenue;revenue_sum_of_squares\n"
        "control;10.000;310;15.500,5;1.200.000,25\nribbon;10.050;342;16800;1350000\n",
        "Arm\tVisitors\tConversions\tRevenue\tRevenue sum of squares\n"
        "control\t10000\t310\t15500,5\t1200000,25\nribbon\t10050\t342\t16800\t1350000\n",
        "\ufeffarm;visitors;conversions;revenue;revenue_sum_of_squares\r\n"
        'control;10000;310;"15500,5";1200000,25\r\nribbon;10050;342;16800;1350000\r\n',
    ],
    ids=["comma", "semicolon-decimal-comma", "tab-decimal-comma", "bom-crlf-quoted"],
)
def test_results_in_any_delimiter_and_decimal_style(tmp_path: Path, text: str) -> None:
    path = tmp_path / "results.csv"
    path.write_text(text, encoding="utf-8", newline="")
    control, ribbon = arms_from_csv(path)
    assert (control.name, control.control, control.visitors, control.conversions) == ("control", True, 10000, 310)
    assert control.revenue == 15500.5 and control.revenue_sum_of_squares == 1200000.25
    assert (ribbon.visitors, ribbon.revenue, ribbon.revenue_sum_of_squares) == (10050, 16800.0, 1350000.0)


def test_semicolon_csv_errors_are_located_not_tuples(tmp_path: Path) -> None:
    path = tmp_path / "results.csv"
    path.write_text("arm;visitors;conversions\ncontrol;10000;310\nribbon;viele;342\n")
    with pytest.raises(ExportError) as caught:
        arms_from_csv(path)
    assert [str(p) for p in caught.value.problems] == [
        f"{path}:3: visitors: 'viele' is not a whole number (file read with decimal point)"
    ]
    path.write_text("arm|visitors|conversions\ncontrol|10000|310\n")
    with pytest.raises(ExportError) as caught:
        arms_from_csv(path)
    message = str(caught.value)
    assert message.startswith(f"{path}:1: -: the header lacks arm, visitors, conversions;") and "(" not in message[:60]
    assert "('" not in message


def test_numbers_in_both_decimal_styles() -> None:
    assert parse_number("1.234,56", decimal_comma=True) == 1234.56
    assert parse_number("1 234,5", decimal_comma=True) == 1234.5
    assert parse_number("1,234.56", decimal_comma=False) == 1234.56
    assert parse_number("12,5", decimal_comma=False) is None  # a comma in a comma-decimal file only
    assert parse_number("1.2.3", decimal_comma=True) is None
    assert parse_number("nan", decimal_comma=False) is None


def _orders_frame(rng: np.random.Generator, id_column: str) -> pd.DataFrame:
    n = 400
    ids = rng.integers(0, 150, n) if id_column == "visitor_id" else np.arange(n)
    return pd.DataFrame(
        {
            "arm": rng.choice(["control", "ribbon"], n),
            id_column: [f"V{i:05d}" for i in ids],
            "value": np.round(rng.lognormal(3.5, 0.8, n), 2),
        }
    )


@pytest.mark.parametrize("id_column", ["visitor_id", "order_id"])
def test_order_export_round_trip(tmp_path: Path, id_column: str) -> None:
    frame = _orders_frame(np.random.default_rng(12), id_column)
    export = tmp_path / "orders-export.csv"
    frame.to_csv(export, sep=";", decimal=",", index=False)  # as a European spreadsheet writes it
    records = tmp_path / "records"
    results = tmp_path / "results.csv"
    results.write_text("arm;visitors;conversions\ncontrol;5.000;140\nribbon;5.010;150\n")
    code, out, err = run(*NEW, "--results", str(results), "--orders", str(export), "--records", str(records))
    assert code == 0, out + err
    (loaded,) = check_archive(records).records
    assert loaded.record.orders_file == "gift-wrap-offer-orders.csv" and loaded.orders is not None
    # independent reference: pandas groupby on the export as written (per-visitor totals before squaring)
    per_unit = frame.groupby(["arm", id_column])["value"].sum()
    for arm in loaded.record.arms:
        rows = frame[frame["arm"] == arm.name]
        assert arm.orders == len(rows)
        assert arm.revenue == pytest.approx(rows["value"].sum(), rel=1e-12)
        assert arm.revenue_sum_of_squares == pytest.approx(float((per_unit[arm.name] ** 2).sum()), rel=1e-12)
        assert loaded.orders.values[arm.name] == pytest.approx(rows["value"].tolist())
    # the attached copy reads back as an orders file with the same rows
    copy = pd.read_csv(records / "gift-wrap-offer-orders.csv", dtype={id_column: str})
    pd.testing.assert_frame_equal(copy, frame, check_dtype=False)


def test_order_export_alone_gives_arms_and_buyers(tmp_path: Path) -> None:
    export = tmp_path / "orders.csv"
    export.write_text("arm,visitor_id,value\nribbon,a,10\ncontrol,b,5.5\nribbon,a,2.5\nribbon,c,1\n")
    arms = {a.name: a for a in arms_with_orders(None, read_order_export(export))}
    assert arms["control"].control and not arms["ribbon"].control
    # by hand: ribbon visitor a ordered 10 + 2.5, visitor c 1 -> 12.5^2 + 1^2 = 157.25; two buyers, three orders
    assert (arms["ribbon"].orders, arms["ribbon"].revenue, arms["ribbon"].revenue_sum_of_squares) == (3, 13.5, 157.25)
    assert arms["ribbon"].conversions == 2 and arms["control"].conversions == 1


def test_order_export_never_overwrites(tmp_path: Path) -> None:
    export = tmp_path / "orders.csv"
    export.write_text("arm,order_id,value\ncontrol,1,5\nb,2,7\n")
    records = tmp_path / "records"
    records.mkdir()
    (records / "gift-wrap-offer-orders.csv").write_text("arm,order_id,value\n")
    before = snapshot(records)
    code, _, err = run(*NEW, "--orders", str(export), "--records", str(records))
    assert code == 1 and "gift-wrap-offer-orders.csv already exists" in err
    assert snapshot(records) == before


def test_order_export_errors_are_located(tmp_path: Path) -> None:
    export = tmp_path / "orders.csv"
    export.write_text("arm;order_id;value\ncontrol;1;5,5\ncontrol;2;-3\nb;;4\n")
    with pytest.raises(ExportError) as caught:
        read_order_export(export)
    assert [str(p) for p in caught.value.problems] == [
        f"{export}:3: value: '-3': an order value is at least 0",
        f"{export}:4: order_id: empty id",
    ]


def test_analyze_file_with_any_name(tmp_path: Path) -> None:
    draft = tmp_path / "draft.yaml"
    draft.write_text(good_text("free-delivery-bar"))
    loaded, problems = load_record(draft)
    assert [p.severity for p in problems if p.field == "id"] == ["error"]  # in the archive: a mismatch is an error
    loaded, problems = load_record(draft, expect_stem=False)
    assert loaded is not None and [p.severity for p in problems if p.field == "id"] == ["warning"]
    code, out, err = run("analyze", "--file", str(draft), "--records", str(tmp_path))
    assert code == 0, out + err
    assert "Free delivery threshold on the basket page" in out
