"""The headless main job: read a range, analyse each response, write result sheets.

front end (cells in) -> engine -> layout -> writer (cells out); this module is
the openpyxl front end and writer glue used by the command line and the
headless job runner.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path

from openpyxl.utils.cell import coordinate_to_tuple

from workbook_tools import __version__
from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.analysis.result import CAUTIONS, SCHEMA_VERSION, BlockTrialResult
from workbook_tools.layout import Column, Table, sheet_plans
from workbook_tools.sheets import safety
from workbook_tools.sheets.hidden import hidden_warning
from workbook_tools.sheets.reader import TrialTable, read_trials
from workbook_tools.sheets.result_charts import add_result_charts, result_chart_requests
from workbook_tools.sheets.writer import TITLE_FONT, apply_widths, sheet_name, write_sheet, write_table

DEFAULT_PREFIX = "wbt-"
READ_OPTIONS = ("layout", "transposed", "block", "treatment", "responses", "text_numbers", "errors_as_missing")
ENGINE_OPTIONS = ("alpha", "compare", "control", "alternative", "block_model")


@dataclass
class ResponseAnalysis:
    """One analysed response: where it came from, the result, and a fingerprint of its values."""

    source: dict
    result: BlockTrialResult
    values_sha256: str
    result_dict: dict = field(default=None, repr=False)

    def as_dict(self) -> dict:
        """The engine's ``to_dict()`` (computed once)."""
        if self.result_dict is None:
            self.result_dict = self.result.to_dict()
        return self.result_dict


def _ordered_records(table: TrialTable):
    """Observed and missing cells in sheet order, so labels keep the sheet's order."""
    records = [(coordinate_to_tuple(c), b, t, v) for b, t, v, c in
               zip(table.blocks, table.treatments, table.values, table.cells)]
    records += [(coordinate_to_tuple(c), b, t, None) for b, t, c in table.missing_cells]
    records.sort(key=lambda record: record[0])
    return [r[1] for r in records], [r[2] for r in records], [r[3] for r in records]


def values_fingerprint(blocks, treatments, values) -> str:
    """SHA-256 of the analysed (block, treatment, value) triples, in order."""
    payload = json.dumps([[b, t, None if v is None else repr(float(v))] for b, t, v in
                          zip(blocks, treatments, values)], separators=(",", ":"))
    return hashlib.sha256(payload.encode("utf-8")).hexdigest()


def analyse_book(path, range_text: str, **options) -> list[ResponseAnalysis]:
    """Read ``range_text`` of the workbook at ``path`` and analyse every response in it.

    Parameters
    ----------
    path : path-like
        The input workbook; it is only read.
    range_text : str
        ``Sheet!B3:G9``, a defined name or a table name.
    **options
        Reading options (``layout``, ``transposed``, ``block``, ``treatment``,
        ``responses``, ``text_numbers``, ``errors_as_missing``) and engine options
        (``alpha``, ``compare``, ``control``, ``alternative``, ``block_model``).

    Returns
    -------
    list of ResponseAnalysis
    """
    unknown = set(options) - set(READ_OPTIONS) - set(ENGINE_OPTIONS)
    if unknown:
        raise TrialInputError(f"Unknown option(s): {', '.join(sorted(unknown))}.")
    read = {k: v for k, v in options.items() if k in READ_OPTIONS and v is not None}
    engine = {k: v for k, v in options.items() if k in ENGINE_OPTIONS and v is not None}
    tables = read_trials(path, range_text, **read)
    hidden = hidden_warning(path, tables[0].range) if tables else None
    return analyse_tables(tables, Path(path).name, extra_warnings=[hidden] if hidden else (), **engine)


def analyse_tables(tables: list[TrialTable], file_name: str, *, extra_warnings=(), **engine_options
                   ) -> list[ResponseAnalysis]:
    """Analyse each table read from a range: the one loop every front end shares.

    Engine problems are reported at the data range, with the response named;
    ``extra_warnings`` (e.g. about hidden rows) are added to every result.
    """
    from workbook_tools.api import analyze_records

    analyses = []
    for table in tables:
        blocks, treatments, values = _ordered_records(table)
        try:
            result = analyze_records(blocks, treatments, values, **engine_options)
        except TrialInputError as error:
            where = f" (response '{table.response}')" if table.response else ""
            raise TrialInputError(error.message + where, sheet=table.sheet, cell=table.range.a1) from None
        result.warnings.extend(extra_warnings)
        source = {"file": file_name, "sheet": table.sheet, "range": table.range.a1,
                  "response": table.response, "layout": table.layout}
        analyses.append(ResponseAnalysis(source, result, values_fingerprint(blocks, treatments, values)))
    return analyses


def analyses_json(analyses: list[ResponseAnalysis]) -> dict:
    """The command line's JSON: ``to_dict()`` plus ``schema`` and ``source``; several under ``results``."""
    items = [{**a.as_dict(), "schema": SCHEMA_VERSION, "source": dict(a.source, values_sha256=a.values_sha256)}
             for a in analyses]
    if len(items) == 1:
        return items[0]
    return {"schema": SCHEMA_VERSION, "results": items}


def context_lines(analysis: ResponseAnalysis, stamp: str, audit_sheet: str) -> list[str]:
    """The lines under a result sheet's title: what was analysed, the options, the audit sheet."""
    s = analysis.source
    opts = analysis.as_dict()["options"]
    response = f", response '{s['response']}'" if s["response"] else ""
    options = ", ".join(f"{k} {v}" for k, v in opts.items() if v is not None)
    return [
        f"Data: file '{s['file']}', sheet '{s['sheet']}', range {s['range']} ({s['layout']} layout){response}.",
        f"Options: {options}.",
        f"Made by workbook-tools {__version__} at {stamp} UTC; details on sheet '{audit_sheet}'.",
    ]


