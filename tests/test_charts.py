"""Native charts: schema order of error bars, cell references, look, reopening.

Sources of expected values:

* Element order of ``CT_ErrBars`` and ``CT_ScatterChart``: ECMA-376 Part 1,
  DrawingML Charts schema dml-chart.xsd (memory; no copy of the xsd is
  installed here, so lxml validation is not possible). The order is also
  checked against what XlsxWriter writes, a library whose chart XML is tested
  against files saved by Excel.
* Sheet-name quoting in references (quotes around the name, an apostrophe
  doubled): the spreadsheet formula grammar of ECMA-376 Part 1, section 18.17
  (memory).
* Drawing sizes: 360 000 EMU per centimetre, ECMA-376 Part 1, section 20.1.2.1
  (memory).

Everything else is compared with cell positions and values the tests write.
"""

from __future__ import annotations

import io
import shutil
import subprocess
import zipfile

import openpyxl
import pytest
import xlsxwriter
from defusedxml import ElementTree
from hypothesis import given, settings, strategies as st
from openpyxl.chart.data_source import NumDataSource, NumRef
from openpyxl.chart.error_bar import ErrorBars

from workbook_tools.sheets.charts import (
    SchemaOrderErrorBars,
    add_means_chart,
    add_qq_chart,
    add_residual_chart,
)

C = "{http://schemas.openxmlformats.org/drawingml/2006/chart}"
A = "{http://schemas.openxmlformats.org/drawingml/2006/main}"
XDR = "{http://schemas.openxmlformats.org/drawingml/2006/spreadsheetDrawing}"

# ECMA-376 Part 1, dml-chart.xsd, CT_ErrBars sequence (memory).
ERR_BARS_SCHEMA_ORDER = (
    "errDir", "errBarType", "errValType", "noEndCap",
    "plus", "minus", "val", "spPr", "extLst",
)
EMU_PER_CM = 360_000  # ECMA-376 Part 1, 20.1.2.1 (memory)

SHEET = "Bob's trial 2"
QUOTED = "'Bob''s trial 2'"  # apostrophe doubled inside the quotes


def _filled_sheet(title=SHEET, rows=16):
    """A sheet with rows 5.. filled: A label, B mean, C low, D high, E plus, F minus,
    G quantile, H residual, I/J reference-line ends in rows 5-6."""
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = title
    for i in range(rows):
        row = 5 + i
        mean = 4.0 + 0.25 * i
        ws.cell(row, 1, f"T{i + 1}")
        ws.cell(row, 2, mean)
        ws.cell(row, 3, mean - 0.4 - 0.01 * i)
        ws.cell(row, 4, mean + 0.5 + 0.02 * i)
        ws.cell(row, 5, 0.5 + 0.02 * i)
        ws.cell(row, 6, 0.4 + 0.01 * i)
        ws.cell(row, 7, -1.8 + 0.24 * i)
        ws.cell(row, 8, -2.0 + 0.26 * i)
    for row, value in ((5, -2.0), (6, 2.0)):
        ws.cell(row, 9, value)
        ws.cell(row, 10, value)
    return wb, ws


def _means(ws, **extra):
    return add_means_chart(ws, label_col=1, mean_col=2, low_col=3, high_col=4,
                           first_row=5, last_row=20, anchor="L2", **extra)


def _saved(wb):
    buffer = io.BytesIO()
    wb.save(buffer)
    buffer.seek(0)
    return zipfile.ZipFile(buffer)


def _chart_xml(wb, number=1):
    return ElementTree.fromstring(_saved(wb).read(f"xl/charts/chart{number}.xml"))


def _local(tag):
    return tag.split("}")[-1]


def _children(element):
    return [_local(child.tag) for child in element]


def _formulas(root, container):
    return [f.text for f in root.iter(f"{C}{container}") for f in f.iter(f"{C}f")]


def _in_schema_order(names, schema):
    positions = [schema.index(name) for name in names]
    return positions == sorted(positions)


# --- error bars -----------------------------------------------------------------

