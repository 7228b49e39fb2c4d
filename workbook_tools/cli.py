"""Command line front end: ``workbook-tools analyze | demo``.

Exit codes: 0 done; 2 a problem with the input (one message, no traceback);
1 an internal error. Heavy modules are imported only by the command that needs
them, so the command starts quickly.
"""

from __future__ import annotations

import argparse
import importlib
import json
import sys
from pathlib import Path

EXIT_OK, EXIT_INTERNAL, EXIT_INPUT = 0, 1, 2
COMPARE_METHODS = ("lsd", "tukey", "bonferroni", "holm", "dunnett")  # as analysis.compare.METHODS
DEFAULT_COMPARE = "tukey"  # as analysis.compare.DEFAULT_METHOD (not imported: keeps start-up light)


def _add_analysis_options(parser: argparse.ArgumentParser, output: bool = True) -> None:
    read = parser.add_argument_group("reading the data")
    read.add_argument("--range", dest="range_text", required=True,
                      help="cells to analyse: 'Sheet'!B3:G9, a defined name or a table name")
    read.add_argument("--layout", choices=("auto", "wide", "long"), default="auto",
                      help="wide: treatments across, blocks down; long: one row per observation (default: guess "
                           "only when unambiguous)")
    read.add_argument("--transposed", action="store_true", help="wide layout with blocks across, treatments down")
    read.add_argument("--block", help="long layout: header of the block column")
    read.add_argument("--treatment", help="long layout: header of the treatment column")
    read.add_argument("--response", dest="responses", action="append",
                      help="long layout: header of a response column (repeat for several; default: all numeric)")
    read.add_argument("--text-numbers", action="store_true", help="accept numbers stored as text")
    read.add_argument("--errors-as-missing", action="store_true",
                      help="treat error cells (#N/A, #DIV/0!, ...) as missing instead of stopping")
    stats = parser.add_argument_group("the analysis")
    stats.add_argument("--alpha", type=float, default=0.05, help="significance level (default 0.05)")
    stats.add_argument("--compare", choices=COMPARE_METHODS, default=DEFAULT_COMPARE,
                       help="pairwise comparison method (default tukey)")
    stats.add_argument("--control", help="control treatment for --compare dunnett (default: the first)")
    stats.add_argument("--alternative", choices=("two-sided", "greater", "less"), default="two-sided",
                       help="direction of Dunnett comparisons (default two-sided)")
    stats.add_argument("--block-model", choices=("random", "fixed"), default="random",
                       help="with replicates in every cell: random blocks test treatments against the "
                            "interaction, fixed blocks against the within-cell error (default random)")
    from workbook_tools.sheets.limits import add_limit_options

    add_limit_options(parser)
    if not output:  # batch has its own output options
        return
    out = parser.add_argument_group("output")
    out.add_argument("--out", type=Path, help="result workbook (default: BOOK-analysed.xlsx beside the input)")
    out.add_argument("--in-place", action="store_true",
                     help="write the result sheets into the input workbook itself (refused when anything in "
                          "it would be lost)")
    out.add_argument("--prefix", default="wbt-", help="name prefix of the result sheets (default wbt-)")
    out.add_argument("--json", dest="json_path", help="also write the results as JSON to PATH, or - for stdout")
    out.add_argument("--no-workbook", action="store_true", help="do not write a result workbook (JSON only)")


def build_parser(argv=None) -> argparse.ArgumentParser:
    from workbook_tools import __version__

    parser = argparse.ArgumentParser(
        prog="workbook-tools",
        description="Analyse randomised complete block trials kept in spreadsheets.",
    )
    parser.add_argument("--version", action="version", version=f"workbook-tools {__version__}")
    parser.add_argument("--debug", action="store_true", help="show a traceback on internal errors")
    commands = parser.add_subparsers(dest="command", required=True)
    analyze = commands.add_parser("analyze", help="analyse a range of a workbook and write result sheets")
    analyze.add_argument("book", type=Path, help="input workbook (.xlsx or .xlsm); it is not changed")
    _add_analysis_options(analyze)
    demo = commands.add_parser("demo", help="analyse a bundled sample workbook")
    demo.add_argument("--folder", type=Path, default=Path("workbook-tools-demo"),
                      help="where to put the sample and its result (default ./workbook-tools-demo)")
    wanted = _command_in(argv)
    for name, module, adder, _ in EXTRA_COMMANDS:
        if wanted in (None, name):  # import a command's module only when it may be used
            getattr(importlib.import_module(module), adder)(commands)
    return parser


# command name, module, function that adds its parser, function that runs it
EXTRA_COMMANDS = (
    ("run", "workbook_tools.jobs", "add_run_parser", "run_command"),
    ("batch", "workbook_tools.batch", "add_batch_parser", "run_batch_command"),
    ("serve", "workbook_tools.service", "add_serve_parser", "run_serve"),
    ("plan", "workbook_tools.plan", "add_plan_parser", "run_plan_command"),
)


