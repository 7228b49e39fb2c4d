"""Lay result tables out on openpyxl worksheets: titles, formats, widths, charts.

The tables come from :mod:`workbook_tools.layout`; this module only places them.
"""

from __future__ import annotations

from copy import copy
from dataclasses import dataclass

from openpyxl.styles import Alignment, Border, Font, PatternFill, Side
from openpyxl.utils import get_column_letter

from workbook_tools.layout import SheetPlan, Table

TITLE_FONT = Font(bold=True, size=14)
TABLE_TITLE_FONT = Font(bold=True, size=11)
HEADER_FONT = Font(bold=True)
HEADER_FILL = PatternFill("solid", fgColor="E4EAF1")
HEADER_BORDER = Border(bottom=Side(style="thin", color="7F8C99"))
NOTE_FONT = Font(italic=True, color="555555")
WRAP = Alignment(wrap_text=True, vertical="top")
TOP = Alignment(vertical="top")
HEADER_ALIGNMENT = Alignment(wrap_text=True, vertical="bottom")
LONG_TEXT = 60      # characters: the widest a last (verdict) column grows before wrapping
SHORT_TEXT = 28     # characters: longer text in an inner column wraps instead of widening it
LINE_HEIGHT = 15    # points per line of wrapped text
LABEL_TEXT = 48     # characters: row labels (first column) are shown in full up to this
MAX_SHEET_NAME = 31
FORBIDDEN = set('[]:*?/\\')


@dataclass(frozen=True)
class Placement:
    """Where a table landed: its header row, data rows and first column."""

    header_row: int
    first_row: int
    last_row: int
    first_col: int

    def col(self, index: int) -> int:
        """Sheet column number of the table's column ``index`` (0-based)."""
        return self.first_col + index


def sheet_name(prefix: str, family: str, suffix: str | None, taken: set[str]) -> str:
    """A valid, unused sheet name ``prefix + family [+ ' ' + suffix]`` (at most 31 characters)."""
    bad = sorted(set(prefix) & FORBIDDEN)
    if bad or len(prefix) > MAX_SHEET_NAME - 12:
        from workbook_tools.analysis.errors import TrialInputError

        why = (f"contains {' '.join(bad)}, which sheet names cannot hold" if bad
               else f"is longer than {MAX_SHEET_NAME - 12} characters")
        raise TrialInputError(f"The sheet name prefix '{prefix}' {why}; choose another with --prefix.")
    base = f"{prefix}{family}"
    if suffix:
        clean = "".join("_" if ch in FORBIDDEN else ch for ch in suffix).strip("'") or "x"
        base = f"{base} {clean}"
    base = base[:MAX_SHEET_NAME]
    name, n = base, 2
    while name.lower() in {t.lower() for t in taken}:
        tail = f" ({n})"
        name = base[: MAX_SHEET_NAME - len(tail)] + tail
        n += 1
    return name


def _shown_length(value) -> int:
    text = f"{value:.6g}" if isinstance(value, float) else str(value)
    return max((len(part) for part in text.split("\n")), default=0)


def _width_limit(j: int, n_columns: int) -> int:
    """Widest a column grows: row labels in full, a last (verdict) column wide, inner columns narrow."""
    if j == 0:
        return LABEL_TEXT
    return LONG_TEXT if j == n_columns - 1 else SHORT_TEXT


class CellStyles:
    """The styles of one workbook's cells, each made once and copied onto every cell that wears it.

    Setting a font, fill, border and format attribute by attribute makes openpyxl look each
    one up again, cell after cell; copying the finished style is many times faster and gives
    the same file.
    """

    def __init__(self):
        self._made: dict[tuple, object] = {}

    def apply(self, cell, key: tuple, **attributes) -> None:
        """Give ``cell`` the style named ``key``, made from ``attributes`` the first time."""
        made = self._made.get(key)
        if made is None:
            for name, value in attributes.items():
                setattr(cell, name, value)
            self._made[key] = copy(cell._style)
        else:
            cell._style = copy(made)


def _body_style(styles: CellStyles, cell, number_format: str | None, alignment: Alignment | None) -> None:
    attributes = {}
    if number_format is not None:
        attributes["number_format"] = number_format
    if alignment is not None:
        attributes["alignment"] = alignment
    if attributes:
        styles.apply(cell, ("body", number_format, id(alignment)), **attributes)


