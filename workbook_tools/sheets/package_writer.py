"""Save an openpyxl workbook, writing the rows of the tool's own sheets by a faster route.

openpyxl serialises every cell through a chain of generic element writers, which
costs more than building and filling the result sheets together. The tool's own
sheets hold only plain values (numbers, text, true/false) with styles, so their
``<sheetData>`` is built here as one string and handed to openpyxl's sheet writer
as a parsed element; every other part of every sheet, and every row of the
user's sheets, is written by openpyxl as before. A sheet holding anything else
(a formula, a date, rich text, a comment, a hyperlink, a merged cell) is left to
openpyxl entirely. The rows come out as the same XML openpyxl writes (the tests
compare the two, canonicalised, on generated sheets).
"""

from __future__ import annotations

import datetime
from xml.sax.saxutils import escape
from zipfile import ZIP_DEFLATED, ZipFile

from openpyxl.cell.cell import Cell
from openpyxl.cell.rich_text import CellRichText
from openpyxl.compat import safe_string
from openpyxl.drawing.spreadsheet_drawing import SpreadsheetDrawing
from openpyxl.utils import get_column_letter
from openpyxl.worksheet._writer import WorksheetWriter
from openpyxl.writer.excel import ExcelWriter
from openpyxl.packaging.relationship import RelationshipList
from openpyxl.xml.constants import SHEET_MAIN_NS
from openpyxl.xml.functions import tostring

# openpyxl's data types of a number (or blank), a text, a true/false, and an empty text read from a file
PLAIN_TYPES = {"n", "s", "b", "inlineStr"}


_CARRIAGE_RETURN = {"\r": "&#13;"}   # lxml keeps a carriage return in text as a character reference


def plain_cells(ws) -> bool:
    """Whether every cell of ``ws`` is one the fast route writes exactly as openpyxl would."""
    for cell in ws._cells.values():
        if type(cell) is not Cell or cell.data_type not in PLAIN_TYPES or cell._hyperlink is not None \
                or cell._comment is not None or isinstance(cell._value, CellRichText):
            return False
        if cell.data_type == "s" and not isinstance(cell._value, str):
            return False
    return True


def sheet_data_xml(ws, style_offset: int = 0) -> str:
    """The ``<sheetData>`` element of a sheet of plain cells, as openpyxl would write it.

    ``style_offset`` is added to every style index.
    """
    styles = ws.parent._cell_styles
    dimensions = ws.row_dimensions
    rows: dict[int, list] = {}
    for (row, col), cell in sorted(ws._cells.items()):
        rows.setdefault(row, []).append(cell)
    for row in dimensions.keys() - rows.keys():   # rows with only a height or a style
        rows[row] = []
    letters: dict[int, str] = {}
    style_ids: dict[bytes, int] = {}   # a style's index, looked up once per distinct style
    parts = ["<sheetData>"]
    for row_idx in sorted(rows):
        attributes = f' r="{row_idx}"'
        if row_idx in dimensions:
            attributes += "".join(f' {key}="{value}"' for key, value in dimensions[row_idx])
        parts.append(f"<row{attributes}>")
        for cell in rows[row_idx]:
            value = cell._value
            style = cell._style
            styled = style is not None and any(style)
            if value is None and not styled:
                continue
            col = cell.column
            letter = letters.get(col)
            if letter is None:
                letter = letters[col] = get_column_letter(col)
            head = f'<c r="{letter}{row_idx}"'
            if styled:
                key = style.tobytes()
                index = style_ids.get(key)
                if index is None:
                    index = style_ids[key] = styles.add(style) + style_offset
                head += f' s="{index}"'
            kind = cell.data_type
            if value is None or value == "":
                parts.append(f'{head} t="{"inlineStr" if kind == "s" else kind}"/>')
            elif kind == "s":
                space = ' xml:space="preserve"' if value != value.strip() else ""
                parts.append(f'{head} t="inlineStr"><is><t{space}>{escape(value, _CARRIAGE_RETURN)}</t></is></c>')
            else:
                parts.append(f'{head} t="{kind}"><v>{safe_string(value)}</v></c>')
        parts.append("</row>")
    parts.append("</sheetData>")
    return "".join(parts)


class _Collector:
    """Stands in for openpyxl's XML stream: keeps the text of each element sent to it."""

    def __init__(self):
        self.parts: list[str] = []

    def send(self, element):
        if element is not None and element is not True:
            self.parts.append(tostring(element, encoding="unicode"))

    def close(self):
        pass


class _PlainRowsWriter(WorksheetWriter):
    """openpyxl's sheet writer for every element but the rows, which `sheet_data_xml` builds.

    The parts are joined as text in memory, instead of streamed to a temporary file.
    """

    def __init__(self, ws, style_offset: int = 0):   # no temporary file, no stream
        self.ws = ws
        self.ws._hyperlinks = []
        self.ws._comments = []
        self.out = None
        self._rels = RelationshipList()
        self.xf = _Collector()
        self.style_offset = style_offset

    def write_rows(self):
        self.xf.parts.append(sheet_data_xml(self.ws, self.style_offset))

    def read(self) -> bytes:
        return (f'<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n<worksheet xmlns="{SHEET_MAIN_NS}">'
                + "".join(self.xf.parts) + "</worksheet>").encode("utf-8")


def sheet_xml(ws, *, drawing_target: str | None = None, style_offset: int = 0) -> tuple[bytes, bytes | None]:
    """A sheet of plain cells as a worksheet part and its relationships part (None without any).

    ``drawing_target`` names the part of the sheet's drawing; ``style_offset`` is added to
    every cell's style index (for styles appended to another workbook's style sheet).
    """
    if not plain_cells(ws):
        raise ValueError(f"sheet {ws.title!r} holds more than plain cells")
    writer = _PlainRowsWriter(ws, style_offset)
    writer.write()
    for rel in writer._rels:
        if "drawing" in rel.Type:
            rel.Target = drawing_target
    rels = tostring(writer._rels.to_tree()) if len(writer._rels) else None
    return writer.read(), rels


class _Writer(ExcelWriter):
    def __init__(self, workbook, archive, fast_sheets: set[str]):
        super().__init__(workbook, archive)
        self.fast_sheets = fast_sheets

    def write_worksheet(self, ws):
        if ws.title not in self.fast_sheets or self.workbook.write_only or not plain_cells(ws):
            return super().write_worksheet(ws)
        ws._drawing = SpreadsheetDrawing()
        ws._drawing.charts = ws._charts
        ws._drawing.images = ws._images
        writer = _PlainRowsWriter(ws)
        writer.write()
        ws._rels = writer._rels
        self._archive.writestr(ws.path[1:], writer.read())
        self.manifest.append(ws)


def save_workbook(workbook, filename, fast_sheets=()) -> None:
    """Save ``workbook`` to ``filename`` as ``workbook.save`` does, the named sheets' rows the fast way.

    Parameters
    ----------
    workbook : openpyxl.Workbook
    filename : str or path-like
    fast_sheets : iterable of str
        Sheets made by this tool; any of them holding more than plain cells is written by
        openpyxl alone.
    """
    if workbook.read_only:
        raise TypeError("Workbook is read-only")
    if workbook.write_only and not workbook.worksheets:
        workbook.create_sheet()
    with ZipFile(filename, "w", ZIP_DEFLATED, allowZip64=True) as archive:
        workbook.properties.modified = datetime.datetime.now(tz=datetime.timezone.utc).replace(tzinfo=None)
        _Writer(workbook, archive, set(fast_sheets)).save()
