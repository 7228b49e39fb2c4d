"""Result -> titled two-dimensional tables: the one layout every front end uses.

The sheet writer, the worksheet functions and the job runner all show a
result through these tables, so a header or a row label is written in exactly
one place. Each column carries a *kind* that maps to one number format.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

SOURCE_LABELS = {
    "treatment": "Treatments",
    "block": "Blocks",
    "interaction": "Treatment x block",
    "error": "Error",
    "total": "Total",
}

# kind -> spreadsheet number format; "auto" is chosen from the column's values
P_FORMAT = '[<0.0001]"< 0.0001";0.0000'
NUMBER_FORMATS = {
    "text": "@",
    "count": "0",
    "p": P_FORMAT,
    "ratio": "0.000",
    "percent": "0.00",
    "flag": "General",
    "auto": None,
}


@dataclass(frozen=True)
class Column:
    """A table column: its header and the kind of value it holds."""

    header: str
    kind: str = "auto"


@dataclass(frozen=True)
class Table:
    """A titled table: a header row and data rows of plain values."""

    key: str
    title: str
    columns: tuple[Column, ...]
    rows: list[list]
    note: str | None = None

    @property
    def headers(self) -> list[str]:
        return [c.header for c in self.columns]

    def grid(self) -> list[list]:
        """Header row followed by the data rows, as worksheet functions return them."""
        return [self.headers] + [list(row) for row in self.rows]

    def number_formats(self) -> list[str]:
        """One number format per column, the "auto" ones chosen from the values."""
        formats = []
        for j, column in enumerate(self.columns):
            fixed = NUMBER_FORMATS.get(column.kind)
            formats.append(fixed if fixed is not None else auto_format([row[j] for row in self.rows]))
        return formats


def auto_format(values) -> str:
    """A fixed-decimal format showing about five significant digits of the largest value."""
    numbers = [abs(v) for v in values if isinstance(v, (int, float)) and not isinstance(v, bool)
               and v is not None and math.isfinite(v) and v != 0]
    if not numbers:
        return "0.0000"
    largest = max(numbers)
    if largest >= 1e9 or largest < 1e-4:
        return "0.000E+00"
    decimals = min(8, max(0, 4 - int(math.floor(math.log10(largest)))))
    return "0." + "0" * decimals if decimals else "0"


def _anova_table(key: str, title: str, rows: list[dict], note: str | None = None) -> Table:
    columns = (Column("Source", "text"), Column("df", "count"), Column("Sum of squares"),
               Column("Mean square"), Column("F", "ratio"), Column("p-value", "p"))
    body = [[SOURCE_LABELS.get(r["source"], r["source"]), r["df"], r["ss"], r["ms"], r["f"], r["p"]] for r in rows]
    return Table(key, title, columns, body, note)


def anova_table(result: dict) -> Table:
    """The blocked analysis of variance."""
    summary = result["summary"]
    note = f"Treatments are tested against: {summary['treatment_error_reason']}."
    return _anova_table("anova", "Analysis of variance with blocks", result["anova"], note)


def one_way_table(result: dict) -> Table:
    """The same data analysed without blocks, for comparison."""
    return _anova_table(
        "one_way", "The same data without blocks (one-way analysis)", result["one_way"],
        "Shown only to judge what blocking gained; the blocked analysis above is the one to report.",
    )


def summary_table(result: dict) -> Table:
    """Headline figures: grand mean, root MSE, CV, R squared, SED, LSD."""
    s = result["summary"]
    alpha = result["options"]["alpha"]
    rows = [
        ["Observations", s["n_observations"]],
        ["Blocks", s["n_blocks"]],
        ["Treatments", s["n_treatments"]],
        ["Model", s["model"]],
        ["Grand mean", s["grand_mean"]],
        ["Error mean square", s["mse"]],
        ["Root mean square error", s["root_mse"]],
        ["Error df", s["error_df"]],
        ["Coefficient of variation (CV %)", s["cv_percent"]],
        ["R squared", s["r_squared"]],
        ["Standard error of a difference (SED)", s["sed"]],
        [f"Least significant difference (LSD, alpha {alpha:g})", s["lsd"]],
    ]
    return Table("summary", "Headline figures", (Column("Figure", "text"), Column("Value")), rows,
                 "SED and LSD are blank when replication differs between treatments; see the pairwise table.")


def efficiency_table(result: dict) -> Table:
    """What blocking gained."""
    e = result["efficiency"]
    rel = e["relative"]
    if rel is None:
        reading = "Not available: the blocked error mean square is zero."
    elif rel > 1:
        reading = (f"Blocking paid off: a trial without blocks would have needed about {rel:.2f} times as many "
                   "runs for the same precision.")
    else:
        reading = ("Blocking gained nothing here: the blocks did not differ more than the plots within them. "
                   "Keep blocking if the blocks reflect real nuisance variation in other runs.")
    rows = [
        ["Relative efficiency (with df correction)", rel],
        ["Relative efficiency (ratio of error mean squares)", e["relative_uncorrected"]],
        ["Error df with blocks", e["error_df_blocked"]],
        ["Error df without blocks", e["error_df_unblocked"]],
    ]
    return Table("efficiency", "What blocking gained", (Column("Figure", "text"), Column("Value", "ratio")), rows,
                 reading)


def means_table(result: dict) -> Table:
    """Treatment means with SE, interval and letter group."""
    alpha = result["options"]["alpha"]
    groups = result["comparisons"]["groups"] or {}
    level = f"{100 * (1 - alpha):g}%"
    columns = (Column("Treatment", "text"), Column("n", "count"), Column("Mean of observations"),
               Column("Adjusted mean"), Column("Standard error"), Column(f"{level} CI low"),
               Column(f"{level} CI high"), Column("CI half-width"), Column("Group", "text"))
    rows = [[m["treatment"], m["n"], m["mean"], m["adjusted_mean"], m["se"], m["ci_low"], m["ci_high"],
             None if m["ci_high"] is None else m["ci_high"] - m["adjusted_mean"],
             groups.get(m["treatment"], "")] for m in result["means"]]
    note = ("Adjusted means are least-squares means averaged over all blocks; they equal the plain means when "
            "every block holds every treatment equally often.")
    if groups:
        note += " Treatments sharing a letter do not differ significantly."
    return Table("means", "Treatment means", columns, rows, note)


def comparisons_table(result: dict) -> Table:
    """Pairwise differences with adjusted p-values and intervals."""
    c = result["comparisons"]
    level = f"{100 * (1 - c['alpha']):g}%"
    columns = (Column("First", "text"), Column("Second", "text"), Column("Difference"),
               Column("Standard error"), Column("t", "ratio"), Column("Adjusted p-value", "p"),
               Column(f"{level} CI low"), Column(f"{level} CI high"), Column("Significant", "text"))
    rows = [[p["first"], p["second"], p["difference"], p["se"], p["statistic"], p["p"], p["ci_low"],
             p["ci_high"], _yes_no(p["significant"])] for p in c["pairs"]]
    note_parts = [*c["notes"]]
    if c["critical_difference"] is not None:
        note_parts.append(f"Critical difference: {c['critical_difference']:.6g}.")
    return Table("comparisons", f"Pairwise comparisons: {c['title']}, alpha {c['alpha']:g}", columns, rows,
                 " ".join(note_parts) or None)


def _yes_no(flag) -> str:
    return "" if flag is None else ("yes" if flag else "no")


def missing_table(result: dict) -> Table:
    """Missing cells and their least-squares (missing-plot) estimates."""
    columns = (Column("Block", "text"), Column("Treatment", "text"), Column("Estimate"))
    rows = [[m["block"], m["treatment"], m["estimate"]] for m in result["missing"]]
    return Table("missing", "Missing cells", columns, rows,
                 "Each estimate is the value the fitted model predicts; it is never used as data.")


def residuals_table(result: dict) -> Table:
    """Per-observation fitted values, residuals, standardized residuals and leverage."""
    columns = (Column("Block", "text"), Column("Treatment", "text"), Column("Observed"), Column("Fitted"),
               Column("Residual"), Column("Standardized residual", "ratio"), Column("Leverage", "ratio"),
               Column("Possible outlier", "text"))
    rows = [[r["block"], r["treatment"], r["observed"], r["fitted"], r["residual"], r["standardized"],
             r["leverage"], "yes" if r["outlier"] else ""] for r in result["residuals"]]
    return Table("residuals", "Residuals", columns, rows,
                 "Standardized residuals beyond +/-3 are flagged as possible outliers (common practice).")


def qq_table(result: dict) -> Table:
    """Points of the normal Q-Q plot of standardized residuals."""
    qq = result["qq"]
    rows = [[x, y] for x, y in zip(qq["theoretical"], qq["sample"])]
    return Table("qq", "Normal Q-Q points", (Column("Normal quantile", "ratio"),
                                             Column("Standardized residual", "ratio")), rows,
                 f"Plotting position: {qq['plotting_position']}.")


def qq_line_table(result: dict) -> Table:
    """Two points of the Q-Q reference line (through the quartiles), spanning the plot."""
    qq = result["qq"]
    line = qq["reference_line"]
    xs = [x for x in qq["theoretical"] if x is not None]
    ends = [min(xs), max(xs)] if xs else [0.0, 0.0]
    rows = [[x, line["intercept"] + line["slope"] * x] for x in ends]
    return Table("qq_line", "Q-Q reference line", (Column("Normal quantile", "ratio"),
                                                   Column("Line", "ratio")), rows)


CHECK_TITLES = {
    "normality": "Normal residuals",
    "equal_variance": "Equal variance across treatments",
    "additivity": "Additive blocks and treatments",
}


def checks_table(result: dict) -> Table:
    """Assumption checks with plain-language verdicts, and the Friedman test."""
    columns = (Column("Assumption", "text"), Column("Method", "text"), Column("Statistic", "ratio"),
               Column("df", "text"), Column("p-value", "p"), Column("Outcome", "text"), Column("Verdict", "text"))
    rows = []
    for name, check in result["checks"].items():
        df = check.get("df")
        outcome = {True: "passed", False: "failed", None: "not available"}[check["passed"]]
        rows.append([CHECK_TITLES.get(name, name), check["method"], check["statistic"],
                     "" if not df else ", ".join(str(int(d)) for d in df), check["p"], outcome, check["verdict"]])
    friedman = result["friedman"]
    if friedman is not None:
        rows.append(["Rank-based treatment test", friedman["method"], friedman["statistic"], str(friedman["df"]),
                     friedman["p"], "", friedman["verdict"]])
    return Table("checks", "Can the result be trusted? Assumption checks", columns, rows,
                 "A failed check means p-values and intervals may be wrong; see the cautions below.")


def friedman_table(result: dict) -> Table:
    """The Friedman test and Kendall's W as a table of figures."""
    f = result["friedman"] or {}
    rows = [["Friedman chi-square", f.get("statistic")], ["df", f.get("df")], ["p-value", f.get("p")],
            ["Kendall's W", f.get("kendall_w")]]
    verdict = f.get("verdict") or ("Not computed: the Friedman test needs every block complete, "
                                   "and this trial has missing cells.")
    return Table("friedman", "Rank-based test (Friedman)", (Column("Figure", "text"), Column("Value", "ratio")), rows,
                 verdict)


