"""The worksheet functions as plain Python with Excel-shaped arguments, and their xlwings registration.

Reference values come from statsmodels (OLS and ``anova_lm``) and scipy (t
quantiles), test-only libraries; messages are compared with what the headless
reader says about the same cell in a workbook file.
"""

from __future__ import annotations

import datetime as dt
import importlib.util
import io
import math
import sys
import types
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from scipy import stats
from statsmodels.stats.anova import anova_lm

from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.excel import functions as udf
from workbook_tools.sheets.reader import read_trials

DATA = Path(__file__).resolve().parent / "data" / "worked" / "E1_vascular_graft_montgomery_ex4_1.csv"


def _montgomery_grid() -> list[list]:
    """Montgomery, Design and Analysis of Experiments, Example 4.1, as a wide grid the way Excel passes it."""
    table = pd.read_csv(DATA)
    pressures, batches = sorted(table["pressure"].unique()), sorted(table["batch"].unique())
    value = {(r.batch, r.pressure): float(r.y) for r in table.itertuples()}
    return [[None] + [f"P{p}" for p in pressures]] + [[f"Batch {b}"] + [value[b, p] for p in pressures]
                                                       for b in batches]


GRID = _montgomery_grid()
ARRAY_FUNCTIONS = (udf.WBT_ANOVA, udf.WBT_SUMMARY, udf.WBT_MEANS, udf.WBT_PAIRS, udf.WBT_RESIDUALS, udf.WBT_CHECKS,
                   udf.WBT_GAIN)
SCALAR_FUNCTIONS = (udf.WBT_P, udf.WBT_LSD, udf.WBT_CV, udf.WBT_EFFICIENCY)


def frame(grid) -> pd.DataFrame:
    rows = [(row[0], grid[0][j], v) for row in grid[1:] for j, v in enumerate(row) if j and v is not None]
    return pd.DataFrame(rows, columns=["block", "treatment", "y"])


def test_montgomery_example_4_1_p_and_anova_match_statsmodels():
    # published values as recorded in tests/data/SOURCES.md (E1): pressure SS 178.17, batch SS 192.25,
    # error SS 109.89, F 8.11, p 0.0019
    reference = anova_lm(smf.ols("y ~ C(block) + C(treatment)", data=frame(GRID)).fit(), typ=2)
    assert udf.WBT_P(GRID) == pytest.approx(reference.loc["C(treatment)", "PR(>F)"], rel=1e-9)
    anova = udf.WBT_ANOVA(GRID)
    assert anova[0] == ["Source", "df", "Sum of squares", "Mean square", "F", "p-value"]
    assert anova[1][0] == "Treatments" and anova[1][5] == udf.WBT_P(GRID)
    assert anova[1][4] == pytest.approx(reference.loc["C(treatment)", "F"], rel=1e-9)
    assert [round(row[2], 2) for row in anova[1:4]] == [178.17, 192.25, 109.89]
    assert round(anova[1][4], 2) == 8.11 and round(anova[1][5], 4) == 0.0019


def test_lsd_and_cv_follow_their_formulas():
    model = smf.ols("y ~ C(block) + C(treatment)", data=frame(GRID)).fit()
    mse, df, r = model.mse_resid, model.df_resid, 6
    assert round(udf.WBT_LSD(GRID), 4) == 3.3307 and round(udf.WBT_CV(GRID), 3) == 3.014  # SOURCES.md E1 (library)
    assert udf.WBT_LSD(GRID) == pytest.approx(stats.t.ppf(0.975, df) * math.sqrt(2 * mse / r), rel=1e-9)
    assert udf.WBT_LSD(GRID, None, 0.01) == pytest.approx(stats.t.ppf(0.995, df) * math.sqrt(2 * mse / r), rel=1e-9)
    assert udf.WBT_CV(GRID) == pytest.approx(100 * math.sqrt(mse) / frame(GRID)["y"].mean(), rel=1e-9)


