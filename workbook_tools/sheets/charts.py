"""Native worksheet charts that point at cells already written to the sheet.

Three charts: a normal Q-Q plot of standardized residuals, standardized
residuals against fitted values, and treatment means with confidence
intervals drawn as custom error bars. Every series refers to cell ranges, so
the charts follow the cells when they change. Rows and columns are 1-based.

openpyxl 3.1.5 needs four corrections for charts that open cleanly:

* ``ErrorBars`` writes ``minus`` before ``plus``; the chart schema
  (``CT_ErrBars``) wants ``plus`` first. :class:`SchemaOrderErrorBars` fixes it.
* A scatter chart without ``scatterStyle`` omits an element the schema requires.
* Axes carry no ``delete`` element, and some applications then hide them, so
  ``delete`` is set to false explicitly.
* Every axis is placed on the left (``axPos="l"``), including the horizontal one.
"""

from __future__ import annotations

from numbers import Real

from openpyxl.chart import LineChart, Reference, ScatterChart, Series
from openpyxl.chart.axis import ChartLines
from openpyxl.chart.data_source import AxDataSource, NumData, NumDataSource, NumRef, NumVal, StrRef
from openpyxl.chart.error_bar import ErrorBars
from openpyxl.chart.marker import Marker
from openpyxl.chart.shapes import GraphicalProperties
from openpyxl.chart.text import RichText, Text
from openpyxl.chart.title import Title
from openpyxl.drawing.line import LineProperties
from openpyxl.drawing.text import CharacterProperties, Paragraph, ParagraphProperties, RegularTextRun
from openpyxl.utils import get_column_letter

CHART_WIDTH_CM = 15.0
CHART_HEIGHT_CM = 9.0
TITLE_POINTS = 12
AXIS_TITLE_POINTS = 10

POINT_COLOUR = "1F4E79"
REFERENCE_LINE_COLOUR = "C00000"
AXIS_COLOUR = "595959"
GRIDLINE_COLOUR = "D9D9D9"
ERROR_BAR_COLOUR = "404040"

_EMU_PER_POINT = 12_700


class SchemaOrderErrorBars(ErrorBars):
    """Error bars that write their children in the order ``CT_ErrBars`` requires.

    openpyxl 3.1.5 writes ``minus`` before ``plus``, which the schema forbids;
    this subclass only changes the order. ``__attrs__`` and ``__nested__`` are
    copied because openpyxl's metaclass would otherwise reset them to empty
    for a subclass, and the nested children (``errDir`` ...) would not serialise.
    ``extLst`` (last in the schema) stays out, as in openpyxl: ``ErrorBars``
    never sets it on an instance.

    References
    ----------
    .. [1] ECMA-376 Office Open XML File Formats, Part 1, DrawingML Charts
       schema (dml-chart.xsd), complex type ``CT_ErrBars``.
    """

    tagname = "errBars"
    __attrs__ = ErrorBars.__attrs__
    __nested__ = ErrorBars.__nested__
    __elements__ = (
        "errDir", "errBarType", "errValType", "noEndCap",
        "plus", "minus", "val", "spPr",
    )


def add_qq_chart(
    ws, *, x_col, y_col, first_row, last_row,
    line_x_col, line_y_col, line_first_row, line_last_row,
    anchor, title="Normal Q-Q plot of standardized residuals",
):
    """Add a normal Q-Q scatter chart with a reference line to ``ws``.

    Parameters
    ----------
    ws : openpyxl.worksheet.worksheet.Worksheet
        Sheet that holds the cells and receives the chart.
    x_col, y_col : int
        Columns of the theoretical normal quantiles (x) and the sorted
        standardized residuals (y).
    first_row, last_row : int
        Rows of the points, inclusive.
    line_x_col, line_y_col, line_first_row, line_last_row : int
        Cells of the reference line's end points (usually two rows).
    anchor : str or tuple of int
        Top-left cell of the chart, ``"H2"`` or ``(row, column)``.
    title : str
        Chart title.

    Returns
    -------
    openpyxl.chart.ScatterChart
        The chart, already added to ``ws``.

    References
    ----------
    .. [1] Wilk, M. B. and Gnanadesikan, R. (1968). Probability plotting
       methods for the analysis of data. Biometrika 55(1), 1-17.
    """
    chart = _scatter_chart(title, "Theoretical normal quantile", "Standardized residual")
    chart.series.append(_point_series(
        ws, x_col, y_col, first_row, last_row, "Standardized residuals"))
    chart.series.append(_line_series(
        ws, line_x_col, line_y_col, line_first_row, line_last_row, "Reference line"))
    # Both axes at the low end, so neither runs through the points.
    chart.x_axis.crosses = "min"
    chart.y_axis.crosses = "min"
    ws.add_chart(chart, _anchor_cell(anchor))
    return chart


