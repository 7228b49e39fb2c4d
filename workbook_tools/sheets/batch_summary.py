"""Write a batch run's summary: a workbook with a trend chart, and the same rows as CSV.

The tables come from :mod:`workbook_tools.layout` (``batch_summary_table`` and
``batch_trend_table``); this module only places them and draws the chart.
"""

from __future__ import annotations

import csv
import io
from pathlib import Path

import openpyxl
from openpyxl.chart import LineChart, Reference
from openpyxl.chart.legend import Legend
from openpyxl.chart.marker import Marker

from workbook_tools.layout import batch_summary_table, batch_trend_table
from workbook_tools.sheets.charts import _style_chart  # the house style of every chart
from workbook_tools.sheets.safety import atomic_save, atomic_write_text
from workbook_tools.sheets.writer import TITLE_FONT, apply_widths, fit_to_page_width, write_table

SUMMARY_NAME = "batch-summary"
SUMMARY_SHEET = "Batch summary"
TREND_SHEET = "Trend"


def summary_csv_text(rows: list[dict]) -> str:
    """The summary table as CSV text: the same headers as the workbook, blanks for missing values."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    for row in batch_summary_table(rows).grid():
        writer.writerow(["" if value is None else (repr(value) if isinstance(value, float) else value)
                         for value in row])
    return buffer.getvalue()


def write_batch_summary(rows: list[dict], out_dir) -> tuple[Path, Path]:
    """Write ``batch-summary.xlsx`` (summary sheet, trend sheet with charts) and ``batch-summary.csv``.

    Parameters
    ----------
    rows : list of dict
        Summary rows keyed as :data:`workbook_tools.layout.BATCH_COLUMNS`, in file order.
    out_dir : path-like
        The batch's output folder.

    Returns
    -------
    tuple of pathlib.Path
        The workbook and the CSV file written (both atomically).
    """
    out_dir = Path(out_dir)
    workbook = openpyxl.Workbook()
    summary = workbook.active
    summary.title = SUMMARY_SHEET
    summary.cell(1, 1, "Many workbooks: one row per file and response").font = TITLE_FONT
    widths: dict[int, int] = {}
    placement, _ = write_table(summary, batch_summary_table(rows), 3, 1, widths)
    apply_widths(summary, widths)
    summary.freeze_panes = summary.cell(placement.first_row, 2)
    fit_to_page_width(summary)

    trend = workbook.create_sheet(TREND_SHEET)
    trend.cell(1, 1, "Key figures across files, in file-name order").font = TITLE_FONT
    trend_table = batch_trend_table(rows)
    widths = {}
    placement, last = write_table(trend, trend_table, 3, 1, widths)
    apply_widths(trend, widths)
    n_responses = (len(trend_table.columns) - 1) // 2
    if n_responses and trend_table.rows:
        anchor_col = len(trend_table.columns) + 2
        charts = (("Coefficient of variation across files", "CV %", 2),
                  ("What blocking gained across files", "Relative efficiency", 2 + n_responses))
        for index, (title, y_title, first_col) in enumerate(charts):
            chart = _trend_chart(trend, placement, first_col, n_responses, title, y_title)
            trend.add_chart(chart, trend.cell(3 + 20 * index, anchor_col).coordinate)
    fit_to_page_width(trend)

    xlsx_path = out_dir / f"{SUMMARY_NAME}.xlsx"
    csv_path = out_dir / f"{SUMMARY_NAME}.csv"
    atomic_save(workbook, xlsx_path, own_sheets=workbook.sheetnames)  # a new workbook, all ours
    atomic_write_text(csv_path, summary_csv_text(rows))
    return xlsx_path, csv_path


def _trend_chart(ws, placement, first_col: int, n_series: int, title: str, y_title: str) -> LineChart:
    """A line chart, one line per response, over the files (categories) in the table's first column."""
    chart = LineChart()
    _style_chart(chart, title, "File", y_title)
    data = Reference(ws, min_col=first_col, max_col=first_col + n_series - 1,
                     min_row=placement.header_row, max_row=placement.last_row)
    chart.add_data(data, titles_from_data=True)
    chart.set_categories(Reference(ws, min_col=1, min_row=placement.first_row, max_row=placement.last_row))
    chart.display_blanks = "gap"
    chart.x_axis.tickLblPos = "low"
    for series in chart.series:
        series.smooth = False
        series.marker = Marker(symbol="circle", size=6)
    if n_series > 1:
        chart.legend = Legend(legendPos="b")
    return chart