def test_every_function_spills_a_rectangle_without_none_or_nan():
    with_gap = [row[:] for row in GRID]
    with_gap[2][3] = None
    for function in ARRAY_FUNCTIONS:
        grid = function(with_gap)
        assert len({len(row) for row in grid}) == 1, function.__name__
        assert all(v is not None and not (isinstance(v, float) and math.isnan(v)) for row in grid for v in row)
    assert udf.WBT_LSD(with_gap) == ""  # replication differs: blank, as on the result sheet


def test_missing_estimate_is_the_least_squares_prediction():
    with_gap = [row[:] for row in GRID]
    with_gap[2][3] = None  # Batch 2, P8900
    model = smf.ols("y ~ C(block) + C(treatment)", data=frame(with_gap)).fit()
    predicted = model.predict(pd.DataFrame({"block": ["Batch 2"], "treatment": ["P8900"]}))[0]
    assert udf.WBT_MISSING_ESTIMATE(with_gap, "Batch 2", "P8900") == pytest.approx(predicted, rel=1e-9)
    assert "holds a value" in udf.WBT_MISSING_ESTIMATE(with_gap, "Batch 1", "P8500")
    assert "There is no block 'Batch 9'" in udf.WBT_MISSING_ESTIMATE(with_gap, "Batch 9", "P8500")


def _headless_message(tmp_path: Path, value) -> str:
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Trial"
    for row in GRID:
        ws.append(row)
    ws["C3"] = value
    path = tmp_path / "bad.xlsx"
    wb.save(path)
    with pytest.raises(TrialInputError) as caught:
        read_trials(path, "Trial!A1:E7", layout="wide")
    assert (caught.value.sheet, caught.value.cell) == ("Trial", "C3")
    return caught.value.message


@pytest.mark.parametrize("value", ["#N/A", "#DIV/0!", "abc", "12.5", True, dt.datetime(2024, 3, 4, 0, 0)],
                         ids=["na", "div0", "text", "text-number", "boolean", "date"])
def test_a_bad_cell_gives_the_headless_message_with_its_place(tmp_path, value):
    bad = [row[:] for row in GRID]
    bad[2][2] = value  # C3 of the range
    expected = _headless_message(tmp_path, value)
    wide = (None, None, None, "wide")
    for function in ARRAY_FUNCTIONS:
        assert function(bad, *wide) == [[f"row 3, column 3 of the data: {expected}"]]
    for function in SCALAR_FUNCTIONS:
        assert function(bad, *wide) == f"row 3, column 3 of the data: {expected}"


def test_bad_options_are_messages_not_tracebacks():
    assert udf.WBT_P(GRID, "fisher").startswith("The comparison method must be one of")
    assert udf.WBT_P(GRID, None, "abc").startswith("Alpha must be a number between 0 and 1")
    assert udf.WBT_MEANS(GRID, None, None, None, "sideways")[0][0].startswith("The layout must be")
    assert "control" in udf.WBT_PAIRS(GRID, "dunnett", 0.05, "P9999")[0][0].lower()


def test_long_layout_with_two_responses_asks_for_one():
    long = [["Block", "Treatment", "y", "z"]] + [[r[0], GRID[0][j], r[j], r[j] * 2] for r in GRID[1:] for j in
                                                 range(1, 5)]
    message = udf.WBT_ANOVA(long, None, None, None, "long")[0][0]
    assert message == "The data hold several responses ('y', 'z'); name one with the response argument."
    wide, by_name = udf.WBT_ANOVA(GRID), udf.WBT_ANOVA(long, None, None, None, "long", "Block", "Treatment", "y")
    assert [row[:2] for row in by_name] == [row[:2] for row in wide]
    assert np.allclose([row[2] for row in by_name[1:]], [row[2] for row in wide[1:]], rtol=1e-12)


def test_a_single_value_is_a_readable_message():
    assert isinstance(udf.WBT_ANOVA(5.0)[0][0], str)
    assert isinstance(udf.WBT_P(None), str)


