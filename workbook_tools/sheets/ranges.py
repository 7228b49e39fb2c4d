"""Turn the range a user typed (``'Field 2'!B3:G9``, a defined name, a table) into cells."""

from __future__ import annotations

import re
from dataclasses import dataclass

from openpyxl.packaging.relationship import get_dependents, get_rels_path
from openpyxl.utils import get_column_letter
from openpyxl.worksheet.table import Table
from openpyxl.xml.functions import fromstring

from workbook_tools.analysis.errors import TrialInputError

MAX_ROWS = 1_048_576
MAX_COLS = 16_384

_CELL = r"\$?([A-Za-z]{1,3})\$?([0-9]{1,7})"
_A1_RE = re.compile(rf"^{_CELL}(?::{_CELL})?$")
# Sheet names that must be quoted because they read like a cell reference.
_REF_LIKE_RE = re.compile(r"^([A-Za-z]+[0-9]+|[Rr][0-9]*[Cc][0-9]*)$")
_NAME_RE = re.compile(r"^[A-Za-z_\\][A-Za-z0-9_.\\]*$")


@dataclass(frozen=True)
class CellRange:
    """A rectangle of cells on one worksheet, 1-based and inclusive."""

    sheet: str
    min_row: int
    min_col: int
    max_row: int
    max_col: int

    @property
    def a1(self) -> str:
        """The range in A1 form without the sheet, e.g. ``B3:G9``."""
        start = cell_address(self.min_row, self.min_col)
        if (self.min_row, self.min_col) == (self.max_row, self.max_col):
            return start
        return f"{start}:{cell_address(self.max_row, self.max_col)}"

    @property
    def full(self) -> str:
        """The range with its sheet, quoted when needed: ``'My sheet'!B3:G9``."""
        return f"{quote_sheet(self.sheet)}!{self.a1}"


def cell_address(row: int, col: int) -> str:
    """A1 address of a cell given 1-based row and column numbers."""
    return f"{get_column_letter(col)}{row}"


def quote_sheet(title: str) -> str:
    """Sheet name as written in a reference: quoted unless plain letters and digits."""
    if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_.]*", title) and not _REF_LIKE_RE.match(title):
        return title
    return "'" + title.replace("'", "''") + "'"


def parse_range_text(text: str) -> tuple[str | None, str]:
    """Split a typed range into sheet name (``None`` when absent) and the rest.

    ``"Sheet!B3:G9"`` gives ``("Sheet", "B3:G9")``, ``"'Bob''s data'!A1:C5"``
    gives ``("Bob's data", "A1:C5")``, ``"B3:G9"`` and ``"TrialData"`` (a
    defined name or table name) give ``(None, ...)``.
    """
    text = (text or "").strip()
    if text.startswith("="):
        text = text[1:].strip()
    if not text:
        raise TrialInputError("No range given. Give a range such as Sheet1!B3:G9, a defined name or a table name.")
    if text.startswith("'"):
        i, name = 1, []
        while i < len(text):
            if text[i] == "'":
                if text[i + 1:i + 2] == "'":
                    name.append("'")
                    i += 2
                    continue
                break
            name.append(text[i])
            i += 1
        rest = text[i + 1:]
        if i >= len(text) or not rest.startswith("!"):
            raise TrialInputError(
                f"The range {text!r} has a quoted sheet name that is not closed and followed by '!'. "
                "Write it like 'My sheet'!B3:G9 (double any apostrophe in the name: 'Bob''s data'!A1:C5)."
            )
        sheet, ref = "".join(name), rest[1:].strip()
    elif "!" in text:
        sheet, _, ref = text.rpartition("!")
        sheet, ref = sheet.strip(), ref.strip()
    else:
        return None, text
    if not sheet or not ref:
        raise TrialInputError(f"The range {text!r} needs a sheet name before '!' and cells after it, like Sheet1!B3:G9.")
    return sheet, ref


def parse_a1(ref: str) -> tuple[int, int, int, int] | None:
    """Rows and columns ``(min_row, min_col, max_row, max_col)`` of an A1 reference.

    Returns ``None`` when ``ref`` does not look like a cell reference (so it may be a
    name); raises `TrialInputError` when it looks like one but is invalid or beyond
    the worksheet limits (1,048,576 rows, 16,384 columns).
    """
    m = _A1_RE.match(ref)
    if m is None:
        if ":" in ref:
            raise TrialInputError(f"{ref!r} is not a valid cell range. Write it like B3:G9 or $B$3:$G$9.")
        return None
    letters = [m.group(1), m.group(3) or m.group(1)]
    numbers = [m.group(2), m.group(4) or m.group(2)]
    cols = [_column_number(c) for c in letters]
    rows = [int(n) for n in numbers]
    if min(rows) < 1 or max(rows) > MAX_ROWS or max(cols) > MAX_COLS:
        raise TrialInputError(
            f"The range {ref!r} goes beyond what a worksheet holds "
            f"(rows 1 to {MAX_ROWS:,}, columns A to XFD)."
        )
    return min(rows), min(cols), max(rows), max(cols)


def _column_number(letters: str) -> int:
    number = 0
    for ch in letters.upper():
        number = number * 26 + ord(ch) - ord("A") + 1
    return number


