"""The command line end to end: every sample workbook analysed the way a user would.

Checks exit codes, where results go, that the input file is never changed, that
the JSON is the engine's own result on the same cells (read here independently
with openpyxl, not through the project's reader), and that the result sheets
show the JSON's numbers. The helpers that find a titled table on a sheet and
compare it with the JSON are shared with ``tests/test_office_client.py``.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import hashlib
import io
import json
import math
import re
import shutil
import subprocess
import sys
import zipfile
from dataclasses import dataclass
from pathlib import Path

import openpyxl
import pytest
import xlsxwriter

from tests.reference_data import worked_example
from workbook_tools import __version__, analyze_records, cli
from workbook_tools.analysis.result import SCHEMA_VERSION
from workbook_tools.layout import (
    SOURCE_LABELS, anova_table, comparisons_table, means_table, one_way_table, residuals_table, summary_table,
)
from workbook_tools.samples import SAMPLES, SampleWorkbook, build_sample
from workbook_tools.sheets.book import analyse_book, analyses_json

PREFIX = "wbt-"
REL = 1e-12
SAMPLE_IDS = [Path(s.filename).stem for s in SAMPLES]


# ---------------------------------------------------------------- running the command

def run_cli(*argv) -> tuple[int, str, str]:
    """``cli.main`` in this process: (exit code, stdout, stderr)."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = cli.main([str(a) for a in argv])
    return code, out.getvalue(), err.getvalue()


def sample_argv(sample: SampleWorkbook) -> list[str]:
    """The ``analyze`` options sample_workbooks/README.md gives for a sample (Dunnett when it has a control)."""
    argv = ["--range", sample.range, "--layout", sample.layout]
    if sample.layout == "long":
        argv += ["--block", sample.block, "--treatment", sample.treatment]
        for response in sample.responses:
            argv += ["--response", response]
    if sample.control:
        argv += ["--compare", "dunnett", "--control", sample.control]
    return argv


def engine_options(sample: SampleWorkbook) -> dict:
    """The engine options the command line uses for `sample_argv` (its defaults spelled out)."""
    options = {"alpha": 0.05, "compare": "tukey", "alternative": "two-sided", "block_model": "random"}
    if sample.control:
        options.update(compare="dunnett", control=sample.control)
    return options


def book_options(sample: SampleWorkbook) -> dict:
    """`analyse_book` keywords equivalent to `sample_argv`."""
    read = {"layout": sample.layout, "block": sample.block, "treatment": sample.treatment,
            "responses": list(sample.responses) if sample.responses else None}
    return {**read, **engine_options(sample)}