def add_residual_chart(
    ws, *, x_col, y_col, first_row, last_row,
    anchor, title="Residuals versus fitted values",
):
    """Add a scatter chart of standardized residuals against fitted values.

    The horizontal axis line is drawn at a residual of zero and serves as the
    zero reference line; its tick labels stay at the bottom of the plot.

    Parameters
    ----------
    ws : openpyxl.worksheet.worksheet.Worksheet
        Sheet that holds the cells and receives the chart.
    x_col, y_col : int
        Columns of the fitted values (x) and standardized residuals (y).
    first_row, last_row : int
        Rows of the points, inclusive.
    anchor : str or tuple of int
        Top-left cell of the chart, ``"H2"`` or ``(row, column)``.
    title : str
        Chart title.

    Returns
    -------
    openpyxl.chart.ScatterChart
        The chart, already added to ``ws``.
    """
    chart = _scatter_chart(title, "Fitted value", "Standardized residual")
    chart.series.append(_point_series(
        ws, x_col, y_col, first_row, last_row, "Standardized residuals"))
    chart.x_axis.crosses = "autoZero"
    chart.x_axis.spPr = _line_properties(AXIS_COLOUR, points=1.25)
    chart.y_axis.crosses = "min"
    ws.add_chart(chart, _anchor_cell(anchor))
    return chart


def add_means_chart(
    ws, *, label_col, mean_col, low_col, high_col, first_row, last_row,
    anchor, plus_col=None, minus_col=None,
    title="Treatment means with confidence intervals", y_title="Mean",
):
    """Add a chart of treatment means (markers) with confidence-interval error bars.

    The error bars reach from the low to the high limit. Native error bars
    take lengths, not limits, so the caller should write two helper columns,
    ``plus = high - mean`` and ``minus = mean - low`` (plain numbers or
    formulas), and pass them as ``plus_col`` and ``minus_col``; the bars then
    follow the cells. Without them the lengths are read from the mean, low and
    high cells now and stored in the chart as fixed numbers.

    Parameters
    ----------
    ws : openpyxl.worksheet.worksheet.Worksheet
        Sheet that holds the cells and receives the chart.
    label_col, mean_col, low_col, high_col : int
        Columns of the treatment labels, means and interval limits.
    first_row, last_row : int
        Rows of the treatments, inclusive.
    anchor : str or tuple of int
        Top-left cell of the chart, ``"H2"`` or ``(row, column)``.
    plus_col, minus_col : int, optional
        Columns of the upper and lower error-bar lengths; give both or neither.
    title, y_title : str
        Chart title and value-axis title.

    Returns
    -------
    openpyxl.chart.LineChart
        The chart, already added to ``ws``.

    Raises
    ------
    ValueError
        If only one of ``plus_col``/``minus_col`` is given, or, without them,
        if a mean, low or high cell does not hold a number.
    """
    _check_rows(first_row, last_row)
    if (plus_col is None) != (minus_col is None):
        raise ValueError("give both plus_col and minus_col, or neither")
    chart = LineChart()
    chart.marker = True
    _style_chart(chart, title, "Treatment", y_title)
    chart.x_axis.tickLblPos = "low"
    chart.y_axis.crossBetween = "between"

    series = Series(_column(ws, mean_col, first_row, last_row), title="Mean")
    series.cat = AxDataSource(strRef=StrRef(f=str(_column(ws, label_col, first_row, last_row))))
    _markers_only(series)
    series.errBars = SchemaOrderErrorBars(
        errDir="y", errBarType="both", errValType="cust", noEndCap=False,
        plus=_bar_lengths(ws, plus_col, (mean_col, high_col), first_row, last_row),
        minus=_bar_lengths(ws, minus_col, (low_col, mean_col), first_row, last_row),
        spPr=_line_properties(ERROR_BAR_COLOUR, points=1.0),
    )
    chart.series.append(series)
    ws.add_chart(chart, _anchor_cell(anchor))
    return chart