def resolve_range(workbook, text: str, default_sheet: str | None = None) -> CellRange:
    """Find the cells a typed range refers to.

    Parameters
    ----------
    workbook : openpyxl.Workbook
        An open workbook (normal or read-only).
    text : str
        ``Sheet!B3:G9``, ``'My sheet'!$B$3:$G$9``, ``B3:G9``, ``Sheet!LocalName``,
        a workbook- or sheet-level defined name, or a table name.
    default_sheet : str, optional
        Sheet for a range without one, and the sheet whose own names are tried first;
        the active sheet when not given.

    Returns
    -------
    CellRange
    """
    sheet, ref = parse_range_text(text)
    if sheet is not None:
        _check_sheet(workbook, sheet)
    box = parse_a1(ref)
    if box is not None:
        title = sheet or default_sheet or workbook.active.title
        _check_sheet(workbook, title)
        return CellRange(title, *box)
    if not _NAME_RE.match(ref):
        raise TrialInputError(
            f"{text!r} is neither a cell range (like Sheet1!B3:G9) nor a defined name or table name."
        )
    return _resolve_name(workbook, sheet, ref, default_sheet or workbook.active.title)


def _check_sheet(workbook, title: str) -> None:
    if title not in workbook.sheetnames:
        raise TrialInputError(
            f"There is no sheet named '{title}'. The workbook has: {_brief(workbook.sheetnames)}.",
            sheet=title,
        )


def _brief(items, limit: int = 8) -> str:
    items = list(items)
    if not items:
        return "none"
    shown = ", ".join(f"'{s}'" for s in items[:limit])
    return shown + (f" and {len(items) - limit} more" if len(items) > limit else "")


def _find(mapping, name: str):
    for key in mapping:
        if key.lower() == name.lower():
            return mapping[key]
    return None


def _resolve_name(workbook, sheet: str | None, name: str, home: str) -> CellRange:
    if sheet is not None:
        defn = _find(workbook[sheet].defined_names, name)
        if defn is None:
            raise TrialInputError(
                f"Sheet '{sheet}' has no name '{name}' of its own. "
                f"Its names are: {_brief(workbook[sheet].defined_names)}.",
                sheet=sheet,
            )
        return _range_of_name(workbook, defn, name, sheet)
    defn = _find(workbook[home].defined_names, name)
    if defn is not None:
        return _range_of_name(workbook, defn, name, home)
    defn = _find(workbook.defined_names, name)
    if defn is not None:
        return _range_of_name(workbook, defn, name, home)
    tables = workbook_tables(workbook)
    found = _find(tables, name)
    if found is not None:
        title, ref = found
        return CellRange(title, *parse_a1(ref))
    local = [t for t in workbook.sheetnames if _find(workbook[t].defined_names, name) is not None]
    if len(local) == 1:
        return _range_of_name(workbook, _find(workbook[local[0]].defined_names, name), name, local[0])
    if local:
        raise TrialInputError(
            f"Several sheets have their own name '{name}' ({_brief(local)}). "
            f"Say which one, like {quote_sheet(local[0])}!{name}."
        )
    names = list(workbook.defined_names) + [
        f"{quote_sheet(t)}!{n}" for t in workbook.sheetnames for n in workbook[t].defined_names
    ]
    raise TrialInputError(
        f"There is no defined name or table called '{name}'. "
        f"Defined names: {_brief(names)}; tables: {_brief(tables)}."
    )


def _range_of_name(workbook, defn, name: str, home: str) -> CellRange:
    value = (defn.value or "").strip()
    if "," in value or "(" in value or "#REF!" in value.upper():
        raise TrialInputError(
            f"The name '{name}' refers to {value!r}, not to one plain block of cells. "
            "Point the name at a single range such as Sheet1!$B$3:$G$9, or give the range itself."
        )
    try:
        sheet, ref = parse_range_text(value)
        box = parse_a1(ref)
    except TrialInputError:
        box = None
    if box is None:
        raise TrialInputError(
            f"The name '{name}' refers to {value!r}, which is not a block of cells on a sheet. "
            "Point the name at a range such as Sheet1!$B$3:$G$9, or give the range itself."
        )
    title = sheet or home
    _check_sheet(workbook, title)
    return CellRange(title, *box)


def workbook_tables(workbook) -> dict[str, tuple[str, str]]:
    """Every table in the workbook: table name -> (sheet title, A1 range)."""
    tables = {}
    for ws in workbook.worksheets:
        if hasattr(ws, "tables"):
            for table in ws.tables.values():
                tables[table.displayName] = (ws.title, table.ref)
        else:
            for table in _read_only_tables(workbook, ws):
                tables[table.displayName] = (ws.title, table.ref)
    return tables


def _read_only_tables(workbook, ws):
    # Read-only worksheets do not load their tables; read them from the package as
    # openpyxl's own reader does (its archive stays open until workbook.close()).
    archive = workbook._archive
    rels_path = get_rels_path(ws._worksheet_path)
    if rels_path not in archive.namelist():
        return []
    rels = get_dependents(archive, rels_path)
    return [Table.from_tree(fromstring(archive.read(r.target))) for r in rels.find(Table._rel_type)]
