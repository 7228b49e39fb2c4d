"""Fast reading of a large range: python-calamine for the values, a byte scan for what it hides.

python-calamine (a Rust reader) returns values several times faster than
openpyxl, but shows an error cell and a blank cell alike as ``""`` and leaves out
formula cells that have no stored result. One pass of regular expressions over
the sheet's XML (already size-checked by :mod:`workbook_tools.sheets.limits`)
recovers exactly those: the error cells with their codes and the formula cells
without a value. The result has the same shape as the openpyxl route, so every
rule about cells stays in :mod:`workbook_tools.sheets.reader`.
"""

from __future__ import annotations

import re
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.sheets import limits
from workbook_tools.sheets.ranges import CellRange
from workbook_tools.sheets.safety import sheet_parts

_PREFIX = rb"(?:[A-Za-z_][\w.-]*:)?"
_CELL_START = re.compile(rb"<" + _PREFIX + rb"c(?=[\s>/])([^>]*?)(/?)>")
_REF = re.compile(rb'\br="([A-Z]{1,3})([0-9]{1,7})"')
_FORMULA = re.compile(rb"<" + _PREFIX + rb"f(?=[\s>/])")
_VALUE = re.compile(rb"<" + _PREFIX + rb"v>(.*?)</" + _PREFIX + rb"v>", re.S)
_CELL_END = re.compile(rb"</" + _PREFIX + rb"c>")
_FULL_CALC = re.compile(rb'fullCalcOnLoad="(?:1|true)"')


def active_sheet(package: zipfile.ZipFile) -> str | None:
    """Name of the sheet a workbook opens on (its ``activeTab``), or None when it cannot be told."""
    from defusedxml.ElementTree import fromstring

    try:
        root = fromstring(package.read("xl/workbook.xml"))
    except (KeyError, Exception):
        return None
    names = [e.get("name") for e in root.iter() if e.tag.rsplit("}", 1)[-1] == "sheet"]
    view = next((e for e in root.iter() if e.tag.rsplit("}", 1)[-1] == "workbookView"), None)
    index = int(view.get("activeTab", "0")) if view is not None else 0
    return names[index] if 0 <= index < len(names) else None


def _column_number(letters: bytes) -> int:
    number = 0
    for ch in letters:
        number = number * 26 + ch - 64
    return number


@dataclass
class SheetScan:
    """What the byte scan found on one sheet (1-based row and column numbers)."""

    errors: dict = field(default_factory=dict)       # (row, col) -> error text, e.g. "#N/A"
    formulas: dict = field(default_factory=dict)     # (row, col) -> stored result text or None
    recalc_on_open: bool = False
    complete: bool = True                            # False: an error or formula cell had no address


def _sheet_bytes(path, package: zipfile.ZipFile, sheet: str) -> bytes:
    part = next((p for p, name in sheet_parts(package).items() if name == sheet), None)
    if part is None or part not in package.namelist():
        raise TrialInputError(f"The sheet '{sheet}' has no worksheet part in the file.", sheet=sheet)
    kept = limits.take_checked_part(path, part)   # unpacked already by the upload check
    return kept if kept is not None else package.read(part)


def _cell_ref(tag_attrs: bytes) -> tuple[int, int] | None:
    ref = _REF.search(tag_attrs)
    if ref is None:
        return None
    return int(ref.group(2)), _column_number(ref.group(1))


def scan_sheet(path, sheet: str) -> SheetScan:
    """Error cells and formula cells of a sheet, found in its XML without parsing it whole."""
    scan = SheetScan()
    with zipfile.ZipFile(Path(path)) as package:
        data = _sheet_bytes(path, package, sheet)
        try:
            scan.recalc_on_open = bool(_FULL_CALC.search(package.read("xl/workbook.xml")))
        except KeyError:
            scan.recalc_on_open = False
    position = data.find(b't="e"')
    while position >= 0:
        start = data.rfind(b"<", 0, position)
        cell = _CELL_START.match(data, start)
        if cell is not None and cell.end() > position:     # the attribute belongs to a cell's start tag
            where = _cell_ref(cell.group(1))
            if where is None:
                scan.complete = False
            else:
                end = _CELL_END.search(data, cell.end())
                value = _VALUE.search(data, cell.end(), end.start() if end else len(data))
                scan.errors[where] = value.group(1).decode("utf-8", "replace") if value else "#N/A"
        position = data.find(b't="e"', position + 5)
    for at, end_of_tag in _formula_tags(data):
        start = data.rfind(b"<", 0, at)
        while start > 0 and not _CELL_START.match(data, start):
            start = data.rfind(b"<", 0, start)
        cell = _CELL_START.match(data, start) if start >= 0 else None
        where = _cell_ref(cell.group(1)) if cell else None
        if where is None:
            scan.complete = False
            continue
        end = _CELL_END.search(data, end_of_tag)
        value = _VALUE.search(data, end_of_tag, end.start() if end else len(data))
        stored = value.group(1).decode("utf-8", "replace") if value else ""
        scan.formulas[where] = stored or None          # <v></v> (openpyxl writes it) stores nothing
    return scan


def _formula_tags(data: bytes):
    """(start, end) of every formula start tag; a plain byte search unless the sheet uses prefixes."""
    if b":worksheet" in data[:4096]:          # elements written with a namespace prefix (rare)
        yield from ((m.start(), m.end()) for m in _FORMULA.finditer(data))
        return
    at = data.find(b"<f")
    while at >= 0:
        if data[at + 2:at + 3] in (b" ", b">", b"/", b"\t", b"\n", b"\r"):
            yield at, at + 2
        at = data.find(b"<f", at + 2)


@dataclass
class FastRead:
    """The range's cells and what the scan and calamine found around them."""

    rows: list          # rows of plain values: "" for a blank, an error cell as its code ("#N/A")
    scan: SheetScan
    merged: list        # (min_row, min_col, max_row, max_col), 1-based


def read_cells(path, rng: CellRange) -> FastRead:
    """The range's values as far as the sheet holds anything; blanks are ``""``, errors their code.

    Raises LookupError when the fast route cannot be sure of a cell (a sheet whose
    cells carry no addresses): the caller then uses openpyxl.
    """
    import python_calamine

    scan = scan_sheet(path, rng.sheet)
    if not scan.complete:
        raise LookupError("cells without addresses")
    workbook = python_calamine.CalamineWorkbook.from_path(str(path))
    try:
        sheet = workbook.get_sheet_by_name(rng.sheet)
        values = sheet.to_python(skip_empty_area=False)
        merged = [(r0 + 1, c0 + 1, r1 + 1, c1 + 1) for (r0, c0), (r1, c1) in (sheet.merged_cell_ranges or [])]
    finally:
        workbook.close()
    last_row = min(rng.max_row, len(values))
    width = max(map(len, values), default=0)
    last_col = min(rng.max_col, width)
    first, stop = rng.min_col - 1, last_col
    # calamine shows a blank as "", which the reader's rules take as blank already
    rows = [row if first == 0 and stop >= len(row) else row[first:stop] for row in values[rng.min_row - 1:last_row]]
    for (r, c), code in scan.errors.items():
        if rng.min_row <= r <= last_row and rng.min_col <= c <= last_col:
            row = rows[r - rng.min_row]
            row.extend([None] * (c - rng.min_col + 1 - len(row)))
            row[c - rng.min_col] = code
    return FastRead(rows, scan, merged)