def notes_table(result: dict) -> Table:
    """Warnings of this analysis followed by the standing cautions."""
    rows = [["Warning", w] for w in result["warnings"]] + [["Caution", c] for c in result["cautions"]]
    return Table("notes", "Warnings and cautions", (Column("Kind", "text"), Column("Text", "text")), rows)


def context_table(source: dict, options: dict) -> Table:
    """What was analysed: file, sheet, range, response and options."""
    rows = [["File", source.get("file")], ["Sheet", source.get("sheet")], ["Range", source.get("range")],
            ["Response", source.get("response") or "(values of the grid)"], ["Layout", source.get("layout")]]
    rows += [[f"Option: {key}", "" if value is None else str(value)] for key, value in options.items()]
    return Table("context", "What was analysed", (Column("Item", "text"), Column("Value", "text")), rows)


@dataclass(frozen=True)
class SheetPlan:
    """One result sheet: its family name, title and tables in order."""

    family: str
    title: str
    tables: list[Table] = field(default_factory=list)


def sheet_plans(result: dict) -> list[SheetPlan]:
    """The result sheets of one analysed response, each with its tables in order."""
    anova = [anova_table(result), summary_table(result), one_way_table(result), efficiency_table(result)]
    means = [means_table(result), comparisons_table(result)]
    if result["missing"]:
        means.append(missing_table(result))
    return [
        SheetPlan("anova", "Analysis of variance and what blocking gained", anova),
        SheetPlan("means", "Treatment means and pairwise comparisons", means),
        SheetPlan("residuals", "Residuals, Q-Q points and plots",
                  [residuals_table(result), qq_table(result), qq_line_table(result)]),
        SheetPlan("checks", "Assumption checks, warnings and cautions",
                  [checks_table(result), friedman_table(result), notes_table(result)]),
    ]


