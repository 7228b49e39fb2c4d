"""``workbook-tools batch``: natural file order, per-file isolation, the summary workbook and CSV.

Reference values: statsmodels ``anova_lm`` (type II) and pandas on each
week's grid, independent of the code under test.
"""

from __future__ import annotations

import csv
import os
import shutil

import openpyxl
import pytest
from hypothesis import given
from hypothesis import strategies as st

from tests.live_service import statsmodels_treatment_p
from workbook_tools import batch
from workbook_tools.cli import main
from workbook_tools.layout import BATCH_COLUMNS
from workbook_tools.samples import SAMPLES, build_sample

GRID = SAMPLES[0]   # Hardness!B3:G9: treatments in C3:G3, blocks in B4:B9
WEEKS = (1, 2, 10)


def weekly_books(folder):
    """Three weekly copies of the sample grid; week w adds w/4 to the first treatment (column C)."""
    source = build_sample(GRID, folder / "source")
    folder.mkdir(exist_ok=True)
    for week in WEEKS:
        book = openpyxl.load_workbook(source)
        ws = book[GRID.sheet]
        for row in range(4, 10):
            ws.cell(row, 3).value = round(ws.cell(row, 3).value + week / 4, 2)
        book.save(folder / f"week-{week}.xlsx")
    return [folder / f"week-{w}.xlsx" for w in WEEKS]


def _reference(book):
    """F, p, MSE, CV % and the highest mean of a week's grid from statsmodels and plain arithmetic."""
    import pandas as pd
    import statsmodels.formula.api as smf

    ws = openpyxl.load_workbook(book)[GRID.sheet]
    grid = [[c.value for c in row] for row in ws["B3:G9"]]
    frame = pd.DataFrame([(r[0], t, v) for r in grid[1:] for t, v in zip(grid[0][1:], r[1:])],
                         columns=["block", "treatment", "y"]).astype({"block": str})
    fit = smf.ols("y ~ C(treatment) + C(block)", data=frame).fit()
    f, p = statsmodels_treatment_p(book, GRID.sheet, "B3:G9")
    means = frame.groupby("treatment")["y"].mean()
    return {"f": f, "p": p, "mse": fit.mse_resid, "cv": 100 * fit.mse_resid ** 0.5 / frame["y"].mean(),
            "best": means.idxmax(), "best_mean": means.max()}


@given(st.integers(0, 10 ** 6), st.integers(0, 10 ** 6))
def test_natural_order_compares_numbers_by_value(a, b):
    # invariant: week-a sorts before week-b exactly when a < b (case ignored)
    assert (batch.natural_key(f"week-{a}.xlsx") < batch.natural_key(f"Week-{b}.xlsx")) == (a < b)


def test_batch_summary_rows_match_statsmodels(tmp_path, capsys):
    books = weekly_books(tmp_path / "in")
    (tmp_path / "in" / "week-3.xlsx").write_text("not a workbook")
    shutil.copy(books[0], tmp_path / "in" / "week-4.xlsx")
    bad = openpyxl.load_workbook(books[0])
    bad[GRID.sheet].title = "Renamed"
    bad.save(tmp_path / "in" / "week-5.xlsx")
    out = tmp_path / "out"
    code = main(["batch", str(tmp_path / "in"), "--out", str(out), "--range", GRID.range, "--workers", "2"])
    assert code == 2
    assert "Analysed 4 of 6 workbook(s)" in capsys.readouterr().out
    with open(out / "batch-summary.csv", newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    assert [r["File"] for r in rows] == ["week-1.xlsx", "week-2.xlsx", "week-3.xlsx", "week-4.xlsx", "week-5.xlsx",
                                         "week-10.xlsx"]
    assert list(rows[0]) == [column.header for _, column in BATCH_COLUMNS]
    assert "not a workbook" in rows[2]["Status"] and "no sheet named 'Hardness'" in rows[4]["Status"]
    done = {r["File"]: r for r in rows if r["Status"] == "done"}
    for week, book in zip(WEEKS, books):
        row, ref = done[f"week-{week}.xlsx"], _reference(book)
        assert float(row["Treatment F"]) == pytest.approx(ref["f"], rel=1e-9)
        assert float(row["Treatment p-value"]) == pytest.approx(ref["p"], rel=1e-7)
        assert float(row["Error mean square"]) == pytest.approx(ref["mse"], rel=1e-9)
        assert float(row["CV %"]) == pytest.approx(ref["cv"], rel=1e-9)
        assert row["Best treatment"] == ref["best"]
        assert float(row["Best adjusted mean"]) == pytest.approx(ref["best_mean"], rel=1e-12)
        assert row["Best treatment's group"].isalpha()
        assert (out / f"week-{week}-analysed.xlsx").exists()
    assert not (out / "week-3-analysed.xlsx").exists()


def test_summary_workbook_has_the_table_and_trend_charts(tmp_path):
    weekly_books(tmp_path / "in")
    report = batch.run_batch(tmp_path / "in", tmp_path / "out", GRID.range, workers=1)
    assert not report.refused
    book = openpyxl.load_workbook(report.summary_xlsx)
    table = [[c.value for c in row] for row in book["Batch summary"].iter_rows(min_row=4, max_row=7)]
    assert table[0] == [column.header for _, column in BATCH_COLUMNS]
    assert [r[0] for r in table[1:]] == [f"week-{w}.xlsx" for w in WEEKS]
    assert [r[5] for r in table[1:]] == [row["p"] for row in report.rows]
    trend = book["Trend"]
    assert [trend.cell(r, 1).value for r in range(5, 8)] == [f"week-{w}.xlsx" for w in WEEKS]
    assert len(trend._charts) == 2
    titles = [c.title.tx.rich.p[0].r[0].t for c in trend._charts]
    assert titles == ["Coefficient of variation across files", "What blocking gained across files"]
    refs = [c.series[0].val.numRef.f for c in trend._charts]
    assert refs == ["'Trend'!$B$5:$B$7", "'Trend'!$C$5:$C$7"]


def test_results_inside_the_input_folder_are_not_inputs(tmp_path):
    weekly_books(tmp_path / "in")
    first = batch.run_batch(tmp_path / "in", tmp_path / "in", GRID.range, workers=1)
    again = batch.run_batch(tmp_path / "in", tmp_path / "in", GRID.range, workers=1)
    assert len(first.rows) == len(again.rows) == len(WEEKS)


def test_empty_or_missing_folder_is_an_input_problem(tmp_path, capsys):
    assert main(["batch", str(tmp_path), "--out", str(tmp_path / "o"), "--range", "A1:B2"]) == 2
    assert "holds no workbooks" in capsys.readouterr().err
    assert main(["batch", str(tmp_path / "nope"), "--out", str(tmp_path / "o"), "--range", "A1:B2"]) == 2


def crash_on_week_2(path, *args):
    """A worker that dies (as a segfault would) on week-2 and works normally otherwise."""
    if path.endswith("week-2.xlsx"):
        os._exit(3)
    return batch.analyse_workbook_file(path, *args)


def test_a_crashing_worker_is_recorded_and_the_batch_goes_on(tmp_path):
    books = weekly_books(tmp_path / "in")
    ticks = []
    outcomes = batch._run_local(books, (GRID.range, {}, "wbt-", "highest", None), 2, lambda: ticks.append(1),
                                crash_on_week_2)
    assert outcomes["week-1.xlsx"].done and outcomes["week-10.xlsx"].done
    assert outcomes["week-2.xlsx"].rows[0]["status"].startswith("internal error: the worker stopped")
    assert len(ticks) == len(WEEKS)
