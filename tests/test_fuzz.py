"""Fuzzing the workbook path and the engine: only TrialInputError may escape, never NaN or inf."""

from __future__ import annotations

import json
import tempfile
import warnings
from pathlib import Path

import openpyxl
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from workbook_tools import analyze_grid
from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.sheets.book import analyse_book, analyses_json

EXTREMES = [1e308, -1e308, 5e-324, -5e-324, -0.0, 0.0, 1e12 + 0.5, -1e12, 1e150, 1e-150, 2.0 ** 53, 1e40, 1e-40]
ERRORS = ["#N/A", "#DIV/0!", "#VALUE!", "#REF!", "#NUM!"]
numbers = st.one_of(st.floats(allow_nan=False, allow_infinity=False), st.sampled_from(EXTREMES),
                    st.floats(min_value=-1e3, max_value=1e3), st.integers(-10**6, 10**6))
cells = st.one_of(numbers, numbers, numbers, st.none(), st.text(st.characters(blacklist_categories=("Cc", "Cs")), max_size=6), st.sampled_from(ERRORS),
                  st.booleans(), st.sampled_from([" 12.5", "1e3", "", "  "]))
FUZZ = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def no_nan_or_inf(data) -> None:
    json.dumps(data, allow_nan=False)  # raises ValueError on NaN or infinity anywhere


@FUZZ
@given(body=st.lists(st.lists(cells, min_size=3, max_size=3), min_size=2, max_size=5),
       options=st.fixed_dictionaries({"text_numbers": st.booleans(), "errors_as_missing": st.booleans()}))
def test_workbook_grids_through_reader_and_engine(body, options):
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "fuzz.xlsx"
        wb = openpyxl.Workbook()
        ws = wb.active
        ws.title = "Fuzz"
        ws.append(["", "A", "B", "C"])
        for i, row in enumerate(body):
            ws.append([f"Block {i + 1}", *row])
        wb.save(path)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                analyses = analyse_book(path, f"Fuzz!A1:D{len(body) + 1}", layout="wide", **options)
        except TrialInputError as error:
            assert str(error)
            return
        no_nan_or_inf(analyses_json(analyses))


grid_values = st.one_of(st.floats(width=64), st.sampled_from(EXTREMES), st.none(), st.floats(-1e6, 1e6))


@settings(max_examples=150, deadline=None)
@given(grid=st.integers(2, 5).flatmap(lambda t: st.lists(st.lists(grid_values, min_size=t, max_size=t),
                                                         min_size=2, max_size=5)),
       compare=st.sampled_from(["lsd", "tukey", "bonferroni", "holm", "dunnett"]))
def test_engine_with_extreme_floats(grid, compare):
    blocks = [f"b{i}" for i in range(len(grid))]
    treatments = [f"t{j}" for j in range(len(grid[0]))]
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            result = analyze_grid(grid, blocks=blocks, treatments=treatments, compare=compare)
    except TrialInputError as error:
        assert str(error)
        return
    no_nan_or_inf(result.to_dict())