def table_by_key(result: dict, key: str) -> Table:
    """Any single table by its key, for the worksheet functions."""
    builders = {
        "anova": anova_table, "one_way": one_way_table, "summary": summary_table,
        "efficiency": efficiency_table, "means": means_table, "comparisons": comparisons_table,
        "missing": missing_table, "residuals": residuals_table, "qq": qq_table, "checks": checks_table,
        "friedman": friedman_table, "notes": notes_table,
    }
    return builders[key](result)


# ---------------------------------------------------------------- many workbooks (batch)

BATCH_COLUMNS = (
    ("file", Column("File", "text")), ("sheet", Column("Sheet", "text")), ("range", Column("Range", "text")),
    ("response", Column("Response", "text")), ("f", Column("Treatment F", "ratio")),
    ("p", Column("Treatment p-value", "p")), ("mse", Column("Error mean square")),
    ("cv_percent", Column("CV %", "percent")), ("relative_efficiency", Column("Relative efficiency", "ratio")),
    ("best_treatment", Column("Best treatment", "text")), ("best_mean", Column("Best adjusted mean")),
    ("best_group", Column("Best treatment's group", "text")), ("warnings", Column("Warnings", "count")),
    ("first_warning", Column("First warning", "text")), ("status", Column("Status", "text")),
)
"""Keys of a batch summary row and the column that shows each."""


