"""The bundled sample workbooks: invented trials to try the tool on.

Each scenario is a made-up but plausible randomised complete block trial. Its
values come from an additive model (grand mean + block effect + treatment
effect + normal noise, plus a block x treatment term where plots are
replicated), drawn with ``numpy.random.default_rng`` from a fixed seed and
rounded as the instrument would report them, so every build holds the same
cell values. Cells hold plain numbers, never formulas.
"""

from __future__ import annotations

import datetime as dt
import pathlib
from dataclasses import dataclass

import numpy as np
import openpyxl
from openpyxl.styles import Alignment, Font
from openpyxl.utils import get_column_letter
from openpyxl.workbook.defined_name import DefinedName
from openpyxl.worksheet.table import Table, TableStyleInfo

INVENTED = "The data are invented for demonstration; they describe no real product, field or laboratory."


@dataclass(frozen=True)
class SampleWorkbook:
    """What a sample workbook holds and how to point the tool at it."""

    filename: str
    sheet: str
    range: str                         # what to pass as --range
    layout: str                        # "wide" or "long"
    block: str | None                  # long layout: header of the block column
    treatment: str | None              # long layout: header of the treatment column
    responses: tuple[str, ...] | None  # long layout: headers of the response columns
    control: str | None                # the control treatment, for comparisons with it
    description: str


SAMPLES: tuple[SampleWorkbook, ...] = (
    SampleWorkbook(
        filename="coating_hardness.xlsx", sheet="Hardness", range="Hardness!B3:G9", layout="wide",
        block=None, treatment=None, responses=None, control=None,
        description="Shore D hardness of five protective coating formulations on panels cured "
                    "in six oven batches (blocks); wide grid below a title and a note."),
    SampleWorkbook(
        filename="wheat_strips.xlsx", sheet="Strip trial", range="StripTrial", layout="long",
        block="Strip", treatment="Variety", responses=("Yield (t/ha)", "Protein (%)"), control=None,
        description="Grain yield and protein of four wheat varieties in five field strips (blocks); "
                    "one row per plot in a spreadsheet table, one yield lost."),
    SampleWorkbook(
        filename="assay_replicates.xlsx", sheet="Day's runs", range="'Day''s runs'!A4:D40", layout="long",
        block="Analyst-day", treatment="Preparation", responses=("Recovery (%)",), control=None,
        description="Spike recovery of three sample-preparation methods on four analyst-days "
                    "(blocks), three replicate preparations per day and method."),
    SampleWorkbook(
        filename="supplier_control.xlsx", sheet="Impact tests", range="'Impact tests'!A4:F12", layout="wide",
        block=None, treatment=None, responses=None, control="Current supplier",
        description="Notched impact strength of bars moulded from the current supplier's resin and "
                    "four candidates' resins on eight production days (blocks); compare with the current."),
)

DEMO = SAMPLES[0]
"""The sample that ``workbook-tools demo`` analyses."""

_BOLD = Font(bold=True)
_TITLE = Font(bold=True, size=14)
_NOTE = Font(italic=True, color="555555")


def build_sample(sample: SampleWorkbook, folder) -> pathlib.Path:
    """Write one sample workbook into ``folder`` and return its path.

    Parameters
    ----------
    sample : SampleWorkbook
        One of :data:`SAMPLES`.
    folder : str or os.PathLike
        Created when missing; an existing file of the same name is replaced.

    Returns
    -------
    pathlib.Path
    """
    writer = _WRITERS.get(sample.filename)
    if writer is None:
        raise ValueError(f"No sample workbook is called {sample.filename!r}.")
    folder = pathlib.Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = sample.sheet
    writer(wb, ws, sample)
    wb.properties.creator = "workbook-tools"
    wb.properties.title = sample.description
    wb.properties.created = dt.datetime(2024, 1, 1)
    path = folder / sample.filename
    wb.save(path)
    return path


def build_all(folder) -> list[pathlib.Path]:
    """Write every sample workbook into ``folder``; returns the paths in :data:`SAMPLES` order."""
    return [build_sample(sample, folder) for sample in SAMPLES]


# ---------------------------------------------------------------- the model

