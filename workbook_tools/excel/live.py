"""The workbook port over a workbook open in Excel (xlwings), and the macro entry point.

A button or a shortcut runs the job sheet with a one-line VBA macro::

    Sub RunWorkbookToolsJobs()
        RunPython "import workbook_tools.excel.live as m; m.run_jobs()"
    End Sub

Each result sheet is laid out by the same writer as the headless path, on an
in-memory openpyxl sheet, and copied over: values, number formats, bold and
italic text, column widths. Charts use xlwings' chart API (means as columns,
Q-Q points and residuals against fitted values as scatter charts, without the
interval bars the headless sheets carry). The workbook is not saved: the user
saves it.
"""

from __future__ import annotations

import openpyxl
from openpyxl.utils import get_column_letter

from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.layout import SheetPlan
from workbook_tools.ports import CellValues
from workbook_tools.sheets.ranges import CellRange, cell_address, parse_a1, parse_range_text
from workbook_tools.sheets.result_charts import MEANS_ADJUSTED, RESIDUALS_FITTED, RESIDUALS_STANDARDIZED
from workbook_tools.sheets.writer import Placement, write_sheet

READ_OPTIONS = {"ndim": 2, "err_to_str": True}
CHART_WIDTH, CHART_HEIGHT = 420, 260


class XlwingsWorkbook:
    """A `~workbook_tools.ports.WorkbookPort` over an ``xlwings.Book``."""

    def __init__(self, book):
        self.book = book
        self.name = book.name

    # ------------------------------------------------------------ reading

    def _sheet(self, name: str):
        names = self.sheet_names()
        if name not in names:
            shown = ", ".join(f"'{n}'" for n in names)
            raise TrialInputError(f"There is no sheet named '{name}'. The workbook has: {shown}.", sheet=name)
        return self.book.sheets[name]

    def _find(self, range_text: str):
        sheet, ref = parse_range_text(range_text)
        if parse_a1(ref) is not None:
            return (self._sheet(sheet) if sheet else self.book.sheets.active).range(ref)
        for name in self.book.names:
            if name.name.split("!")[-1].casefold() == ref.casefold():
                return name.refers_to_range
        for ws in self.book.sheets:
            for table in ws.tables:
                if table.name.casefold() == ref.casefold():
                    return table.range
        raise TrialInputError(f"There is no defined name or table called '{ref}'.")

    def read_range(self, range_text: str) -> CellValues:
        rng = self._find(range_text)
        rows, cols = rng.shape
        where = CellRange(rng.sheet.name, rng.row, rng.column, rng.row + rows - 1, rng.column + cols - 1)
        return CellValues(where, rng.options(**READ_OPTIONS).value)

    def sheet_values(self, sheet: str) -> list[list] | None:
        if sheet not in self.sheet_names():
            return None
        ws = self.book.sheets[sheet]
        return ws.range("A1", ws.used_range.last_cell).options(**READ_OPTIONS).value

    def hidden_warning(self, rng) -> str | None:
        """Rows and columns of the range that Excel hides, asked of the live sheet.

        Needs Excel's object model (``Range.api``); where it is not there (a stand-in
        book, an unusual platform) no warning is given.
        """
        from workbook_tools.sheets.hidden import hidden_text

        try:
            ws = self.book.sheets[rng.sheet]
            rows = [r for r in range(rng.min_row, rng.max_row + 1) if ws.range((r, 1)).api.EntireRow.Hidden]
            cols = [c for c in range(rng.min_col, rng.max_col + 1) if ws.range((1, c)).api.EntireColumn.Hidden]
        except AttributeError:
            return None
        return hidden_text(rows, cols, rng)

    def sheet_names(self) -> list[str]:
        return [ws.name for ws in self.book.sheets]

    def tool_sheets(self) -> list[str]:
        return []  # the job sheet's "Sheets written" column is the record

    # ------------------------------------------------------------ writing

    def remove_sheets(self, names: list[str]) -> None:
        for name in names:
            self.book.sheets[name].delete()

    def write_sheet(self, name: str, plan: SheetPlan, context_lines: list[str]) -> dict[str, Placement]:
        scratch = openpyxl.Workbook().active
        placements = write_sheet(scratch, plan, context_lines)
        target = self.book.sheets.add(name, after=self.book.sheets[len(self.book.sheets) - 1])
        copy_sheet(scratch, target)
        return placements

    def add_charts(self, name: str, family: str, placements: dict[str, Placement]) -> None:
        ws = self.book.sheets[name]
        if family == "means" and "means" in placements:
            p = placements["means"]
            source = (f"{_column(ws, p.col(0), p.header_row, p.last_row)},"
                      f"{_column(ws, p.col(MEANS_ADJUSTED), p.header_row, p.last_row)}")
            _chart(ws, "column_clustered", source, (p.header_row, p.col(0) + 11))
        if family == "residuals" and "residuals" in placements and "qq" in placements:
            r, q = placements["residuals"], placements["qq"]
            if q.last_row < q.first_row:   # no standardized residual is defined (an exact fit): no plots
                return
            anchor_col = q.first_col + 3
            _chart(ws, "xy_scatter", _column(ws, q.col(0), q.first_row, q.last_row, q.col(1)),
                   (r.header_row, anchor_col))
            source = (f"{_column(ws, r.col(RESIDUALS_FITTED), r.first_row, r.last_row)},"
                      f"{_column(ws, r.col(RESIDUALS_STANDARDIZED), r.first_row, r.last_row)}")
            _chart(ws, "xy_scatter", source, (r.header_row + 20, anchor_col))

    def write_cell(self, sheet: str, row: int, col: int, value, number_format: str | None = None) -> None:
        cell = self.book.sheets[sheet].range((row, col))
        if number_format:
            cell.number_format = number_format
        cell.value = value

    def save(self, tool_sheets: list[str]) -> str:
        return self.book.name