def batch_summary_table(rows: list[dict]) -> Table:
    """One row per file and response of a batch run, in the order given."""
    columns = tuple(column for _, column in BATCH_COLUMNS)
    body = [[row.get(key) for key, _ in BATCH_COLUMNS] for row in rows]
    return Table("batch", "Batch summary: one row per file and response", columns, body,
                 "Best treatment: the one with the highest (or, with --best lowest, the lowest) adjusted mean. "
                 "Status is 'done' or the reason the file was refused.")


def batch_trend_table(rows: list[dict]) -> Table:
    """CV % and relative efficiency of every response across files (one row per file, file order kept)."""
    files = list(dict.fromkeys(row["file"] for row in rows))
    responses = list(dict.fromkeys(row["response"] or "values" for row in rows if row["status"] == "done"))
    found = {(row["file"], row["response"] or "values"): row for row in rows if row["status"] == "done"}
    columns = (Column("File", "text"),) + tuple(Column(f"CV %: {r}", "percent") for r in responses) \
        + tuple(Column(f"Relative efficiency: {r}", "ratio") for r in responses)
    body = [[f] + [found.get((f, r), {}).get("cv_percent") for r in responses]
            + [found.get((f, r), {}).get("relative_efficiency") for r in responses] for f in files]
    return Table("trend", "Trend across files (file-name order)", columns, body,
                 "A blank cell: the file was refused or has no such response.")


# ---------------------------------------------------------------- planning the next trial

PLAN_TEST_TITLES = {
    "f": "Overall F test",
    "lsd": "Pairwise t test (LSD), one pair",
    "tukey": "Tukey HSD, one pair",
    "dunnett": "Dunnett against the control, one comparison",
}
PLAN_VALUE_HEADER = "Response"
"""Header of the empty value column of the run order; the analysis reads it back with --response."""