def _command_in(argv) -> str | None:
    """The subcommand named on the command line, or None when it cannot be told yet (help, errors)."""
    words = sys.argv[1:] if argv is None else list(argv)
    for word in words:
        if not word.startswith("-"):
            return word if word in {"analyze", "demo", *(name for name, *_ in EXTRA_COMMANDS)} else None
    return None


def _options(args) -> dict:
    return {
        "layout": args.layout, "transposed": args.transposed or None, "block": args.block,
        "treatment": args.treatment, "responses": args.responses, "text_numbers": args.text_numbers or None,
        "errors_as_missing": args.errors_as_missing or None, "alpha": args.alpha, "compare": args.compare,
        "control": args.control, "alternative": args.alternative, "block_model": args.block_model,
    }


def _write_json(data: dict, path: str) -> None:
    text = json.dumps(data, indent=2, allow_nan=False)
    if path == "-":
        sys.stdout.write(text + "\n")
        return
    from workbook_tools.sheets.safety import atomic_write_text

    atomic_write_text(Path(path), text + "\n")


def _refuse_json_over_workbooks(args) -> None:
    """The JSON file must never replace the input workbook or the result workbook."""
    if not args.json_path or args.json_path == "-":
        return
    from workbook_tools.analysis.errors import TrialInputError
    from workbook_tools.sheets.safety import default_output_path

    json_path = Path(args.json_path).resolve()
    workbooks = [Path(args.book)]
    if not args.no_workbook:
        workbooks.append(Path(args.book) if args.in_place else (args.out or default_output_path(args.book)))
    for workbook in workbooks:
        if json_path == workbook.resolve():
            raise TrialInputError(f"--json {args.json_path} would overwrite the workbook {workbook}; "
                                  "choose another file name for the JSON.")


def _p_text(p) -> str:
    if p is None:
        return "p n/a"
    return "p < 0.0001" if p < 1e-4 else f"p = {p:.4f}"


def run_analyze(args, say) -> int:
    from workbook_tools.sheets.book import analyses_json, analyse_book, write_analyses

    options = _options(args)
    from workbook_tools.sheets.limits import applied, limits_from_options

    _refuse_json_over_workbooks(args)
    with applied(limits_from_options(args)):
        analyses = analyse_book(args.book, args.range_text, **options)
    data = analyses_json(analyses)
    if not args.no_workbook:
        target = write_analyses(args.book, analyses, out=args.out, in_place=args.in_place, prefix=args.prefix,
                                run_options={"range": args.range_text, **options})
        say(f"Wrote the results of {len(analyses)} response(s) to {target}")
    if args.json_path:
        _write_json(data, args.json_path)
        if args.json_path != "-":
            say(f"Wrote JSON to {args.json_path}")
    for analysis in analyses:
        d = analysis.as_dict()
        treatment = next(r for r in d["anova"] if r["source"] == "treatment")
        label = analysis.source["response"] or analysis.source["range"]
        p = treatment["p"]
        say(f"  {label}: treatment F = {treatment['f'] if treatment['f'] is None else round(treatment['f'], 4)}, "
            f"{_p_text(p)}; "
            f"{len(d['warnings'])} warning(s)")
    return EXIT_OK


def run_demo(args, say) -> int:
    from workbook_tools.samples import DEMO, build_sample
    from workbook_tools.sheets.book import analyse_book, write_analyses

    args.folder.mkdir(parents=True, exist_ok=True)
    book = build_sample(DEMO, args.folder)
    options = {"layout": DEMO.layout, "block": DEMO.block, "treatment": DEMO.treatment,
               "responses": list(DEMO.responses) if DEMO.responses else None, "compare": "tukey"}
    analyses = analyse_book(book, DEMO.range, **options)
    target = write_analyses(book, analyses, run_options={"range": DEMO.range, **options})
    say(f"Sample trial: {book} ({DEMO.description})")
    say(f"Result workbook: {target}")
    say("Open it and start with the sheet 'wbt-anova'.")
    return EXIT_OK


def main(argv=None) -> int:
    parser = build_parser(argv)
    args = parser.parse_args(argv)
    quiet_stdout = getattr(args, "json_path", None) == "-"

    def say(message: str) -> None:
        print(message, file=sys.stderr if quiet_stdout else sys.stdout)

    from workbook_tools.analysis.errors import TrialInputError

    try:
        if args.command == "analyze":
            return run_analyze(args, say)
        if args.command == "demo":
            return run_demo(args, say)
        for name, module, _, runner in EXTRA_COMMANDS:
            if args.command == name:
                return getattr(importlib.import_module(module), runner)(args, say)
    except TrialInputError as error:
        print(f"workbook-tools: {error}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("workbook-tools: interrupted", file=sys.stderr)
        return EXIT_INTERNAL
    except Exception as error:  # an internal error: say so plainly, traceback only on request
        if args.debug:
            raise
        print(f"workbook-tools: internal error ({type(error).__name__}: {error}); "
              "run again with --debug for details", file=sys.stderr)
        return EXIT_INTERNAL
    parser.error(f"unknown command {args.command}")
    return EXIT_INTERNAL


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
