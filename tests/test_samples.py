"""The bundled sample workbooks: no drift, readable by the reader, analysable by the engine.

Expected sizes (blocks, treatments, replicates, the one lost yield) are the
scenario specifications written into the sample definitions, not results of
the analysis. ANOVA figures are checked against statsmodels (test-only
reference library) fitted to the values the reader returns.
"""

from __future__ import annotations

import csv
import shutil
import subprocess
from pathlib import Path

import openpyxl
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from statsmodels.stats.anova import anova_lm

from workbook_tools import analyze_records
from workbook_tools.samples import DEMO, SAMPLES, SampleWorkbook, build_all, build_sample
from workbook_tools.sheets.reader import read_trials

COMMITTED = Path(__file__).resolve().parents[1] / "sample_workbooks"
BY_NAME = {sample.filename: sample for sample in SAMPLES}
# Scenario sizes: (blocks, treatments, observations per block and treatment).
SIZES = {
    "coating_hardness.xlsx": (6, 5, 1),
    "wheat_strips.xlsx": (5, 4, 1),
    "assay_replicates.xlsx": (4, 3, 3),
    "supplier_control.xlsx": (8, 5, 1),
}


def snapshot(path: Path) -> dict:
    """Everything a reader could see in a workbook: cell values, names and tables."""
    wb = openpyxl.load_workbook(path)
    try:
        return {
            "sheets": {ws.title: [list(row) for row in ws.iter_rows(values_only=True)] for ws in wb.worksheets},
            "names": {name: defn.attr_text for name, defn in wb.defined_names.items()},
            "tables": {ws.title: dict(ws.tables.items()) for ws in wb.worksheets},
            "formulas": [c.coordinate for ws in wb.worksheets for row in ws.iter_rows() for c in row
                         if c.data_type == "f"],
        }
    finally:
        wb.close()


def read(sample: SampleWorkbook, folder: Path = COMMITTED):
    return read_trials(folder / sample.filename, sample.range, layout=sample.layout, block=sample.block,
                       treatment=sample.treatment,
                       responses=list(sample.responses) if sample.responses else None)


def analyse(sample: SampleWorkbook, table):
    options = {"compare": "dunnett", "control": sample.control} if sample.control else {}
    return analyze_records(table.blocks, table.treatments, table.values, **options).to_dict()


def statsmodels_anova(table, formula: str):
    frame = pd.DataFrame({"y": table.values, "block": table.blocks, "treatment": table.treatments})
    return anova_lm(smf.ols(formula, data=frame).fit(), typ=2)


def anova_row(result: dict, source: str) -> dict:
    return next(row for row in result["anova"] if row["source"] == source)


def test_every_sample_has_a_writer_and_a_committed_file():
    assert DEMO is SAMPLES[0]
    assert sorted(BY_NAME) == sorted(SIZES)
    for sample in SAMPLES:
        assert (COMMITTED / sample.filename).is_file(), f"run sample_workbooks/make_samples.py ({sample.filename})"


def test_committed_files_match_a_fresh_build(tmp_path):
    paths = build_all(tmp_path)
    assert [p.name for p in paths] == [s.filename for s in SAMPLES]
    for path in paths:
        assert snapshot(path) == snapshot(COMMITTED / path.name), (
            f"{path.name} drifted: run python sample_workbooks/make_samples.py")


def test_two_builds_hold_the_same_values(tmp_path):
    first = build_sample(DEMO, tmp_path / "one")
    second = build_sample(DEMO, tmp_path / "two")
    assert snapshot(first) == snapshot(second)


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda s: s.filename)
def test_sample_cells_are_plain_values_and_the_sheet_is_named(sample):
    shot = snapshot(COMMITTED / sample.filename)
    assert shot["formulas"] == []
    assert sample.sheet in shot["sheets"]


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda s: s.filename)
def test_sample_is_read_and_analysed(sample):
    n_blocks, n_treatments, per_cell = SIZES[sample.filename]
    tables = read(sample)
    assert len(tables) == (len(sample.responses) if sample.responses else 1)
    for table in tables:
        assert table.sheet == sample.sheet
        assert len(set(table.blocks)) == n_blocks
        assert len(set(table.treatments)) == n_treatments
        assert len(table.values) + len(table.missing_cells) == n_blocks * n_treatments * per_cell
        result = analyse(sample, table)
        assert result["design"]["blocks"] == list(dict.fromkeys(table.blocks))
        assert len(result["means"]) == n_treatments


