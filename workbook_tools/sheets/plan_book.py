"""Write a trial plan as a new workbook: the layout to fill in, the run order, power and an audit.

The tables come from :mod:`workbook_tools.layout` (``plan_*_table``,
``blocks_needed_table``, ``power_table_table``); this module places them, adds
a power-versus-blocks chart and names the two input ranges, so that the filled
layout goes straight back into ``workbook-tools analyze``.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from pathlib import Path

import openpyxl
from openpyxl.chart import Reference, Series
from openpyxl.chart.legend import Legend
from openpyxl.chart.marker import Marker
from openpyxl.workbook.defined_name import DefinedName

from workbook_tools import __version__
from workbook_tools.layout import (PLAN_VALUE_HEADER, SheetPlan, blocks_needed_table, plan_audit_table,
                                   plan_inputs_table, plan_layout_table, plan_run_order_table, power_table_table)
from workbook_tools.sheets import charts
from workbook_tools.sheets.ranges import cell_address, quote_sheet
from workbook_tools.sheets.safety import atomic_save
from workbook_tools.sheets.writer import NOTE_FONT, write_sheet

LAYOUT_SHEET = "Trial layout"
RUN_ORDER_SHEET = "Run order"
PLAN_SHEET = "Plan"
LAYOUT_NAME, RUN_ORDER_NAME = "TrialLayout", "RunOrder"
SERIES_COLOURS = ("1F4E79", "C00000", "548235", "7F6000")


@dataclass(frozen=True)
class PlanBook:
    """Where the plan was written and the ranges the analysis reads back."""

    path: Path
    layout_range: str | None      # the wide grid, None with replicates (use the run order)
    run_order_range: str

    def analyze_command(self) -> str:
        """The command that analyses the filled-in plan."""
        if self.layout_range:
            return f'workbook-tools analyze "{self.path}" --range "{self.layout_range}" --layout wide'
        return (f'workbook-tools analyze "{self.path}" --range "{self.run_order_range}" --layout long '
                f'--block Block --treatment Treatment --response "{PLAN_VALUE_HEADER}"')


def _range_text(sheet: str, placement, n_columns: int) -> str:
    first = cell_address(placement.header_row, placement.first_col)
    last = cell_address(placement.last_row, placement.col(n_columns - 1))
    return f"{quote_sheet(sheet)}!{first}:{last}"


def _name_range(workbook, name: str, sheet: str, placement, n_columns: int) -> None:
    first = cell_address(placement.header_row, placement.first_col)
    last = cell_address(placement.last_row, placement.col(n_columns - 1))
    absolute = "${}${}".format(*_split(first)) + ":" + "${}${}".format(*_split(last))
    workbook.defined_names[name] = DefinedName(name, attr_text=f"{quote_sheet(sheet)}!{absolute}")


def _input_sheet(workbook, sheet: str, name: str, table, title: str, context: list[str]):
    """A sheet holding one input table; the table's range is named ``name``. Returns the sheet and range."""
    ws = workbook.create_sheet(sheet)
    placement = write_sheet(ws, SheetPlan(table.key, title, [table]), context)[table.key]
    _name_range(workbook, name, sheet, placement, len(table.columns))
    return ws, _range_text(sheet, placement, len(table.columns))


def _split(address: str) -> tuple[str, str]:
    letters = address.rstrip("0123456789")
    return letters, address[len(letters):]


def add_power_chart(ws, placement, n_tests: int, titles: list[str], target_power: float, anchor) -> None:
    """Line chart of power against blocks, one series per test, from the written power table."""
    chart = charts._scatter_chart(f"Power against the number of blocks (target {target_power:g})",
                                  "Number of blocks", "Power")
    x = Reference(ws, min_col=placement.col(0), min_row=placement.first_row,
                  max_row=placement.last_row)
    for k in range(n_tests):
        y = Reference(ws, min_col=placement.col(2 + k), min_row=placement.first_row, max_row=placement.last_row)
        series = Series(y, x, title=titles[k])
        series.marker = Marker(symbol="none")
        series.graphicalProperties = charts._line_properties(SERIES_COLOURS[k % len(SERIES_COLOURS)], points=2.0)
        series.smooth = False
        chart.series.append(series)
    chart.y_axis.scaling.min = 0.0
    chart.y_axis.scaling.max = 1.0
    chart.x_axis.scaling.min = 0.0
    chart.legend = Legend(legendPos="b")
    ws.add_chart(chart, charts._anchor_cell(anchor))


def write_plan_book(target, layout: dict, plan: dict | None = None, *, sigma2_source: str | None = None,
                    run_options: dict | None = None) -> PlanBook:
    """Write a new workbook holding the plan; saved atomically.

    Parameters
    ----------
    target : str or os.PathLike
        The workbook to write (.xlsx); replaced if it exists.
    layout : dict
        ``Layout.to_dict()`` of :func:`workbook_tools.analysis.planning.randomised_layout`.
    plan : dict, optional
        :func:`workbook_tools.analysis.planning.plan_power`; without it the
        plan sheet holds the audit only.
    sigma2_source : str, optional
        Where the error variance came from, for the inputs table.
    run_options : dict, optional
        Options to record in the audit.

    Returns
    -------
    PlanBook
    """
    target = Path(target)
    stamp = dt.datetime.now(dt.timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "")
    made = (f"Made by workbook-tools {__version__} at {stamp} UTC; randomisation seed {layout['seed']} "
            f"({layout['generator']}); details on sheet '{PLAN_SHEET}'.")
    restriction = [layout["restrictions"]] if layout["restrictions"] else []
    workbook = openpyxl.Workbook()
    workbook.remove(workbook.active)
    context = [made, *restriction]
    layout_range = None
    if layout["replicates"] == 1:
        ws, layout_range = _input_sheet(workbook, LAYOUT_SHEET, LAYOUT_NAME, plan_layout_table(layout),
                                        "Trial layout to fill in", context)
        ws.cell(2 + len(context), 1, f"Analyse it with --range \"{layout_range}\" (or --range "
                f"{LAYOUT_NAME}) once every value is typed in.").font = NOTE_FONT
    _, run_order_range = _input_sheet(workbook, RUN_ORDER_SHEET, RUN_ORDER_NAME, plan_run_order_table(layout),
                                      "Run order within each block", context)
    ws = workbook.create_sheet(PLAN_SHEET)
    tables = []
    if plan is not None:
        tables = [plan_inputs_table(plan, sigma2_source), blocks_needed_table(plan), power_table_table(plan)]
    items = [["Tool", f"workbook-tools {__version__}"], ["Written (UTC)", stamp],
             ["Layout range", layout_range or "none (replicates: fill in the run order)"],
             ["Run order range", run_order_range]]
    items += [[f"Run option: {k}", v] for k, v in (run_options or {}).items()]
    tables.append(plan_audit_table(layout, items))
    placed = write_sheet(ws, SheetPlan("plan", "Plan of the next trial: power and blocks needed", tables), [made])
    if plan is not None:
        power = placed["power_table"]
        tests = [t["test"] for t in plan["tests"]]
        titles = [h.removeprefix("Power: ") for h in power_table_table(plan).headers[2:]]
        add_power_chart(ws, power, len(tests), titles, plan["inputs"]["power"],
                        (power.header_row, power.first_col + len(tests) + 3))
    workbook.active = 0
    atomic_save(workbook, target, own_sheets=workbook.sheetnames)  # a new workbook, all ours
    return PlanBook(target, layout_range, run_order_range)