def test_plain_openpyxl_error_bars_write_minus_before_plus():
    bars = ErrorBars(errBarType="both", errValType="cust",
                     plus=NumDataSource(numRef=NumRef(f="Sheet1!$A$1")),
                     minus=NumDataSource(numRef=NumRef(f="Sheet1!$B$1")))
    names = _children(bars.to_tree())
    if _in_schema_order(names, ERR_BARS_SCHEMA_ORDER):
        pytest.skip("this openpyxl writes error bars in schema order; the subclass is no longer needed")
    assert names.index("minus") < names.index("plus")


def test_means_chart_error_bars_follow_schema_order():
    wb, ws = _filled_sheet()
    _means(ws, plus_col=5, minus_col=6)
    bars = _chart_xml(wb).find(f".//{C}ser/{C}errBars")
    names = _children(bars)
    assert _in_schema_order(names, ERR_BARS_SCHEMA_ORDER), names
    assert {"errBarType", "errValType", "plus", "minus"} <= set(names)
    assert bars.find(f"{C}errBarType").get("val") == "both"
    assert bars.find(f"{C}errValType").get("val") == "cust"
    assert bars.find(f"{C}errDir").get("val") == "y"


def test_error_bar_order_agrees_with_xlsxwriter():
    buffer = io.BytesIO()
    book = xlsxwriter.Workbook(buffer, {"in_memory": True})
    sheet = book.add_worksheet()
    sheet.write_column("A1", [1, 2, 3])
    sheet.write_column("B1", [0.1, 0.2, 0.3])
    chart = book.add_chart({"type": "line"})
    chart.add_series({"values": "=Sheet1!$A$1:$A$3", "y_error_bars": {
        "type": "custom", "plus_values": "=Sheet1!$B$1:$B$3",
        "minus_values": "=Sheet1!$B$1:$B$3"}})
    sheet.insert_chart("D2", chart)
    book.close()
    buffer.seek(0)
    reference = _children(ElementTree.fromstring(
        zipfile.ZipFile(buffer).read("xl/charts/chart1.xml")).find(f".//{C}errBars"))

    wb, ws = _filled_sheet()
    _means(ws, plus_col=5, minus_col=6)
    ours = _children(_chart_xml(wb).find(f".//{C}errBars"))
    shared_ours = [name for name in ours if name in reference]
    shared_reference = [name for name in reference if name in ours]
    assert shared_ours == shared_reference
    assert {"plus", "minus"} <= set(shared_ours)


def test_subclass_keeps_nested_children():
    bars = SchemaOrderErrorBars(errDir="y", errBarType="plus", errValType="cust", noEndCap=True)
    tree = bars.to_tree()
    assert [(child.tag, child.get("val")) for child in tree] == [
        ("errDir", "y"), ("errBarType", "plus"), ("errValType", "cust"), ("noEndCap", "1")]


# --- references -------------------------------------------------------------------

def test_means_chart_references():
    wb, ws = _filled_sheet()
    _means(ws, plus_col=5, minus_col=6)
    root = _chart_xml(wb)
    assert _formulas(root, "cat") == [f"{QUOTED}!$A$5:$A$20"]
    assert _formulas(root, "val") == [f"{QUOTED}!$B$5:$B$20"]
    assert _formulas(root, "plus") == [f"{QUOTED}!$E$5:$E$20"]
    assert _formulas(root, "minus") == [f"{QUOTED}!$F$5:$F$20"]


def test_qq_chart_references_and_series_look():
    wb, ws = _filled_sheet()
    add_qq_chart(ws, x_col=7, y_col=8, first_row=5, last_row=20,
                 line_x_col=9, line_y_col=10, line_first_row=5, line_last_row=6, anchor="L2")
    root = _chart_xml(wb)
    assert _formulas(root, "xVal") == [f"{QUOTED}!$G$5:$G$20", f"{QUOTED}!$I$5:$I$6"]
    assert _formulas(root, "yVal") == [f"{QUOTED}!$H$5:$H$20", f"{QUOTED}!$J$5:$J$6"]
    points, line = root.iter(f"{C}ser")
    assert points.find(f"{C}marker/{C}symbol").get("val") == "circle"
    assert points.find(f"{C}spPr/{A}ln/{A}noFill") is not None
    assert line.find(f"{C}marker/{C}symbol").get("val") == "none"
    assert line.find(f"{C}spPr/{A}ln/{A}solidFill") is not None
    assert line.find(f"{C}smooth").get("val") == "0"