def plan_layout_table(layout: dict) -> Table:
    """The wide grid to fill in: treatments across, blocks down, empty value cells.

    ``grid()`` of this table (header row included) is exactly the range the
    analysis reads back; the top-left cell is ignored by the reader.
    """
    columns = (Column("Block", "text"),) + tuple(Column(t) for t in layout["treatments"])
    rows = [[block] + [None] * len(layout["treatments"]) for block in layout["blocks"]]
    return Table("plan_layout", "Trial layout: one value per block and treatment", columns, rows,
                 "Run the treatments of each block in the order on the run order sheet; type each result here.")


def plan_run_order_table(layout: dict) -> Table:
    """One row per run: block, run position, treatment, an empty response cell and the restriction flag."""
    fixed = {(t, p) for t, positions in layout["fixed_positions"].items() for p in positions}
    columns = (Column("Block", "text"), Column("Run in block", "count"), Column("Treatment", "text"),
               Column(PLAN_VALUE_HEADER), Column("Fixed by restriction", "text"))
    rows = [[block, position, treatment, None, "yes" if (treatment, position) in fixed else ""]
            for block, order in zip(layout["blocks"], layout["run_orders"])
            for position, treatment in enumerate(order, start=1)]
    note = f"Randomised within each block; seed {layout['seed']}, generator {layout['generator']}."
    if layout["restrictions"]:
        note += " " + layout["restrictions"]
    return Table("plan_run_order", "Run order", columns, rows, note)


def plan_inputs_table(plan: dict, sigma2_source: str | None = None) -> Table:
    """What the power calculation assumed."""
    i = plan["inputs"]
    rows = [["Smallest difference worth detecting", i["delta"]],
            ["Error variance", i["sigma2"]],
            ["Error variance from", sigma2_source or "typed in"],
            ["Treatments", i["n_treatments"]],
            ["Runs per block and treatment", i["replicates"]],
            ["Blocks planned", i["n_blocks"]],
            ["Significance level (alpha)", i["alpha"]],
            ["Target power", i["power"]],
            ["Alternative", i["alternative"]]]
    return Table("plan_inputs", "What the power calculation assumes", (Column("Item", "text"), Column("Value")),
                 rows, "The difference is placed least favourably: two treatments delta apart, the others "
                       "midway, for the F test; one pair delta apart for the pairwise tests.")


def blocks_needed_table(plan: dict) -> Table:
    """Blocks needed per test, power there, and power and detectable difference with the planned blocks."""
    planned = plan["inputs"]["n_blocks"]
    columns = (Column("Test", "text"), Column("Blocks needed", "count"), Column("Error df", "count"),
               Column("Power with that many blocks", "ratio"),
               Column(f"Power with {planned} blocks" if planned else "Power with the planned blocks", "ratio"),
               Column(f"Detectable difference with {planned} blocks" if planned
                      else "Detectable difference with the planned blocks"))
    rows = [[PLAN_TEST_TITLES.get(r["test"], r["test"]), r["blocks_needed"], r["error_df"], r["power_at_needed"],
             r["power_at_planned"], r["detectable_at_planned"]] for r in plan["tests"]]
    return Table("blocks_needed", f"Blocks needed for power {plan['inputs']['power']:g}", columns, rows,
                 "Tukey and Dunnett: the power of one pair's test within the simultaneous procedure "
                 "(familywise alpha), not the chance of finding every real difference.")


def power_table_table(plan: dict) -> Table:
    """Power against the number of blocks, one column per test."""
    tests = [t["test"] for t in plan["tests"]]
    columns = (Column("Blocks", "count"), Column("Error df", "count")) + tuple(
        Column(f"Power: {PLAN_TEST_TITLES.get(t, t)}", "ratio") for t in tests)
    rows = [[r["blocks"], r["error_df"]] + [r[t] for t in tests] for r in plan["power_table"]]
    return Table("power_table", "Power against the number of blocks", columns, rows)


def plan_audit_table(layout: dict, items: list[list]) -> Table:
    """The seed, the generator, the restriction and the run's options, for the record."""
    rows = [["Seed", str(layout["seed"])], ["Random generator", layout["generator"]],
            ["Restriction", layout["restrictions"] or "none (complete randomisation within blocks)"]]
    rows += [[str(k), "" if v is None else str(v)] for k, v in items]
    return Table("plan_audit", "Audit record of the plan", (Column("Item", "text"), Column("Value", "text")), rows)
