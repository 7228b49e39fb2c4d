"""Chart parts from templates: each kind of chart serialised once, then only its cell references filled in.

Building an openpyxl chart and serialising it walks several hundred descriptor
objects, although a result chart differs from the next of its kind only in the
cells it points at. Here a chart function of :mod:`workbook_tools.sheets.charts`
is run once per process on a sentinel sheet, with a distinct sentinel column and
row for every position argument; the XML it gives becomes the template, and each
later chart of that kind is the template with the sentinel references replaced by
the real ones, written as openpyxl writes references. The tests compare the result
with openpyxl's own serialisation of the same chart, byte for byte.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from xml.sax.saxutils import escape

import openpyxl
from openpyxl.chart import ScatterChart
from openpyxl.utils import column_index_from_string, get_column_letter, quote_sheetname
from openpyxl.xml.functions import tostring

from workbook_tools.sheets import charts

SENTINEL_SHEET = "WbtSentinel"
FIRST_SENTINEL_COLUMN = 16001      # columns WQK onwards: far beyond any result table
FIRST_SENTINEL_ROW = 900_001       # openpyxl's references stop at row 1,000,000
_REFERENCE = re.compile(re.escape(quote_sheetname(SENTINEL_SHEET))
                        + r"!\$([A-Z]+)\$([0-9]+)(?::\$([A-Z]+)\$([0-9]+))?")


@dataclass(frozen=True)
class _Template:
    xml: str
    width: float
    height: float
    columns: dict[int, str]        # sentinel column -> position argument
    rows: dict[int, str]           # sentinel row -> position argument


def _is_position(name: str, value) -> bool:
    return isinstance(value, int) and not isinstance(value, bool) and (name.endswith("_col") or name.endswith("_row"))


_TEMPLATES: dict[tuple, _Template | None] = {}


def _template(add, kwargs: dict) -> _Template | None:
    positions = sorted(name for name, value in kwargs.items() if _is_position(name, value))
    constants = tuple(sorted((name, value) for name, value in kwargs.items()
                             if name not in positions and name != "anchor"))
    key = (add.__module__, add.__qualname__, tuple(positions), constants)
    if key not in _TEMPLATES:
        columns = {FIRST_SENTINEL_COLUMN + i: n for i, n in enumerate(p for p in positions if p.endswith("_col"))}
        rows = {FIRST_SENTINEL_ROW + i: n for i, n in enumerate(p for p in positions if p.endswith("_row"))}
        sentinel = {**{n: c for c, n in columns.items()}, **{n: r for r, n in rows.items()}}
        ws = openpyxl.Workbook().active
        ws.title = SENTINEL_SHEET
        try:
            chart = add(ws, **dict(kwargs, **sentinel, anchor="A1"))
        except (ValueError, TypeError):   # a chart that reads cell values cannot be templated
            _TEMPLATES[key] = None
        else:
            _TEMPLATES[key] = _Template(tostring(chart._write()).decode("utf-8"), chart.width, chart.height,
                                        columns, rows)
    return _TEMPLATES[key]


def chart_part(add, sheet_title: str, **kwargs):
    """The chart part ``add(ws, **kwargs)`` would give on the sheet ``sheet_title``, and its anchor.

    Parameters
    ----------
    add : callable
        A chart function of :mod:`workbook_tools.sheets.charts`.
    sheet_title : str
        The sheet whose cells the chart points at.
    **kwargs
        The function's arguments; ``*_col`` and ``*_row`` integers are positions.

    Returns
    -------
    (bytes, openpyxl.chart.ScatterChart) or None
        The chart XML, and a stand-in chart carrying the anchor and size that a
        drawing part needs; None when the function cannot be templated (it reads
        cell values), so the caller builds the chart itself.
    """
    template = _template(add, kwargs)
    if template is None:
        return None
    real_cols = {sentinel: kwargs[name] for sentinel, name in template.columns.items()}
    real_rows = {sentinel: kwargs[name] for sentinel, name in template.rows.items()}
    sheet = quote_sheetname(sheet_title)

    def cell(letters: str, row: str) -> str:
        return f"${get_column_letter(real_cols[column_index_from_string(letters)])}${real_rows[int(row)]}"

    def reference(match) -> str:
        first = cell(match.group(1), match.group(2))
        last = first if match.group(3) is None else cell(match.group(3), match.group(4))
        return escape(f"{sheet}!{first}" if last == first else f"{sheet}!{first}:{last}")   # as openpyxl writes it

    stand_in = ScatterChart()
    stand_in.anchor = charts._anchor_cell(kwargs["anchor"])
    stand_in.width, stand_in.height = template.width, template.height
    return _REFERENCE.sub(reference, template.xml).encode("utf-8"), stand_in