def test_residual_chart_references_and_zero_line_axis():
    wb, ws = _filled_sheet()
    add_residual_chart(ws, x_col=2, y_col=8, first_row=5, last_row=20, anchor=(2, 12))
    root = _chart_xml(wb)
    assert _formulas(root, "xVal") == [f"{QUOTED}!$B$5:$B$20"]
    assert _formulas(root, "yVal") == [f"{QUOTED}!$H$5:$H$20"]
    assert root.find(f".//{C}ser/{C}spPr/{A}ln/{A}noFill") is not None
    horizontal = next(ax for ax in root.iter(f"{C}valAx") if ax.find(f"{C}axPos").get("val") == "b")
    assert horizontal.find(f"{C}crosses").get("val") == "autoZero"
    assert horizontal.find(f"{C}tickLblPos").get("val") == "low"


@settings(max_examples=25, deadline=None)
@given(
    title=st.text(st.sampled_from("ab Z9'-_()&é"), min_size=1, max_size=31).filter(
        lambda t: not t.startswith("'") and not t.endswith("'") and t.strip() == t and t),
    first_row=st.integers(1, 5000),
    length=st.integers(0, 300),
    col=st.integers(1, 700),
)
def test_references_quote_any_sheet_name(title, first_row, length, col):
    wb, ws = _filled_sheet(title=title, rows=1)
    last_row = first_row + length
    add_residual_chart(ws, x_col=col, y_col=col + 1, first_row=first_row, last_row=last_row, anchor="A1")
    quoted = "'" + title.replace("'", "''") + "'"

    def expected(column):
        letter = openpyxl.utils.get_column_letter(column)
        cells = f"${letter}${first_row}"
        return f"{quoted}!{cells}" if length == 0 else f"{quoted}!{cells}:${letter}${last_row}"

    root = _chart_xml(wb)
    assert _formulas(root, "xVal") == [expected(col)]
    assert _formulas(root, "yVal") == [expected(col + 1)]


# --- literal error bars and refusals ----------------------------------------------

def test_literal_error_bars_without_helper_columns():
    wb, ws = _filled_sheet()
    _means(ws)
    root = _chart_xml(wb)
    rows = range(5, 21)
    expected_plus = [ws.cell(r, 4).value - ws.cell(r, 2).value for r in rows]
    expected_minus = [ws.cell(r, 2).value - ws.cell(r, 3).value for r in rows]
    for name, expected in (("plus", expected_plus), ("minus", expected_minus)):
        literal = root.find(f".//{C}errBars/{C}{name}/{C}numLit")
        assert literal.find(f"{C}ptCount").get("val") == str(len(expected))
        values = [float(v.text) for v in literal.iter(f"{C}v")]
        assert values == pytest.approx(expected, rel=1e-12)


def test_literal_error_bars_refuse_formula_cells():
    wb, ws = _filled_sheet()
    ws["D9"] = "=B9+0.5"
    with pytest.raises(ValueError, match="D9"):
        _means(ws)


def test_means_chart_needs_both_helper_columns():
    wb, ws = _filled_sheet()
    with pytest.raises(ValueError, match="both"):
        _means(ws, plus_col=5)


def test_rows_must_form_a_range():
    wb, ws = _filled_sheet()
    with pytest.raises(ValueError):
        add_residual_chart(ws, x_col=2, y_col=8, first_row=20, last_row=5, anchor="L2")
    with pytest.raises(ValueError):
        add_residual_chart(ws, x_col=2, y_col=8, first_row=0, last_row=5, anchor="L2")


# --- look -------------------------------------------------------------------------

def _all_three(ws):
    _means(ws, plus_col=5, minus_col=6)
    add_qq_chart(ws, x_col=7, y_col=8, first_row=5, last_row=20,
                 line_x_col=9, line_y_col=10, line_first_row=5, line_last_row=6, anchor="L22")
    add_residual_chart(ws, x_col=2, y_col=8, first_row=5, last_row=20, anchor=(42, 12))


AXIS_TITLES = {
    1: ("Treatment", "Mean"),
    2: ("Theoretical normal quantile", "Standardized residual"),
    3: ("Fitted value", "Standardized residual"),
}


