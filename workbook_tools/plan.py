"""Command ``workbook-tools plan``: a randomised layout and the blocks needed for the next trial.

The engine is :mod:`workbook_tools.analysis.planning`; the workbook is written by
:mod:`workbook_tools.sheets.plan_book`. Parser and runner live here so the
command line module only registers them.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.analysis.planning import TESTS

DEFAULT_PLAN_FILE = Path("trial-plan.xlsx")


def add_plan_parser(commands) -> argparse.ArgumentParser:
    """Register ``plan`` on the command line's subparsers."""
    plan = commands.add_parser(
        "plan", help="randomise the next trial's layout and work out how many blocks it needs",
        description="Write a randomised block layout to fill in (the exact range the analysis reads back), "
                    "its run order and, with --delta, the power and blocks needed per test.")
    design = plan.add_argument_group("the layout")
    design.add_argument("--treatments", help='labels "A,B,C" or a count (5 gives T1..T5); default: the '
                                             "treatments of --from-result")
    design.add_argument("--blocks", help='labels "Mon,Tue,Wed" or a count; default: the most blocks any '
                                         "--test needs")
    design.add_argument("--replicates", type=int, default=1, help="runs of each treatment in each block (default 1)")
    design.add_argument("--fixed", action="append", default=[], metavar="TREATMENT=POSITION",
                        help='fix a run position in every block, e.g. "Control=1" (repeatable; '
                             '"Control=1,6" with replicates)')
    design.add_argument("--seed", type=int, help="seed of the randomisation (default: drawn and printed)")
    power = plan.add_argument_group("power and blocks needed")
    power.add_argument("--delta", type=float, help="smallest difference between two treatment means worth detecting")
    source = power.add_mutually_exclusive_group()
    source.add_argument("--sigma2", type=float, help="error variance (the error mean square of an earlier trial)")
    source.add_argument("--from-result", type=Path, metavar="RESULT.json",
                        help="take the error variance and treatments from `workbook-tools analyze --json`")
    power.add_argument("--response", help="with --from-result holding several responses: which one")
    power.add_argument("--alpha", type=float, default=0.05, help="significance level (default 0.05)")
    power.add_argument("--power", type=float, default=0.8, help="target power (default 0.8)")
    power.add_argument("--test", dest="tests", action="append", choices=TESTS,
                       help="f (overall F test), lsd, tukey or dunnett; repeatable (default f)")
    power.add_argument("--alternative", choices=("two-sided", "greater", "less"), default="two-sided",
                       help="one-sided planning for lsd and dunnett (default two-sided)")
    power.add_argument("--max-blocks", type=int, default=1000, help="largest number of blocks considered")
    plan.add_argument("--out", type=Path, default=DEFAULT_PLAN_FILE,
                      help=f"plan workbook to write (default {DEFAULT_PLAN_FILE})")
    return plan


def _labels_or_count(text: str | None):
    if text is None:
        return None
    text = text.strip()
    if text.isdigit():
        return int(text)
    return [part.strip() for part in text.split(",")]


def _fixed_positions(items: list[str]) -> dict:
    fixed = {}
    for item in items:
        name, sep, positions = item.rpartition("=")
        try:
            numbers = [int(p) for p in positions.split(",")]
        except ValueError:
            numbers = None
        if not sep or not name.strip() or not numbers:
            raise TrialInputError(f"--fixed takes TREATMENT=POSITION, like \"Control=1\", not {item!r}.")
        fixed[name.strip()] = numbers
    return fixed


def _read_result(path: Path) -> dict:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise TrialInputError(f"The result file '{path}' does not exist.") from None
    except (OSError, ValueError) as error:
        raise TrialInputError(f"Could not read '{path}' as a JSON result: {error}.") from None


def run_plan_command(args, say) -> int:
    """Run ``workbook-tools plan``; returns the exit code."""
    from workbook_tools.analysis import planning
    from workbook_tools.layout import PLAN_TEST_TITLES
    from workbook_tools.sheets.plan_book import LAYOUT_SHEET, RUN_ORDER_SHEET, write_plan_book

    sigma2, source, treatments = args.sigma2, None, _labels_or_count(args.treatments)
    if args.from_result is not None:
        inputs = planning.planning_inputs_from_result(_read_result(args.from_result), args.response)
        sigma2, source = inputs["sigma2"], f"{inputs['source']} ('{args.from_result.name}')"
        treatments = treatments if treatments is not None else inputs["treatments"]
    if treatments is None:
        raise TrialInputError("Give the treatments with --treatments (labels or a count) or --from-result.")
    blocks = _labels_or_count(args.blocks)
    tests = args.tests or ["f"]
    if args.delta is None and (args.sigma2 is not None or args.from_result is not None or args.tests):
        raise TrialInputError("Give --delta, the smallest difference worth detecting, to work out power.")
    if args.delta is not None and sigma2 is None:
        raise TrialInputError("Give the error variance with --sigma2 or take it from an earlier analysis "
                              "with --from-result RESULT.json.")
    n_treatments = treatments if isinstance(treatments, int) else len(treatments)
    power_plan = None
    if args.delta is not None:
        common = dict(alpha=args.alpha, power=args.power, alternative=args.alternative, replicates=args.replicates)
        if blocks is None:
            blocks = max(planning.blocks_needed(args.delta, sigma2, n_treatments, test=test,
                                                max_blocks=args.max_blocks, **common) for test in tests)
        n_blocks = blocks if isinstance(blocks, int) else len(blocks)
        power_plan = planning.plan_power(args.delta, sigma2, n_treatments, n_blocks=n_blocks, tests=tests,
                                         max_blocks=args.max_blocks, **common)
    if blocks is None:
        raise TrialInputError("Give the number of blocks with --blocks, or --delta with --sigma2 to work it out.")
    layout = planning.randomised_layout(treatments, blocks, replicates=args.replicates,
                                        fixed_positions=_fixed_positions(args.fixed), seed=args.seed)
    options = {"treatments": args.treatments, "blocks": args.blocks, "replicates": args.replicates,
               "fixed": ", ".join(args.fixed) or None, "seed": args.seed, "delta": args.delta,
               "sigma2": args.sigma2, "from_result": args.from_result, "alpha": args.alpha, "power": args.power,
               "tests": ", ".join(tests), "alternative": args.alternative}
    book = write_plan_book(args.out, layout.to_dict(), power_plan, sigma2_source=source, run_options=options)
    say(f"Randomisation seed: {layout.seed} ({layout.generator}); --seed {layout.seed} repeats this layout.")
    if layout.restrictions:
        say(layout.restrictions)
    if power_plan is not None:
        say(f"Blocks needed for power {args.power:g} to detect a difference of {args.delta:g} "
            f"(error variance {sigma2:.6g}, alpha {args.alpha:g}):")
        for row in power_plan["tests"]:
            say(f"  {PLAN_TEST_TITLES[row['test']]}: {row['blocks_needed']} blocks "
                f"(power {row['power_at_needed']:.3f}); with {len(layout.blocks)} blocks power "
                f"{row['power_at_planned']:.3f}, detectable difference {row['detectable_at_planned']:.4g}")
    say(f"Planned: {len(layout.treatments)} treatments x {len(layout.blocks)} blocks"
        + (f" x {layout.replicates} runs" if layout.replicates > 1 else ""))
    say(f"Wrote the plan to {book.path}")
    where = LAYOUT_SHEET if book.layout_range else RUN_ORDER_SHEET
    say(f"Fill in sheet '{where}', then: {book.analyze_command()}")
    return 0