def _additive(rng, grand_mean, block_sd, treatment_effects, noise_sd, n_blocks, replicates=1, interaction_sd=0.0):
    """Values ``[block][treatment][replicate]`` of grand mean + block + treatment (+ interaction) + noise."""
    effects = np.asarray(treatment_effects, dtype=float)
    block = rng.normal(0.0, block_sd, size=(n_blocks, 1, 1))
    inter = rng.normal(0.0, interaction_sd, size=(n_blocks, effects.size, 1)) if interaction_sd else 0.0
    noise = rng.normal(0.0, noise_sd, size=(n_blocks, effects.size, replicates))
    return grand_mean + block + effects[None, :, None] + inter + noise


def _rounded(value, decimals: int) -> float:
    return round(float(value), decimals)


# ---------------------------------------------------------------- layout helpers

def _heading(ws, title: str, note: str, column: int = 1) -> None:
    ws.cell(1, column, title).font = _TITLE
    ws.cell(2, column, f"{note} {INVENTED}").font = _NOTE


def _widths(ws, widths: dict[int, float]) -> None:
    for column, width in widths.items():
        ws.column_dimensions[get_column_letter(column)].width = width


def _wide_table(ws, top: int, left: int, caption: str, blocks, treatments, values, number_format: str) -> None:
    """Caption, treatment labels across, block labels down and one value per cell."""
    ws.cell(top, left, caption).font = _BOLD
    for j, name in enumerate(treatments, start=1):
        cell = ws.cell(top, left + j, name)
        cell.font = _BOLD
        cell.alignment = Alignment(horizontal="center", wrap_text=True)
    for i, name in enumerate(blocks, start=1):
        label = ws.cell(top + i, left, name)
        label.font = _BOLD
        if isinstance(name, dt.date):
            label.number_format = "yyyy-mm-dd"
            label.alignment = Alignment(horizontal="left")
        for j, value in enumerate(values[i - 1], start=1):
            ws.cell(top + i, left + j, value).number_format = number_format
    ws.freeze_panes = ws.cell(top + 1, left + 1)


def _long_header(ws, top: int, headers) -> None:
    for j, name in enumerate(headers, start=1):
        ws.cell(top, j, name).font = _BOLD
    ws.freeze_panes = ws.cell(top + 1, 1)


# ---------------------------------------------------------------- the scenarios

def _coating_hardness(wb, ws, sample) -> None:
    """Quality lab: five coatings, six oven batches, one panel per coating and batch."""
    rng = np.random.default_rng(20240611)
    coatings = ["PX-100 (current)", "PX-210", "PX-215", "HX-3", "HX-5"]
    batches = [f"Oven batch {k}" for k in range(1, 7)]
    model = _additive(rng, 78.0, 1.5, [0.0, 2.4, 3.1, -1.8, 0.9], 0.8, len(batches))
    values = [[_rounded(model[i, j, 0], 1) for j in range(len(coatings))] for i in range(len(batches))]
    _heading(ws, "Coating hardness trial: Shore D after a 24 h cure",
             "One steel panel per coating in each oven batch; the coating order on the rack was "
             "randomised within each batch. Analyse B3:G9 (defined name HardnessData).", column=2)
    _wide_table(ws, 3, 2, "Shore D", batches, coatings, values, "0.0")
    _widths(ws, {1: 3, 2: 16, **{c: 17 for c in range(3, 8)}})
    wb.defined_names["HardnessData"] = DefinedName("HardnessData", attr_text="Hardness!$B$3:$G$9")