@pytest.mark.parametrize("number", [1, 2, 3])
def test_axes_visible_titled_no_legend(number):
    wb, ws = _filled_sheet()
    _all_three(ws)
    root = _chart_xml(wb, number)
    plot = root.find(f"{C}chart/{C}plotArea")
    axes = [child for child in plot if _local(child.tag) in ("catAx", "valAx")]
    by_position = {ax.find(f"{C}axPos").get("val"): ax for ax in axes}
    assert sorted(by_position) == ["b", "l"]
    for ax in axes:
        assert ax.find(f"{C}delete").get("val") == "0"
    titles = tuple("".join(t.text for t in by_position[pos].iter(f"{A}t")) for pos in ("b", "l"))
    assert titles == AXIS_TITLES[number]
    assert root.find(f"{C}chart/{C}legend") is None
    assert by_position["l"].find(f"{C}majorGridlines/{C}spPr/{A}ln/{A}solidFill") is not None


@pytest.mark.parametrize("number", [2, 3])
def test_scatter_style_present_first(number):
    wb, ws = _filled_sheet()
    _all_three(ws)
    scatter = _chart_xml(wb, number).find(f".//{C}scatterChart")
    # CT_ScatterChart: scatterStyle is required and first (memory).
    assert _children(scatter)[0] == "scatterStyle"


def test_chart_size_and_anchors():
    wb, ws = _filled_sheet()
    _all_three(ws)
    drawing = ElementTree.fromstring(_saved(wb).read("xl/drawings/drawing1.xml"))
    anchors = list(drawing)
    # L2, L22, (row 42, column 12): zero-based column 11 and rows 1, 21, 41.
    assert [(a.find(f"{XDR}from/{XDR}col").text, a.find(f"{XDR}from/{XDR}row").text) for a in anchors] == [
        ("11", "1"), ("11", "21"), ("11", "41")]
    for anchor in anchors:
        extent = anchor.find(f"{XDR}ext")
        assert int(extent.get("cx")) == 15 * EMU_PER_CM
        assert int(extent.get("cy")) == 9 * EMU_PER_CM


def test_workbook_reopens_with_charts():
    wb, ws = _filled_sheet()
    _all_three(ws)
    buffer = io.BytesIO()
    wb.save(buffer)
    buffer.seek(0)
    reopened = openpyxl.load_workbook(buffer)[SHEET]
    assert len(reopened._charts) == 3
    assert reopened["B5"].value == ws["B5"].value


def _soffice(tmp_path, source, target):
    profile = (tmp_path / "profile").as_uri()
    return subprocess.run(
        ["soffice", f"-env:UserInstallation={profile}", "--headless",
         "--convert-to", target, "--outdir", str(tmp_path / "out"), str(source)],
        capture_output=True, text=True, check=False, timeout=600)


@pytest.mark.office
@pytest.mark.skipif(shutil.which("soffice") is None, reason="LibreOffice (soffice) is not on PATH")
def test_libreoffice_reads_charts_and_error_bars(tmp_path):
    wb, ws = _filled_sheet()
    _all_three(ws)
    source = tmp_path / "charts.xlsx"
    wb.save(source)

    result = _soffice(tmp_path, source, "pdf")
    assert result.returncode == 0, result.stderr
    assert (tmp_path / "out" / "charts.pdf").stat().st_size > 0

    # Saved again by LibreOffice: the error bars it understood keep their references.
    result = _soffice(tmp_path, source, "xlsx:Calc MS Excel 2007 XML")
    assert result.returncode == 0, result.stderr
    with zipfile.ZipFile(tmp_path / "out" / "charts.xlsx") as rewritten:
        charts = [ElementTree.fromstring(rewritten.read(name)) for name in sorted(rewritten.namelist())
                  if name.startswith("xl/charts/chart")]
    assert len(charts) == 3
    bars = [b for root in charts for b in root.iter(f"{C}errBars")]
    assert len(bars) == 1
    assert _in_schema_order(_children(bars[0]), ERR_BARS_SCHEMA_ORDER)
    assert [f.text for f in bars[0].iter(f"{C}f")] == [f"{QUOTED}!$E$5:$E$20", f"{QUOTED}!$F$5:$F$20"]