def test_functions_on_the_same_arguments_share_one_analysis():
    udf._analysis.cache_clear()
    data = [row[:] for row in GRID]
    udf.WBT_ANOVA(data)
    udf.WBT_MEANS(data)
    udf.WBT_P(data)
    info = udf._analysis.cache_info()
    assert (info.misses, info.hits) == (1, 2)


# ---------------------------------------------------------------- registration with xlwings

@pytest.fixture
def registered(monkeypatch):
    """The functions module loaded with xlwings' real decorators (Windows modules replaced by stand-ins)."""
    for name in ("pythoncom", "pywintypes", "win32com", "win32com.client"):
        stand_in = types.ModuleType(name)
        stand_in.CoInitialize = lambda: None
        stand_in.Dispatch = lambda *a, **k: None
        stand_in.com_error = Exception
        monkeypatch.setitem(sys.modules, name, stand_in)
    monkeypatch.delitem(sys.modules, "xlwings.udfs", raising=False)
    import xlwings

    udfs = importlib.import_module("xlwings.udfs")
    monkeypatch.setattr(xlwings, "func", udfs.xlfunc)
    monkeypatch.setattr(xlwings, "arg", udfs.xlarg)
    spec = importlib.util.spec_from_file_location("wbt_registered_functions", udf.__file__)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    yield udfs, module
    sys.modules.pop("xlwings.udfs", None)


EXPECTED_NAMES = {"WBT_ANOVA", "WBT_SUMMARY", "WBT_MEANS", "WBT_PAIRS", "WBT_RESIDUALS", "WBT_CHECKS", "WBT_GAIN",
                  "WBT_P", "WBT_LSD", "WBT_CV", "WBT_EFFICIENCY", "WBT_MISSING_ESTIMATE"}


def test_decorator_metadata(registered):
    _, module = registered
    found = {name for name in dir(module) if hasattr(getattr(module, name), "__xlfunc__")}
    assert EXPECTED_NAMES <= found and all(name.startswith("WBT_") for name in found)
    for name in EXPECTED_NAMES:
        info = getattr(module, name).__xlfunc__
        assert info["name"] == name and info["category"] == "workbook-tools" and not info["sub"]
        data = info["args"][0]
        assert data["name"] == "data" and "optional" not in data
        assert data["options"] == {"ndim": 2, "err_to_str": True}
        assert all(arg["doc"] == udf.ARGUMENT_DOCS[arg["name"]] for arg in info["args"])
        assert len(info["ret"]["doc"]) <= 255 and "\n" not in info["ret"]["doc"]
    anova = module.WBT_ANOVA.__xlfunc__["args"]
    assert [a["name"] for a in anova] == ["data", "compare", "alpha", "control", "layout", "block_header",
                                         "treatment_header", "response"]
    assert all(a["optional"] is None for a in anova[1:])
    missing = module.WBT_MISSING_ESTIMATE.__xlfunc__["args"]
    assert [("optional" in a) for a in missing[:3]] == [False, False, False]


def test_generated_vba_wrappers(registered):
    udfs, module = registered
    out = io.StringIO()
    udfs.generate_vba_wrapper("workbook_tools.excel.functions", module, out, types.SimpleNamespace(Name="a.xlsm"))
    vba = out.getvalue()
    assert ("Function WBT_ANOVA(data, Optional compare, Optional alpha, Optional control, Optional layout, "
            "Optional block_header, Optional treatment_header, Optional response)") in vba
    assert ('WBT_PAIRS = XLPy.CallUDF("workbook_tools.excel.functions", "WBT_PAIRS", Array(data, compare, alpha, '
            'control, layout, block_header, treatment_header, response), ThisWorkbook, Application.Caller)') in vba
    assert "Function WBT_MISSING_ESTIMATE(data, block, treatment, Optional layout" in vba
    registered_names = {name for name in dir(module) if hasattr(getattr(module, name), "__xlfunc__")}
    assert vba.count("End Function") == len(registered_names)
