"""The workbook port over an openpyxl file: the headless side of the job runner.

Ranges are read from the input file with the reader's checks (merged cells,
formulas never calculated); results go into a copy loaded by
:func:`workbook_tools.sheets.safety.open_for_writing` and are saved atomically,
to a new file beside the input by default or in place when openpyxl, which
rewrites every part, would drop nothing. (``workbook-tools analyze`` copies the
user's parts instead; the job runner also writes into the job sheet, a sheet of
the user's, so it goes through openpyxl.)
"""

from __future__ import annotations

from pathlib import Path

from workbook_tools.layout import SheetPlan
from workbook_tools.ports import CellValues
from workbook_tools.sheets import safety
from workbook_tools.sheets.reader import read_range_values
from workbook_tools.sheets.result_charts import add_result_charts
from workbook_tools.sheets.writer import Placement, write_sheet


class OpenpyxlWorkbook:
    """A `~workbook_tools.ports.WorkbookPort` over the workbook file at ``path``.

    Parameters
    ----------
    path : path-like
        The input workbook; it is only read unless ``in_place``.
    out : path-like, optional
        Where to save; by default ``BOOK-analysed.xlsx`` beside the input.
    in_place : bool
        Save over the input, refused when anything in it would be lost.
    """

    def __init__(self, path, out=None, *, in_place: bool = False):
        self.path = Path(path)
        self.name = self.path.name
        self.workbook, self.target = safety.open_for_writing(self.path, out, in_place=in_place)

    def read_range(self, range_text: str) -> CellValues:
        rng, rows = read_range_values(self.path, range_text)
        return CellValues(rng, rows)

    def sheet_values(self, sheet: str) -> list[list] | None:
        if sheet not in self.workbook.sheetnames:
            return None
        return [list(row) for row in self.workbook[sheet].iter_rows(values_only=True)]

    def hidden_warning(self, rng) -> str | None:
        from workbook_tools.sheets.hidden import hidden_warning

        return hidden_warning(self.path, rng)

    def sheet_names(self) -> list[str]:
        return list(self.workbook.sheetnames)

    def tool_sheets(self) -> list[str]:
        return safety.tool_sheet_names(self.workbook)

    def remove_sheets(self, names: list[str]) -> None:
        for name in names:
            if name in self.workbook.sheetnames:
                self.workbook.remove(self.workbook[name])
        if self.workbook.sheetnames and self.workbook.active is None:
            self.workbook.active = 0

    def write_sheet(self, name: str, plan: SheetPlan, context_lines: list[str]) -> dict[str, Placement]:
        ws = self.workbook.create_sheet(name)
        ws.sheet_view.tabSelected = False
        return write_sheet(ws, plan, context_lines)

    def add_charts(self, name: str, family: str, placements: dict[str, Placement]) -> None:
        add_result_charts(self.workbook[name], family, placements)

    def write_cell(self, sheet: str, row: int, col: int, value, number_format: str | None = None) -> None:
        cell = self.workbook[sheet].cell(row, col, value)
        if number_format:
            cell.number_format = number_format

    def save(self, tool_sheets: list[str]) -> str:
        safety.record_tool_sheets(self.workbook, tool_sheets)
        safety.atomic_save(self.workbook, self.target)
        return str(self.target)