def audit_table(analyses: list[ResponseAnalysis], input_name: str, stamp: str, run_options: dict) -> Table:
    """The audit block: version, input, fingerprints, time, options, verdicts, cautions."""
    rows = [["Tool", f"workbook-tools {__version__}"], ["Input file", input_name], ["Written (UTC)", stamp]]
    rows += [[f"Run option: {k}", "" if v is None else str(v)] for k, v in run_options.items()]
    for a in analyses:
        s, d = a.source, a.as_dict()
        label = s["response"] or s["range"]
        rows.append([f"[{label}] source", f"'{s['sheet']}'!{s['range']} ({s['layout']})"])
        rows.append([f"[{label}] SHA-256 of analysed values", a.values_sha256])
        rows += [[f"[{label}] option: {k}", "" if v is None else str(v)] for k, v in d["options"].items()]
        for name, check in d["checks"].items():
            outcome = {True: "passed", False: "failed", None: "not available"}[check["passed"]]
            rows.append([f"[{label}] check: {name}", f"{outcome}: {check['verdict']}"])
        rows += [[f"[{label}] warning", w] for w in d["warnings"]]
    rows += [["Caution", c] for c in CAUTIONS]
    return Table("audit", "Audit record", (Column("Item", "text"), Column("Value", "text")), rows)


def _result_sheet_names(analyses, prefix: str, user_sheets: set[str]):
    """(analysis, plan, sheet name) for every result sheet, and the audit sheet's name."""
    taken = set(user_sheets)
    names: list[tuple] = []
    for analysis in analyses:
        suffix = analysis.source["response"] if len(analyses) > 1 else None
        for plan in sheet_plans(analysis.as_dict()):
            name = sheet_name(prefix, plan.family, suffix, taken | {prefix + "audit"})
            taken.add(name)
            names.append((analysis, plan, name))
    audit_name = sheet_name(prefix, "audit", None, set(user_sheets) | {n for *_, n in names})
    return names, audit_name


def _fill_result_sheets(workbook, names, audit_name, analyses, input_name: str, stamp: str,
                        run_options: dict, chart_requests: dict | None = None) -> str:
    """Create and fill every result sheet and the audit sheet; returns the sheet to open on.

    Charts are added to the sheets, or, given ``chart_requests``, listed there by sheet.
    """
    for analysis, plan, name in names:
        ws = workbook.create_sheet(name)
        placements = write_sheet(ws, plan, context_lines(analysis, stamp, audit_name))
        if chart_requests is None:
            add_result_charts(ws, plan.family, placements)
        else:
            chart_requests[name] = result_chart_requests(ws, plan.family, placements)
    audit_ws = workbook.create_sheet(audit_name)
    audit_ws.cell(1, 1, "Audit record of the analysis").font = TITLE_FONT
    widths: dict[int, int] = {}
    write_table(audit_ws, audit_table(analyses, input_name, stamp, run_options), 3, 1, widths)
    apply_widths(audit_ws, widths)
    audit_ws.column_dimensions["B"].width = 100
    first_result = names[0][2]
    for ws in workbook.worksheets:
        ws.sheet_view.tabSelected = ws.title == first_result
    return first_result


def write_analyses(input_path, analyses: list[ResponseAnalysis], *, out=None, in_place: bool = False,
                   prefix: str = DEFAULT_PREFIX, run_options: dict | None = None) -> Path:
    """Write the result sheets of every analysis into a copy of the workbook (or in place).

    The user's own sheets are never touched; sheets this tool wrote before are
    replaced. The file is saved atomically. When the package suits it (see
    :mod:`workbook_tools.sheets.appending`), the user's parts are copied as they are
    and the result sheets added, so saving in place loses nothing; otherwise the
    workbook goes through openpyxl, and saving in place is refused where openpyxl
    would drop something.

    Returns
    -------
    pathlib.Path
        The workbook written.
    """
    import openpyxl

    from workbook_tools.sheets import appending

    package = appending.inspect(input_path, safety.TOOL_PROPERTY)
    source, target, macros = safety.output_target(input_path, out, in_place=in_place, lossless=package is not None)
    stamp = dt.datetime.now(dt.timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "")
    input_name, run_options = Path(input_path).name, run_options or {}
    if package is not None:
        names, audit_name = _result_sheet_names(analyses, prefix, set(package.user_sheets))
        record = [n for *_, n in names] + [audit_name]
        scratch = openpyxl.Workbook()
        scratch.remove(scratch.active)
        requests: dict[str, list] = {}
        first = _fill_result_sheets(scratch, names, audit_name, analyses, input_name, stamp, run_options, requests)
        safety.atomic_write(target, lambda temporary: appending.append_sheets(
            package, scratch, temporary, tool_property=safety.TOOL_PROPERTY, record=record, active=first,
            chart_requests=requests))
        return target

    workbook = safety.load_for_writing(source, macros)
    previous = set(safety.tool_sheet_names(workbook))
    user_sheets = {ws.title for ws in workbook.worksheets} - previous
    names, audit_name = _result_sheet_names(analyses, prefix, user_sheets)
    record = [n for *_, n in names] + [audit_name]
    safety.replace_tool_sheets(workbook, record)
    first = _fill_result_sheets(workbook, names, audit_name, analyses, input_name, stamp, run_options)
    safety.record_tool_sheets(workbook, record)
    workbook.active = workbook.worksheets.index(workbook[first])
    safety.atomic_save(workbook, target)
    return target