def digest(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def reject(constant: str):
    raise ValueError(f"JSON holds {constant}, which is not JSON")


def load_json(text: str) -> dict:
    return json.loads(text, parse_constant=reject)


def as_json(data) -> dict:
    """``data`` as it comes back from JSON text (tuples become lists)."""
    return load_json(json.dumps(data, allow_nan=False))


def sheet_values(path: Path) -> dict[str, list[tuple]]:
    """Every sheet's cell values, by sheet name, in workbook order."""
    wb = openpyxl.load_workbook(path)
    return {ws.title: list(ws.iter_rows(values_only=True)) for ws in wb.worksheets}


def results_of(data: dict) -> list[dict]:
    """The per-response items of the command's JSON (one response: the document itself)."""
    return data["results"] if "results" in data else [data]


# ---------------------------------------------------------------- reading the trial independently

@dataclass(frozen=True)
class Records:
    response: str | None
    blocks: list[str]
    treatments: list[str]
    values: list


def _range_cells(book: Path, range_text: str) -> tuple[str, str]:
    """(sheet, ``A4:D24``) of ``Sheet!A4:D24``, ``'It''s'!A4:D24`` or a table name."""
    wb = openpyxl.load_workbook(book)
    for ws in wb.worksheets:
        if range_text in ws.tables:
            return ws.title, ws.tables[range_text].ref
    sheet, cells = range_text.rsplit("!", 1)
    if sheet.startswith("'"):
        sheet = sheet[1:-1].replace("''", "'")
    return sheet, cells.replace("$", "")


def _label(value) -> str:
    if isinstance(value, dt.datetime):
        return value.date().isoformat()
    if isinstance(value, (int, float)):
        return str(int(value)) if float(value).is_integer() else repr(value)
    return str(value).strip()


def read_independently(book: Path, sample: SampleWorkbook) -> tuple[str, str, list[Records]]:
    """The sample's trial read with plain openpyxl: (sheet, cells, one Records per response)."""
    sheet, cells = _range_cells(book, sample.range)
    rows = [[c.value for c in row] for row in openpyxl.load_workbook(book, data_only=True)[sheet][cells]]
    if sample.layout == "wide":
        treatments = [_label(v) for v in rows[0][1:]]
        triples = [(_label(row[0]), t, v) for row in rows[1:] for t, v in zip(treatments, row[1:])]
        blocks, trts, values = map(list, zip(*triples))
        return sheet, cells, [Records(None, blocks, trts, values)]
    header = [_label(v) for v in rows[0]]
    b, t = header.index(sample.block), header.index(sample.treatment)
    blocks, trts = [_label(r[b]) for r in rows[1:]], [_label(r[t]) for r in rows[1:]]
    return sheet, cells, [Records(name, blocks, trts, [r[header.index(name)] for r in rows[1:]])
                          for name in sample.responses]


def assert_engine_json(data: dict, book: Path, sample: SampleWorkbook) -> None:
    """``data`` is the engine's ``to_dict()`` on the same cells, plus ``schema`` and ``source``."""
    sheet, cells, tables = read_independently(book, sample)
    if len(tables) > 1:
        assert set(data) == {"schema", "results"} and data["schema"] == SCHEMA_VERSION
    items = results_of(data)
    assert len(items) == len(tables)
    for item, records in zip(items, tables):
        source = item["source"]
        assert {k: source[k] for k in ("file", "sheet", "range", "response", "layout")} == {
            "file": book.name, "sheet": sheet, "range": cells, "response": records.response, "layout": sample.layout}
        assert re.fullmatch("[0-9a-f]{64}", source["values_sha256"])
        engine = analyze_records(records.blocks, records.treatments, records.values, **engine_options(sample))
        assert {k: v for k, v in item.items() if k != "source"} == {**as_json(engine.to_dict()),
                                                                    "schema": SCHEMA_VERSION}
    assert len({item["source"]["values_sha256"] for item in items}) == len(items)


# ---------------------------------------------------------------- finding tables on result sheets

def _at(grid, r: int, c: int):
    if r < len(grid) and c < len(grid[r]):
        return grid[r][c]
    return None


def _blank(value) -> bool:
    return value is None or value == ""


def _shown_tolerance(text: str) -> float:
    """Half a unit of the last digit ``text`` shows (``1.23E-05`` -> 5e-8)."""
    mantissa, _, exponent = text.upper().partition("E")
    decimals = len(mantissa.partition(".")[2])
    return 0.5 * 10.0 ** (int(exponent or 0) - decimals)


def same_value(shown, expected, *, as_shown: bool = False) -> bool:
    """Does a cell (a value, or CSV text) show ``expected``? Numbers to 1e-12 relative,
    or, ``as_shown``, to the digits displayed (p-values below 1e-4 may read ``< 0.0001``)."""
    if expected is None:
        return _blank(shown)
    if isinstance(expected, str):
        return str(shown) == expected
    if isinstance(shown, str):
        if as_shown and shown == "< 0.0001":
            return expected < 1e-4
        if as_shown:
            return abs(float(shown) - expected) <= _shown_tolerance(shown) * (1 + 1e-9)
        shown = float(shown)
    return isinstance(shown, (int, float)) and math.isclose(shown, expected, rel_tol=REL)


def find_table(grid, title: str) -> tuple[int, int]:
    """Row and column (0-based) of the cell holding a table's title."""
    places = [(r, c) for r, row in enumerate(grid) for c, value in enumerate(row) if value == title]
    assert len(places) == 1, f"table {title!r} found {len(places)} times"
    return places[0]


def assert_table(grid, table, rows: list[list], *, as_shown: bool = False) -> None:
    """The titled ``table`` on ``grid`` has the layout's headers and shows ``rows`` (leading columns)."""
    r, c = find_table(grid, table.title)
    assert [_at(grid, r + 1, c + j) for j in range(len(table.headers))] == table.headers
    for i, expected_row in enumerate(rows):
        for j, expected in enumerate(expected_row):
            shown = _at(grid, r + 2 + i, c + j)
            assert same_value(shown, expected, as_shown=as_shown), \
                f"{table.title}: row {i + 1}, column {table.headers[j]!r} shows {shown!r}, expected {expected!r}"
    after = _at(grid, r + 2 + len(rows), c)
    assert _blank(after) or after == table.note, f"{table.title}: more rows than the result holds"


def _flag(value) -> str:
    return {True: "yes", False: "no", None: ""}[value]


def expected_tables(d: dict) -> dict[str, list[tuple]]:
    """Per sheet family: (layout table for title and headers, rows it must show, built from the JSON)."""
    def anova_rows(rows):
        return [[SOURCE_LABELS[x["source"]], x["df"], x["ss"], x["ms"], x["f"], x["p"]] for x in rows]

    s, summary = d["summary"], summary_table(d)
    keys = ("n_observations", "n_blocks", "n_treatments", "model", "grand_mean", "mse", "root_mse", "error_df",
            "cv_percent", "r_squared", "sed", "lsd")
    figures = [[row[0], s[key]] for row, key in zip(summary.rows, keys)]  # labels: the layout's
    means = [[m["treatment"], m["n"], m["mean"], m["adjusted_mean"], m["se"], m["ci_low"], m["ci_high"]]
             for m in d["means"]]
    pairs = [[p["first"], p["second"], p["difference"], p["se"], p["statistic"], p["p"], p["ci_low"],
              p["ci_high"], _flag(p["significant"])] for p in d["comparisons"]["pairs"]]
    residuals = [[x["block"], x["treatment"], x["observed"], x["fitted"], x["residual"], x["standardized"],
                  x["leverage"]] for x in d["residuals"]]
    return {
        "anova": [(anova_table(d), anova_rows(d["anova"])), (one_way_table(d), anova_rows(d["one_way"])),
                  (summary, figures)],
        "means": [(means_table(d), means), (comparisons_table(d), pairs)],
        "residuals": [(residuals_table(d), residuals)],
    }


def assert_sheets_show(sheets: dict[str, list], data: dict, *, as_shown: bool = False) -> None:
    """Every response's result sheets (grids by sheet name, workbook order) show the JSON's numbers."""
    items = results_of(data)
    for index, item in enumerate(items):
        for family, tables in expected_tables(item).items():
            names = [name for name in sheets if name.startswith(PREFIX + family)]
            assert len(names) == len(items), f"{family}: {names}"
            grid = sheets[names[index]]
            response = item["source"]["response"]
            if response:
                assert f"response '{response}'" in str(_at(grid, 1, 0))
            for table, rows in tables:
                assert_table(grid, table, rows, as_shown=as_shown)


def workbook_grids(path: Path) -> dict[str, list]:
    return {name: [list(row) for row in rows] for name, rows in sheet_values(path).items()}


# ---------------------------------------------------------------- every sample, analysed once

@dataclass(frozen=True)
class SampleRun:
    sample: SampleWorkbook
    book: Path
    digest_before: str
    values_before: dict
    json_path: Path
    code: int
    stdout: str
    stderr: str

    @property
    def output(self) -> Path:
        return self.book.with_name(f"{self.book.stem}-analysed.xlsx")


def analyse_sample(sample: SampleWorkbook, folder: Path, *extra) -> SampleRun:
    book = build_sample(sample, folder)
    digest_before, values_before = digest(book), sheet_values(book)
    json_path = folder / "result.json"
    code, out, err = run_cli("analyze", book, *sample_argv(sample), "--json", json_path, *extra)
    return SampleRun(sample, book, digest_before, values_before, json_path, code, out, err)


@pytest.fixture(scope="module", params=SAMPLES, ids=SAMPLE_IDS)
def run(request, tmp_path_factory) -> SampleRun:
    sample = request.param
    return analyse_sample(sample, tmp_path_factory.mktemp(Path(sample.filename).stem))


def test_analyze_exits_0_and_writes_beside_the_input(run):
    assert run.code == 0, run.stderr
    assert run.output.is_file()
    assert str(run.output) in run.stdout
    assert run.stderr == ""


def test_the_input_file_is_byte_identical_afterwards(run):
    assert digest(run.book) == run.digest_before


def test_result_sheets_follow_the_untouched_user_sheets(run):
    after = sheet_values(run.output)
    user = list(run.values_before)
    assert list(after)[: len(user)] == user
    for name in user:
        assert after[name] == run.values_before[name], f"sheet {name!r} changed"
    added = list(after)[len(user):]
    assert added and all(name.startswith(PREFIX) for name in added)
    n_responses = len(run.sample.responses or (None,))
    for family in ("anova", "means", "residuals", "checks"):
        assert sum(name.startswith(PREFIX + family) for name in added) == n_responses
    assert added[-1] == PREFIX + "audit"


def test_json_file_is_what_analyse_book_returns(run):
    data = load_json(run.json_path.read_text(encoding="utf-8"))
    expected = analyses_json(analyse_book(run.book, run.sample.range, **book_options(run.sample)))
    assert data == as_json(expected)


def test_json_is_the_engine_result_on_the_same_cells(run):
    assert_engine_json(load_json(run.json_path.read_text(encoding="utf-8")), run.book, run.sample)


def test_result_sheets_show_the_json_numbers(run):
    assert_sheets_show(workbook_grids(run.output), load_json(run.json_path.read_text(encoding="utf-8")))


def test_json_to_stdout_with_no_workbook(tmp_path):
    wheat = next(s for s in SAMPLES if s.responses and len(s.responses) > 1)
    book = build_sample(wheat, tmp_path)
    code, out, err = run_cli("analyze", book, *sample_argv(wheat), "--json", "-", "--no-workbook")
    assert code == 0, err
    data = load_json(out)  # nothing but the JSON goes to stdout
    assert len(data["results"]) == len(wheat.responses)
    assert_engine_json(data, book, wheat)
    assert sorted(p.name for p in tmp_path.iterdir()) == [book.name]


# ---------------------------------------------------------------- files written by two libraries

# Montgomery, Design and Analysis of Experiments, Example 4.1 (tests/data/SOURCES.md): extrusion
# pressure across, resin batch down.
def _montgomery_grid() -> tuple[list, list, list[list[float]]]:
    treatments, blocks, values = worked_example("E1_vascular_graft_montgomery_ex4_1.csv")
    pressures = list(dict.fromkeys(treatments))
    batches = list(dict.fromkeys(blocks))
    cell = {(b, t): v for t, b, v in zip(treatments, blocks, values)}
    return [int(p) for p in pressures], [int(b) for b in batches], [[cell[b, p] for p in pressures] for b in batches]


def _write_with_openpyxl(path: Path, sheet: str, header: list, rows: list[list]) -> None:
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = sheet
    for row in [header, *rows]:
        ws.append(row)
    wb.save(path)


def _write_with_xlsxwriter(path: Path, sheet: str, header: list, rows: list[list]) -> None:
    wb = xlsxwriter.Workbook(path)
    ws = wb.add_worksheet(sheet)
    for i, row in enumerate([header, *rows]):
        ws.write_row(i, 0, row)
    wb.close()


def test_grids_written_by_openpyxl_and_xlsxwriter_give_the_published_anova(tmp_path):
    pressures, batches, grid = _montgomery_grid()
    header, rows = ["Batch", *pressures], [[b, *row] for b, row in zip(batches, grid)]
    results = []
    for writer in (_write_with_openpyxl, _write_with_xlsxwriter):
        book = tmp_path / f"{writer.__name__}.xlsx"
        writer(book, "Graft", header, rows)
        before = digest(book)
        json_path = tmp_path / f"{writer.__name__}.json"
        code, _, err = run_cli("analyze", book, "--range", "Graft!A1:E7", "--layout", "wide", "--json", json_path)
        assert code == 0, err
        assert digest(book) == before
        data = load_json(json_path.read_text(encoding="utf-8"))
        assert_sheets_show(workbook_grids(book.with_name(f"{book.stem}-analysed.xlsx")), data)
        assert data.pop("source")["file"] == book.name
        results.append(data)
    assert results[0] == results[1]
    rows = {r["source"]: r for r in results[0]["anova"]}
    # Published (Montgomery Ex. 4.1): pressure SS 178.17 on 3 df, batch SS 192.25 on 5 df,
    # error SS 109.89 on 15 df, F 8.11, p 0.0019.
    assert (rows["treatment"]["df"], rows["block"]["df"], rows["error"]["df"]) == (3, 5, 15)
    assert [round(rows[s]["ss"], 2) for s in ("treatment", "block", "error")] == [178.17, 192.25, 109.89]
    assert round(rows["treatment"]["f"], 2) == 8.11 and round(rows["treatment"]["p"], 4) == 0.0019
    assert results[0]["design"]["treatments"] == [str(p) for p in pressures]


# ---------------------------------------------------------------- writing again, in place

def _coating(folder: Path) -> tuple[SampleWorkbook, Path]:
    sample = SAMPLES[0]
    return sample, build_sample(sample, folder)


def test_rerun_to_the_same_out_replaces_only_the_tool_sheets(tmp_path):
    sample, book = _coating(tmp_path)
    out = tmp_path / "results" / "trial results.xlsx"
    out.parent.mkdir()
    names = []
    for _ in range(2):
        code, stdout, err = run_cli("analyze", book, *sample_argv(sample), "--out", out)
        assert code == 0, err
        assert str(out) in stdout
        names.append(list(sheet_values(out)))
    assert names[0] == names[1]
    assert not book.with_name(f"{book.stem}-analysed.xlsx").exists()
    user = sheet_values(book)
    assert {k: v for k, v in sheet_values(out).items() if k in user} == user


def test_in_place_on_a_plain_workbook_keeps_the_user_sheets(tmp_path):
    sample, book = _coating(tmp_path)
    user = sheet_values(book)
    counts = []
    for _ in range(2):
        code, _, err = run_cli("analyze", book, *sample_argv(sample), "--in-place", "--prefix", "res-")
        assert code == 0, err
        after = sheet_values(book)
        counts.append(len(after))
        assert {k: v for k, v in after.items() if k in user} == user
        assert all(name.startswith("res-") for name in after if name not in user)
    assert counts[0] == counts[1] > len(user)
    assert sorted(p.name for p in tmp_path.iterdir()) == [book.name]


def _graft_book_with_textbox(tmp_path: Path) -> Path:
    pressures, batches, grid = _montgomery_grid()
    book = tmp_path / "with textbox.xlsx"
    wb = xlsxwriter.Workbook(book)
    ws = wb.add_worksheet("Graft")
    for i, row in enumerate([["Batch", *pressures], *[[b, *r] for b, r in zip(batches, grid)]]):
        ws.write_row(i, 0, row)
    ws.insert_textbox("G2", "Batches are blocks.")
    wb.close()
    return book


def test_in_place_on_a_workbook_with_a_textbox_keeps_it(tmp_path):
    book = _graft_book_with_textbox(tmp_path)
    code, _, err = run_cli("analyze", book, "--range", "Graft!A1:E7", "--layout", "wide", "--in-place")
    assert code == 0, err
    with zipfile.ZipFile(book) as package:
        assert b"Batches are blocks." in package.read("xl/drawings/drawing1.xml")
    assert sorted(p.name for p in tmp_path.iterdir()) == [book.name]


def test_in_place_on_a_workbook_with_a_textbox_is_refused_on_the_openpyxl_route(tmp_path, monkeypatch):
    monkeypatch.setattr("workbook_tools.sheets.appending.inspect", lambda *args: None)
    book = _graft_book_with_textbox(tmp_path)
    before = digest(book)
    code, _, err = run_cli("analyze", book, "--range", "Graft!A1:E7", "--layout", "wide", "--in-place")
    assert code == 2
    assert "text box" in err and "Traceback" not in err
    assert digest(book) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == [book.name]


def test_a_user_sheet_with_a_result_sheet_name_is_kept_and_results_go_beside_it(tmp_path):
    sample, book = _coating(tmp_path)
    wb = openpyxl.load_workbook(book)
    wb.create_sheet(PREFIX + "anova")["A1"] = "my own notes"
    wb.save(book)
    out = book.with_name(f"{book.stem}-analysed.xlsx")
    title = anova_table(analyse_book(book, sample.range, **book_options(sample))[0].as_dict()).title
    for _ in range(2):  # the second run must not take the user's sheet for one of its own
        code, _, err = run_cli("analyze", book, *sample_argv(sample), "--out", out)
        assert code == 0, err
        after = openpyxl.load_workbook(out)
        assert after[PREFIX + "anova"]["A1"].value == "my own notes"
        anova = [n for n in after.sheetnames if n.startswith(PREFIX + "anova") and n != PREFIX + "anova"]
        assert len(anova) == 1
        assert find_table([list(r) for r in after[anova[0]].iter_rows(values_only=True)], title)


# ---------------------------------------------------------------- input problems: exit 2, nothing written

@pytest.mark.parametrize("value, cell, words", [
    ("abc", "C5", "abc"),
    ("=C4*2", "D6", "formula"),
    ("#N/A", "E7", "#N/A"),
], ids=["text", "uncalculated-formula", "error-value"])
def test_a_bad_data_cell_is_named_and_nothing_is_written(tmp_path, value, cell, words):
    sample, book = _coating(tmp_path)
    wb = openpyxl.load_workbook(book)
    wb[sample.sheet][cell] = value
    wb.save(book)
    before = digest(book)
    code, out, err = run_cli("analyze", book, *sample_argv(sample), "--json", tmp_path / "r.json")
    assert code == 2
    assert f"'{sample.sheet}'" in err and re.search(rf"\b{cell}\b", err), err
    assert words.lower() in err.lower()
    assert err.count("\n") == 1 and "Traceback" not in err
    assert out == ""
    assert digest(book) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == [book.name]


def test_unknown_sheet_missing_file_folder_and_text_file_are_input_problems(tmp_path):
    sample, book = _coating(tmp_path)
    text = tmp_path / "notes.xlsx"
    text.write_text("not a workbook\n", encoding="utf-8")
    cases = [
        (book, "Nosuch!B3:G9", "Nosuch"),
        (tmp_path / "absent.xlsx", sample.range, "absent.xlsx"),
        (tmp_path, sample.range, tmp_path.name),
        (text, sample.range, text.name),
    ]
    for path, range_text, named in cases:
        code, _, err = run_cli("analyze", path, "--range", range_text)
        assert code == 2, (path, range_text, err)
        assert named in err and "Traceback" not in err and err.count("\n") == 1
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([book.name, text.name])


@pytest.mark.parametrize("json_target", ["input", "output"])
def test_json_over_the_input_or_the_result_workbook_is_refused(tmp_path, json_target):
    sample, book = _coating(tmp_path)
    out = tmp_path / "results.xlsx"
    before = digest(book)
    code, _, err = run_cli("analyze", book, *sample_argv(sample), "--out", out,
                           "--json", book if json_target == "input" else out)
    assert digest(book) == before
    assert code == 2, err
    assert not out.exists() or openpyxl.load_workbook(out)


def test_a_prefix_a_sheet_name_cannot_hold_is_an_input_problem(tmp_path):
    sample, book = _coating(tmp_path)
    code, _, err = run_cli("analyze", book, *sample_argv(sample), "--prefix", "wbt:")
    assert code == 2, err
    assert "prefix" in err and "Traceback" not in err


def test_an_internal_error_exits_1_without_a_traceback(tmp_path, monkeypatch):
    from workbook_tools.sheets import book as book_module

    def broken(*args, **kwargs):
        raise RuntimeError("broken on purpose")

    monkeypatch.setattr(book_module, "analyse_book", broken)
    sample, book = _coating(tmp_path)
    code, _, err = run_cli("analyze", book, *sample_argv(sample))
    assert code == 1
    assert "broken on purpose" in err and "--debug" in err and "Traceback" not in err


# ---------------------------------------------------------------- demo and real processes

def test_demo_writes_the_result_workbook_and_says_where(tmp_path):
    folder = tmp_path / "demo"
    code, out, err = run_cli("demo", "--folder", folder)
    assert code == 0, err
    results = [p for p in folder.iterdir() if p.name.endswith("-analysed.xlsx")]
    assert len(results) == 1
    assert str(results[0]) in out
    assert any(name.startswith(PREFIX) for name in openpyxl.load_workbook(results[0]).sheetnames)


def _command() -> list[str]:
    script = shutil.which("workbook-tools", path=str(Path(sys.executable).parent))
    return [script] if script else [sys.executable, "-m", "workbook_tools.cli"]


@pytest.mark.parametrize("command", [_command(), [sys.executable, "-m", "workbook_tools.cli"]],
                         ids=["script", "module"])
def test_version_in_a_real_process(command):
    done = subprocess.run([*command, "--version"], capture_output=True, text=True, timeout=60)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == f"workbook-tools {__version__}"


def test_analyze_in_a_real_process(tmp_path):
    sample = SAMPLES[-1]
    book = build_sample(sample, tmp_path)
    done = subprocess.run([*_command(), "analyze", str(book), *sample_argv(sample), "--json", "-"],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert "Warning" not in done.stderr, done.stderr  # no Python warnings reach the user
    assert_engine_json(load_json(done.stdout), book, sample)
    assert book.with_name(f"{book.stem}-analysed.xlsx").is_file()
    bad = subprocess.run([*_command(), "analyze", str(tmp_path / "absent.xlsx"), "--range", sample.range],
                         capture_output=True, text=True, timeout=120)
    assert bad.returncode == 2 and "Traceback" not in bad.stderr


def test_the_command_line_offers_the_engine_methods_and_default():
    # cli keeps its own copy so that starting it does not import the engine; they must agree
    from workbook_tools import cli
    from workbook_tools.analysis import compare

    assert cli.COMPARE_METHODS == compare.METHODS
    assert cli.DEFAULT_COMPARE == compare.DEFAULT_METHOD
