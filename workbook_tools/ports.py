"""The one small interface a workbook offers the job runner.

The job runner (:mod:`workbook_tools.jobs`) reads ranges, writes result sheets,
adds charts and fills status cells only through a `WorkbookPort`. Two adapters
implement it: :class:`workbook_tools.sheets.port.OpenpyxlWorkbook` (a file,
headless) and :class:`workbook_tools.excel.live.XlwingsWorkbook` (the workbook
open in Excel). Values cross the port as plain Python values: numbers, text,
``None`` for blanks, booleans, dates, error values as their text (``"#N/A"``).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol

from workbook_tools.layout import SheetPlan
from workbook_tools.sheets.ranges import CellRange
from workbook_tools.sheets.writer import Placement


@dataclass(frozen=True)
class CellValues:
    """The values of a range (a list of rows) and where the range is."""

    range: CellRange
    rows: list[list]


class WorkbookPort(Protocol):
    """What the job runner needs from a workbook."""

    name: str
    """The workbook's file name, for messages and the audit record."""

    def read_range(self, range_text: str) -> CellValues:
        """The values of ``Sheet!B3:G9``, a defined name or a table name."""

    def sheet_values(self, sheet: str) -> list[list] | None:
        """Every row of a sheet from A1 to its last used cell; ``None`` when there is no such sheet."""

    def hidden_warning(self, rng) -> str | None:
        """A warning naming hidden rows and columns inside ``rng``, or ``None``."""

    def sheet_names(self) -> list[str]:
        """Names of all sheets, in order."""

    def tool_sheets(self) -> list[str]:
        """Sheets recorded as made by workbook-tools, beyond those listed on the job sheet."""

    def remove_sheets(self, names: list[str]) -> None:
        """Delete these sheets (all made by workbook-tools)."""

    def write_sheet(self, name: str, plan: SheetPlan, context_lines: list[str]) -> dict[str, Placement]:
        """Add a sheet at the end holding a plan's tables; returns where each table landed."""

    def add_charts(self, name: str, family: str, placements: dict[str, Placement]) -> None:
        """Add the charts of a result sheet next to the tables they plot."""

    def write_cell(self, sheet: str, row: int, col: int, value, number_format: str | None = None) -> None:
        """Write one value (1-based row and column), optionally with a number format."""

    def save(self, tool_sheets: list[str]) -> str:
        """Record the sheets made by workbook-tools and save (or leave saving to the user); says where."""