def _scatter_chart(title, x_title, y_title):
    chart = ScatterChart()
    # Required by the schema; the series' own line and marker settings decide the look.
    chart.scatterStyle = "lineMarker"
    _style_chart(chart, title, x_title, y_title)
    chart.x_axis.majorGridlines = _gridlines()
    chart.x_axis.tickLblPos = "low"
    chart.y_axis.tickLblPos = "low"
    return chart


def _style_chart(chart, title, x_title, y_title):
    chart.width = CHART_WIDTH_CM
    chart.height = CHART_HEIGHT_CM
    chart.title = _title(title, TITLE_POINTS)
    chart.legend = None
    chart.roundedCorners = False
    chart.x_axis.axPos = "b"
    chart.y_axis.axPos = "l"
    for axis, text in ((chart.x_axis, x_title), (chart.y_axis, y_title)):
        axis.delete = False
        axis.title = _title(text, AXIS_TITLE_POINTS)
        axis.majorTickMark = "out"
        axis.spPr = _line_properties(AXIS_COLOUR, points=0.75)
    chart.y_axis.majorGridlines = _gridlines()


def _point_series(ws, x_col, y_col, first_row, last_row, name):
    _check_rows(first_row, last_row)
    series = Series(_column(ws, y_col, first_row, last_row),
                    _column(ws, x_col, first_row, last_row), title=name)
    _markers_only(series)
    return series


def _line_series(ws, x_col, y_col, first_row, last_row, name):
    _check_rows(first_row, last_row)
    series = Series(_column(ws, y_col, first_row, last_row),
                    _column(ws, x_col, first_row, last_row), title=name)
    series.marker = Marker(symbol="none")
    series.graphicalProperties = _line_properties(REFERENCE_LINE_COLOUR, points=1.5)
    series.smooth = False
    return series


def _markers_only(series):
    series.marker = Marker(symbol="circle", size=5)
    series.marker.graphicalProperties = GraphicalProperties(
        solidFill=POINT_COLOUR, ln=LineProperties(solidFill=POINT_COLOUR))
    series.graphicalProperties = GraphicalProperties(ln=LineProperties(noFill=True))
    series.smooth = False


def _bar_lengths(ws, length_col, from_to_cols, first_row, last_row):
    """Error-bar lengths: a reference to ``length_col``, or numbers ``to - from``."""
    if length_col is not None:
        return NumDataSource(numRef=NumRef(f=str(_column(ws, length_col, first_row, last_row))))
    from_col, to_col = from_to_cols
    points = [
        NumVal(idx=index, v=_number(ws, row, to_col) - _number(ws, row, from_col))
        for index, row in enumerate(range(first_row, last_row + 1))
    ]
    return NumDataSource(numLit=NumData(formatCode="General", ptCount=len(points), pt=points))


def _number(ws, row, col):
    value = ws.cell(row=row, column=col).value
    if isinstance(value, bool) or not isinstance(value, Real):
        address = f"{get_column_letter(col)}{row}"
        raise ValueError(
            f"cell {address} holds {value!r}, not a number; "
            "write plus/minus helper columns and pass plus_col and minus_col")
    return float(value)


def _column(ws, col, first_row, last_row):
    return Reference(ws, min_col=col, max_col=col, min_row=first_row, max_row=last_row)


def _check_rows(first_row, last_row):
    if not 1 <= first_row <= last_row:
        raise ValueError(f"rows {first_row}..{last_row} are not a range of 1-based rows")


def _anchor_cell(anchor):
    if isinstance(anchor, str):
        return anchor
    row, col = anchor
    return f"{get_column_letter(col)}{row}"


def _gridlines():
    return ChartLines(spPr=_line_properties(GRIDLINE_COLOUR, points=0.5))


def _line_properties(colour, points):
    return GraphicalProperties(ln=LineProperties(solidFill=colour, w=int(points * _EMU_PER_POINT)))


def _title(text, points):
    size = CharacterProperties(sz=points * 100, b=False)
    paragraph = Paragraph(pPr=ParagraphProperties(defRPr=size), r=[RegularTextRun(rPr=size, t=text)])
    return Title(tx=Text(rich=RichText(p=[paragraph])), overlay=False)
