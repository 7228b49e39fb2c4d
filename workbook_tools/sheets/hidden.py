"""Hidden rows and columns inside the range being analysed.

Hidden cells are analysed like any other: hiding a row is a matter of display,
and dropping its values silently would change the result without a trace. But
a user who hid a row often meant to exclude it, so the analysis carries a
warning naming the hidden rows and columns.

The sheet's XML part is streamed with expat (the package has already passed
`workbook_tools.sheets.limits.check_package`), reading ``<col hidden>`` and
``<row hidden>`` only, and stops after the last row of the range.
"""

from __future__ import annotations

import zipfile
from pathlib import Path
from xml.parsers import expat

from openpyxl.utils import get_column_letter

from workbook_tools.sheets.ranges import CellRange
from workbook_tools.sheets.safety import sheet_parts

_CHUNK = 256 * 1024
_SHOWN = 8


class _Done(Exception):
    """Stops the scan once past the range."""


def _is_true(text) -> bool:
    return str(text).strip().lower() in ("1", "true")


def hidden_lines(path, rng: CellRange) -> tuple[list[int], list[int]]:
    """Row numbers and column numbers inside ``rng`` that are hidden on its sheet.

    Parameters
    ----------
    path : path-like
        The workbook.
    rng : CellRange
        The range read (its sheet and bounds).

    Returns
    -------
    (list of int, list of int)
        Hidden rows and hidden columns (1-based), in order.
    """
    rows, cols = set(), set()
    with zipfile.ZipFile(Path(path)) as package:
        part = next((p for p, name in sheet_parts(package).items() if name == rng.sheet), None)
        if part is None or part not in package.namelist():
            return [], []
        parser = expat.ParserCreate()

        def start(tag, attrs):
            local = tag.rsplit(":", 1)[-1]
            if local == "col" and _is_true(attrs.get("hidden", "0")):
                low, high = int(attrs.get("min", 0)), int(attrs.get("max", 0))
                cols.update(range(max(low, rng.min_col), min(high, rng.max_col) + 1))
            elif local == "row" and "r" in attrs:
                number = int(attrs["r"])
                if number > rng.max_row:
                    raise _Done
                if number >= rng.min_row and _is_true(attrs.get("hidden", "0")):
                    rows.add(number)

        parser.StartElementHandler = start
        try:
            with package.open(part) as stream:
                while chunk := stream.read(_CHUNK):
                    parser.Parse(chunk, False)
                parser.Parse(b"", True)
        except (_Done, expat.ExpatError, ValueError):
            pass
    return sorted(rows), sorted(cols)


def _listed(items: list[str]) -> str:
    shown = ", ".join(items[:_SHOWN])
    return shown + (f" and {len(items) - _SHOWN} more" if len(items) > _SHOWN else "")


def hidden_warning(path, rng: CellRange) -> str | None:
    """A sentence naming the hidden rows and columns of ``rng``, or ``None`` when there are none."""
    rows, cols = hidden_lines(path, rng)
    return hidden_text(rows, cols, rng)


def hidden_text(rows: list[int], cols: list[int], rng: CellRange) -> str | None:
    """The warning for hidden ``rows`` and ``cols`` (1-based) inside ``rng``; ``None`` when there are none."""
    if not rows and not cols:
        return None
    parts = []
    if rows:
        parts.append(f"row{'s' if len(rows) > 1 else ''} {_listed([str(r) for r in rows])}")
    if cols:
        parts.append(f"column{'s' if len(cols) > 1 else ''} {_listed([get_column_letter(c) for c in cols])}")
    return (f"Hidden {' and '.join(parts)} of sheet '{rng.sheet}' lie inside the range {rng.a1}; their cells "
            "were analysed like the others. Unhide them to check, or leave them out of the range.")
