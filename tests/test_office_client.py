"""The result workbooks in a real spreadsheet client: LibreOffice Calc, headless.

Every sample is analysed by the command line (and the first result workbook once
more, as a re-run); LibreOffice then opens each result workbook and prints it to PDF, writes every sheet to CSV (raw and as
shown) and saves it again as .xlsx. The numbers LibreOffice holds must be the
engine's JSON numbers (1e-12 relative); as shown, they must round to the
displayed digits, p-values below 1e-4 reading ``< 0.0001``. Four soffice
invocations in all, each converting every workbook.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import openpyxl
import pytest

from tests.office import convert, csv_every_sheet, office_version, requires_office
from tests.test_cli import assert_sheets_show, load_json, run_cli, sample_argv, workbook_grids
from workbook_tools.samples import SAMPLES, build_sample

pytestmark = [pytest.mark.office, requires_office]


class Analysed:
    """The samples' result workbooks and JSON, and a private LibreOffice profile, for one module run."""

    def __init__(self, root: Path):
        self.root = root
        self.profile = root / "profile"
        self.outputs: list[Path] = []
        self.json: dict[Path, dict] = {}
        for sample in SAMPLES:
            folder = root / Path(sample.filename).stem
            book = build_sample(sample, folder)
            out = root / "results" / f"{book.stem}-analysed.xlsx"
            out.parent.mkdir(exist_ok=True)
            code, _, err = run_cli("analyze", book, *sample_argv(sample), "--out", out, "--json", folder / "r.json")
            assert code == 0, err
            self.outputs.append(out)
            self.json[out] = load_json((folder / "r.json").read_text(encoding="utf-8"))
        # a re-run on a result workbook: its earlier result sheets are dropped from the copy
        sample, first = SAMPLES[0], self.outputs[0]
        again = root / "results" / f"{first.stem}-again.xlsx"
        code, _, err = run_cli("analyze", first, *sample_argv(sample), "--compare", "lsd", "--out", again,
                               "--json", root / "again.json")
        assert code == 0, err
        self.outputs.append(again)
        self.json[again] = load_json((root / "again.json").read_text(encoding="utf-8"))

    def convert(self, target: str, folder: str) -> Path:
        outdir = self.root / folder
        convert(self.outputs, target, outdir, self.profile)
        return outdir


@pytest.fixture(scope="module")
def analysed(tmp_path_factory) -> Analysed:
    return Analysed(tmp_path_factory.mktemp("office"))


def test_every_result_workbook_prints_to_pdf(analysed):
    outdir = analysed.convert("pdf", "pdf")
    for out in analysed.outputs:
        pdf = outdir / f"{out.stem}.pdf"
        assert pdf.is_file(), f"{out.name} was not converted"
        data = pdf.read_bytes()
        assert len(data) > 1000 and data.startswith(b"%PDF")


def test_libreoffice_stores_the_engine_numbers(analysed):
    outdir = analysed.convert("xlsx:Calc MS Excel 2007 XML", "resaved")
    for out in analysed.outputs:
        resaved = outdir / out.name
        assert resaved.is_file(), f"{out.name} was not saved again"
        assert openpyxl.load_workbook(resaved).sheetnames == openpyxl.load_workbook(out).sheetnames
        assert_sheets_show(workbook_grids(resaved), analysed.json[out])


def _csv_sheets(outdir: Path, out: Path) -> dict[str, list[list[str]]]:
    """Every sheet's CSV, by sheet name, in workbook order."""
    sheets = {}
    for name in openpyxl.load_workbook(out, read_only=True).sheetnames:
        path = outdir / f"{out.stem}-{name}.csv"
        assert path.is_file(), f"no CSV for sheet {name!r} of {out.name}"
        with open(path, newline="", encoding="utf-8") as handle:
            sheets[name] = list(csv.reader(handle))
    return sheets


@pytest.mark.parametrize("as_shown", [False, True], ids=["raw", "as-shown"])
def test_csv_of_every_sheet_shows_the_engine_numbers(analysed, as_shown):
    if office_version() < (7, 2):
        pytest.skip("exporting every sheet to CSV needs LibreOffice 7.2 or later")
    outdir = analysed.convert(csv_every_sheet(as_shown=as_shown), "csv-shown" if as_shown else "csv-raw")
    shown_p = []
    for out in analysed.outputs:
        sheets = _csv_sheets(outdir, out)
        assert_sheets_show(sheets, analysed.json[out], as_shown=as_shown)
        shown_p += [cell for grid in sheets.values() for row in grid for cell in row if cell == "< 0.0001"]
    # the samples hold p-values below 1e-4, so the conditional p format must have been used as shown
    assert bool(shown_p) == as_shown, json.dumps(shown_p[:3])