def _wheat_strips(wb, ws, sample) -> None:
    """Agronomy station: four varieties in five strips, yield and protein; one yield lost."""
    rng = np.random.default_rng(20230815)
    varieties = ["Fennmoor", "Ashgrove", "Tallow Ridge", "Corran"]
    strips = [f"Strip {k}" for k in range(1, 6)]
    yields = _additive(rng, 7.2, 0.4, [0.0, 0.45, -0.3, 0.2], 0.25, len(strips))
    protein = _additive(rng, 12.1, 0.3, [0.0, -0.6, 0.5, -0.2], 0.2, len(strips))
    lost = (2, 1)  # Strip 3, Ashgrove: the yield-monitor file of that plot was corrupted
    _heading(ws, "Wheat variety strip trial: harvest results",
             "One plot per variety in each field strip; varieties randomised within strips. Protein "
             "from hand-cut grain samples; the Strip 3 Ashgrove yield was lost (blank cell).")
    top = 4
    headers = [sample.block, sample.treatment, *sample.responses]
    _long_header(ws, top, headers)
    row = top
    for i, strip in enumerate(strips):
        for j, variety in enumerate(varieties):
            row += 1
            grain = None if (i, j) == lost else _rounded(yields[i, j, 0], 2)
            for col, value in enumerate([strip, variety, grain, _rounded(protein[i, j, 0], 1)], start=1):
                ws.cell(row, col, value)
            ws.cell(row, 3).number_format = "0.00"
            ws.cell(row, 4).number_format = "0.0"
    ref = f"A{top}:{get_column_letter(len(headers))}{row}"
    table = Table(displayName="StripTrial", ref=ref)
    table.tableStyleInfo = TableStyleInfo(name="TableStyleMedium2", showRowStripes=True)
    ws.add_table(table)
    _widths(ws, {1: 12, 2: 16, 3: 14, 4: 13})


def _assay_replicates(wb, ws, sample) -> None:
    """Analytical lab: three preparations, four analyst-days, three replicates each."""
    rng = np.random.default_rng(20220307)
    methods = ["Solid-phase extraction", "Liquid-liquid extraction", "Dilute and filter"]
    days = ["Day 1 (analyst R)", "Day 2 (analyst T)", "Day 3 (analyst R)", "Day 4 (analyst M)"]
    model = _additive(rng, 96.0, 1.5, [0.0, -3.5, 1.5], 1.0, len(days), replicates=3, interaction_sd=0.8)
    _heading(ws, "Spike recovery by sample-preparation method",
             "A reference sample spiked at 50 ng/g was prepared three times by each method on each "
             "analyst-day, in random order within the day; recovery = found / spiked x 100.")
    top = 4
    _long_header(ws, top, [sample.block, sample.treatment, "Replicate", *sample.responses])
    row = top
    for i, day in enumerate(days):
        for j, method in enumerate(methods):
            for k in range(model.shape[2]):
                row += 1
                for col, value in enumerate([day, method, k + 1, _rounded(model[i, j, k], 1)], start=1):
                    ws.cell(row, col, value)
                ws.cell(row, 4).number_format = "0.0"
    _widths(ws, {1: 20, 2: 26, 3: 11, 4: 14})


def _supplier_control(wb, ws, sample) -> None:
    """Moulding plant: current resin supplier (control) against four candidates over eight days."""
    rng = np.random.default_rng(20210402)
    suppliers = [sample.control, "Candidate P", "Candidate Q", "Candidate R", "Candidate S"]
    days = [dt.date(2024, 3, 4) + dt.timedelta(days=d) for d in (0, 1, 2, 3, 4, 7, 8, 9)]
    model = _additive(rng, 8.4, 0.5, [0.0, -0.2, 0.5, -0.9, 0.1], 0.35, len(days))
    values = [[_rounded(model[i, j, 0], 1) for j in range(len(suppliers))] for i in range(len(days))]
    _heading(ws, "Resin supplier qualification: notched impact strength (kJ/m²)",
             "Each production day, test bars were moulded from every supplier's resin in random order; "
             "each value is the mean of five bars. The current supplier is the control.")
    _wide_table(ws, 4, 1, "Production day", days, suppliers, values, "0.0")
    _widths(ws, {1: 16, **{c: 17 for c in range(2, 7)}})


_WRITERS = {
    "coating_hardness.xlsx": _coating_hardness,
    "wheat_strips.xlsx": _wheat_strips,
    "assay_replicates.xlsx": _assay_replicates,
    "supplier_control.xlsx": _supplier_control,
}


# ---------------------------------------------------------------- a workbook with a job sheet