def _column(ws, col: int, first_row: int, last_row: int, last_col: int | None = None) -> str:
    return f"{cell_address(first_row, col)}:{cell_address(last_row, last_col or col)}"


def _chart(ws, chart_type: str, source: str, anchor: tuple[int, int]) -> None:
    cell = ws.range(anchor)
    chart = ws.charts.add(left=cell.left, top=cell.top, width=CHART_WIDTH, height=CHART_HEIGHT)
    chart.chart_type = chart_type
    chart.set_source_data(ws.range(source))


def _runs(cells, key):
    """Runs of neighbouring cells (in one row or one column) with the same ``key``: ``(first, last, key)``."""
    runs = []
    for cell in cells:
        k = key(cell)
        if runs and runs[-1][2] == k:
            runs[-1][1] = cell
        else:
            runs.append([cell, cell, k])
    return runs


def copy_sheet(source, target) -> None:
    """Copy an openpyxl worksheet's values, number formats, bold/italic text and widths to an xlwings sheet.

    Text cells get the text format first, so Excel does not turn labels such as
    ``1-2`` into dates; formats and fonts are set one run of cells at a time.
    """
    if source.max_row < 1 or source.max_column < 1:
        return
    rows = list(source.iter_rows(min_row=1, max_row=source.max_row, max_col=source.max_column))
    for column in zip(*rows):
        for first, last, fmt in _runs(column, lambda c: "@" if isinstance(c.value, str) else c.number_format):
            if fmt != "General":
                target.range(f"{first.coordinate}:{last.coordinate}").number_format = fmt
    target.range("A1").value = [[c.value for c in row] for row in rows]
    for row in rows:
        for first, last, (bold, italic) in _runs(row, lambda c: (bool(c.font.b), bool(c.font.i))):
            if bold or italic:
                font = target.range(f"{first.coordinate}:{last.coordinate}").font
                font.bold, font.italic = bold, italic
    for j in range(1, source.max_column + 1):
        width = source.column_dimensions[get_column_letter(j)].width
        if width:
            target.range(f"{get_column_letter(j)}:{get_column_letter(j)}").column_width = width


def run_jobs(book=None):
    """Run the job sheet of the calling workbook (``Book.caller()``); the entry point for ``RunPython``.

    Returns the outcomes; a job's problem appears in its Status cell, a problem with the
    job sheet itself in a message box.
    """
    from workbook_tools import jobs

    if book is None:
        import xlwings as xw

        book = xw.Book.caller()
    try:
        return jobs.run(XlwingsWorkbook(book))
    except TrialInputError as error:
        book.app.alert(str(error), title="workbook-tools")
        return []