def test_demo_anova_matches_statsmodels():
    table, = read(DEMO)
    result = analyse(DEMO, table)
    reference = statsmodels_anova(table, "y ~ C(block) + C(treatment)")
    for source, term in (("treatment", "C(treatment)"), ("block", "C(block)")):
        row = anova_row(result, source)
        assert row["ss"] == pytest.approx(reference.loc[term, "sum_sq"], rel=1e-9)
        assert row["f"] == pytest.approx(reference.loc[term, "F"], rel=1e-9)
        assert row["p"] == pytest.approx(reference.loc[term, "PR(>F)"], rel=1e-6)


def test_wheat_has_exactly_one_missing_yield():
    sample = BY_NAME["wheat_strips.xlsx"]
    yields, protein = read(sample)
    assert (yields.response, protein.response) == sample.responses
    assert len(yields.missing_cells) == 1 and protein.missing_cells == []
    block, treatment, _ = yields.missing_cells[0]
    result = analyse(sample, yields)
    assert [(m["block"], m["treatment"]) for m in result["missing"]] == [(block, treatment)]
    assert analyse(sample, protein)["missing"] == []
    # The treatment test adjusted for blocks is the least-squares one (Type II in statsmodels).
    reference = statsmodels_anova(yields, "y ~ C(block) + C(treatment)")
    assert anova_row(result, "error")["ss"] == pytest.approx(reference.loc["Residual", "sum_sq"], rel=1e-9)
    assert anova_row(result, "error")["df"] == reference.loc["Residual", "df"]


def test_assay_has_an_interaction_row():
    sample = BY_NAME["assay_replicates.xlsx"]
    assert sample.range.startswith("'Day''s runs'!")
    table, = read(sample)
    result = analyse(sample, table)
    reference = statsmodels_anova(table, "y ~ C(block) * C(treatment)")
    for source, term in (("treatment", "C(treatment)"), ("block", "C(block)"),
                         ("interaction", "C(block):C(treatment)"), ("error", "Residual")):
        row = anova_row(result, source)
        assert row["ss"] == pytest.approx(reference.loc[term, "sum_sq"], rel=1e-9)
        assert row["df"] == reference.loc[term, "df"]


def test_supplier_sample_compares_with_the_control():
    sample = BY_NAME["supplier_control.xlsx"]
    table, = read(sample)
    assert table.treatments[0] == sample.control
    comparisons = analyse(sample, table)["comparisons"]
    assert comparisons["control"] == sample.control
    assert {pair["second"] for pair in comparisons["pairs"]} == {sample.control}
    assert len(comparisons["pairs"]) == SIZES[sample.filename][1] - 1


def test_defined_name_and_table_name_reach_the_same_cells():
    hardness = read_trials(COMMITTED / DEMO.filename, "HardnessData")[0]
    assert hardness.values == read(DEMO)[0].values
    wheat = BY_NAME["wheat_strips.xlsx"]
    explicit = read_trials(COMMITTED / wheat.filename, f"'{wheat.sheet}'!A4:D24", layout="long",
                           block=wheat.block, treatment=wheat.treatment, responses=list(wheat.responses))
    assert [t.values for t in explicit] == [t.values for t in read(wheat)]


@pytest.mark.office
@pytest.mark.skipif(shutil.which("soffice") is None, reason="LibreOffice (soffice) is not on PATH")
def test_samples_open_in_a_spreadsheet_application(tmp_path):
    profile = (tmp_path / "profile").as_uri()
    out = tmp_path / "csv"
    files = [str(COMMITTED / sample.filename) for sample in SAMPLES]
    subprocess.run(["soffice", f"-env:UserInstallation={profile}", "--headless", "--convert-to", "csv",
                    "--outdir", str(out), *files], check=True, capture_output=True, timeout=300)
    for sample in SAMPLES:
        converted = out / Path(sample.filename).with_suffix(".csv").name
        assert converted.is_file(), f"{sample.filename} was not converted"
        with open(converted, newline="", encoding="utf-8", errors="replace") as fh:
            shown = list(csv.reader(fh))
        sheet = snapshot(COMMITTED / sample.filename)["sheets"][sample.sheet]
        numbers = [(i, j, v) for i, row in enumerate(sheet) for j, v in enumerate(row)
                   if isinstance(v, (int, float)) and not isinstance(v, bool)]
        assert numbers
        for i, j, value in numbers:
            assert float(shown[i][j]) == pytest.approx(value), f"{sample.filename} row {i + 1} col {j + 1}"