JOB_SAMPLE = "job_sheet_trials.xlsx"
"""Two trials and a job sheet with three analyses, for ``workbook-tools run``."""
MACRO_SAMPLE = "job_sheet_runner.xlsm"
"""The same trials and jobs in a macro-enabled workbook made from xlwings' standalone quickstart."""
JOB_ROWS = (
    # Range, Layout, Block, Treatment, Responses, Compare, Alpha, Control, Prefix
    ("Hardness!B3:G9", "wide", None, None, None, "tukey", 0.05, None, "hard-"),
    ("StripTrial", "long", "Strip", "Variety", "Yield (t/ha); Protein (%)", "holm", 0.1, None, "wheat-"),
    ("HardnessData", None, None, None, None, "dunnett", 0.05, "PX-100 (current)", "dunnett-"),
)
"""The three jobs: Tukey on a wide grid, Holm on two long responses, Dunnett against the current coating."""


def _job_sheet(ws) -> None:
    from workbook_tools.jobs import COLUMNS

    ws.cell(1, 1, "Jobs for workbook-tools").font = _TITLE
    ws.cell(2, 1, "One analysis per row. Run them with: workbook-tools run job_sheet_trials.xlsx "
                  "(or the RunPython macro in Excel); Status, Ran at and Sheets written are filled in.").font = _NOTE
    for j, name in enumerate(COLUMNS, start=1):
        ws.cell(4, j, name).font = _BOLD
    for i, job in enumerate(JOB_ROWS, start=5):
        for j, value in enumerate(job, start=1):
            ws.cell(i, j, value)
    _widths(ws, {1: 18, 2: 9, 3: 9, 4: 11, 5: 26, 6: 10, 7: 7, 8: 18, 9: 10, 10: 40, 11: 20, 12: 40})


def _fill_job_workbook(wb, jobs_ws) -> None:
    """Name ``jobs_ws`` as the job sheet, fill it and add the two trial sheets after it."""
    from workbook_tools.jobs import JOB_SHEET

    jobs_ws.title = JOB_SHEET
    _job_sheet(jobs_ws)
    for filename, writer in (("coating_hardness.xlsx", _coating_hardness), ("wheat_strips.xlsx", _wheat_strips)):
        sample = next(s for s in SAMPLES if s.filename == filename)
        writer(wb, wb.create_sheet(sample.sheet), sample)
    wb.active = 0


def build_job_sample(folder) -> pathlib.Path:
    """Write `JOB_SAMPLE` (the coating and wheat trials and a job sheet) into ``folder``."""
    folder = pathlib.Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    wb = openpyxl.Workbook()
    _fill_job_workbook(wb, wb.active)
    wb.properties.creator = "workbook-tools"
    wb.properties.title = "Two invented trials and a job sheet for workbook-tools run."
    wb.properties.created = dt.datetime(2024, 1, 1)
    path = folder / JOB_SAMPLE
    wb.save(path)
    return path


def build_macro_sample(folder, template) -> pathlib.Path:
    """Write `MACRO_SAMPLE` into ``folder`` from the ``.xlsm`` that ``xlwings quickstart --standalone`` made.

    The template's VBA project (the xlwings module and a ``SampleCall`` macro that runs
    ``main()`` of the Python file named like the workbook) is kept byte for byte; its
    first sheet becomes the job sheet, the trial sheets are added, and its configuration
    sheet is switched on with the worksheet functions as UDF module. A
    ``job_sheet_runner.py`` beside it gives ``main()``.
    """
    folder = pathlib.Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    wb = openpyxl.load_workbook(template, keep_vba=True)
    _fill_job_workbook(wb, wb.worksheets[0])
    if "_xlwings.conf" in wb.sheetnames:
        conf = wb["_xlwings.conf"]
        conf.title = "xlwings.conf"
        for row in conf.iter_rows(min_col=1, max_col=2):
            if row[0].value == "UDF Modules":
                row[1].value = "workbook_tools.excel.functions"
    wb.move_sheet("xlwings.conf", offset=len(wb.sheetnames))
    wb.active = 0
    path = folder / MACRO_SAMPLE
    wb.save(path)
    (folder / (path.stem + ".py")).write_text(
        '"""Called by the SampleCall macro of job_sheet_runner.xlsm: run the job sheet."""\n\n'
        "from workbook_tools.excel.live import run_jobs\n\n\n"
        "def main():\n    run_jobs()\n", encoding="utf-8")
    return path