def write_table(ws, table: Table, top: int, left: int, widths: dict[int, int],
                styles: CellStyles | None = None) -> tuple[Placement, int]:
    """Write one titled table with its header, number formats and note.

    Returns the placement and the last row used; ``widths`` collects, per column,
    the longest text the table shows there. ``styles`` may be shared by the tables
    of one workbook.
    """
    styles = styles or CellStyles()
    styles.apply(ws.cell(top, left, table.title), ("table title",), font=TABLE_TITLE_FONT)
    header_row = top + 1
    for j, header in enumerate(table.headers):
        styles.apply(ws.cell(header_row, left + j, header), ("header",), font=HEADER_FONT, fill=HEADER_FILL,
                     border=HEADER_BORDER, alignment=HEADER_ALIGNMENT)
        widths[left + j] = max(widths.get(left + j, 0), min(len(header), 18))
    formats = table.number_formats()
    n_columns = len(table.columns)
    plain_int = [column.kind != "p" for column in table.columns]
    row = header_row
    for row_values in table.rows:
        row += 1
        lines = 1
        cell_formats = []
        wrapped = []
        for j, value in enumerate(row_values):
            if isinstance(value, bool):
                cell_formats.append(None)
            elif isinstance(value, int):
                cell_formats.append("0" if plain_int[j] else None)
            elif isinstance(value, float):
                cell_formats.append(formats[j])
            else:
                cell_formats.append(None)
            wraps = False
            if value is not None:
                limit = _width_limit(j, n_columns)
                shown = _shown_length(value)
                if isinstance(value, str) and shown > limit:
                    wraps = True
                    lines = max(lines, -(-shown // limit))
                widths[left + j] = max(widths.get(left + j, 0), min(shown, limit))
            wrapped.append(wraps)
        if lines > 1:  # not every spreadsheet application grows a row for wrapped text by itself
            ws.row_dimensions[row].height = LINE_HEIGHT * lines
        for j, value in enumerate(row_values):
            alignment = WRAP if wrapped[j] else (TOP if lines > 1 else None)
            _body_style(styles, ws.cell(row, left + j, value), cell_formats[j], alignment)

    last = row
    if table.note:
        styles.apply(ws.cell(last + 1, left, table.note), ("note",), font=NOTE_FONT)
    placement = Placement(header_row, header_row + 1, last if table.rows else header_row, left)
    return placement, last + (1 if table.note else 0)


def apply_widths(ws, widths: dict[int, int], min_width: float = 8.0) -> None:
    """Set column widths from the longest text each column shows."""
    for col, width in widths.items():
        ws.column_dimensions[get_column_letter(col)].width = max(min_width, width + 2)


def write_sheet(ws, plan: SheetPlan, context_lines: list[str]) -> dict[str, Placement]:
    """Fill a new worksheet with a plan's title, context lines and tables.

    Returns the placement of every table by key, for charts.
    """
    styles = CellStyles()
    styles.apply(ws.cell(1, 1, plan.title), ("sheet title",), font=TITLE_FONT)
    row = 2
    for line in context_lines:
        styles.apply(ws.cell(row, 1, line), ("note",), font=NOTE_FONT)
        row += 1
    ws.freeze_panes = ws.cell(row, 1)
    top = row + 1
    placements: dict[str, Placement] = {}
    side_by_side = {"qq", "qq_line"}
    side_col = None
    side_top = top
    widths: dict[int, int] = {}
    for table in plan.tables:
        if table.key in side_by_side and side_col is not None:
            placement, end = write_table(ws, table, side_top, side_col, widths, styles)
            side_top = end + 2
        else:
            placement, end = write_table(ws, table, top, 1, widths, styles)
            top = end + 2
            if table.key == "residuals":
                side_col = len(table.columns) + 2
                side_top = placement.header_row - 1
                ws.freeze_panes = ws.cell(placement.first_row, 1)
        placements[table.key] = placement
    apply_widths(ws, widths)
    fit_to_page_width(ws)
    return placements


def fit_to_page_width(ws) -> None:
    """Print (and convert to PDF) one page wide, landscape, as many pages tall as needed."""
    ws.page_setup.orientation = "landscape"
    ws.sheet_properties.pageSetUpPr.fitToPage = True
    ws.page_setup.fitToWidth = 1
    ws.page_setup.fitToHeight = 0
