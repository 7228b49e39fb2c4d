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


def parse_labels_or_count(value):
    """Labels from ``"A,B,C"`` or a list of cells, or a count from ``5`` / ``"5"`` / ``5.0``; None when blank."""
    if value is None or isinstance(value, bool):
        return None
    if isinstance(value, (list, tuple)):
        cells = [v for row in value for v in (row if isinstance(row, (list, tuple)) else [row])]
        labels = [str(v).strip() for v in cells if v is not None and str(v).strip()]
        return labels or None
    if isinstance(value, float) and value.is_integer():
        return int(value)
    text = str(value).strip()
    if not text:
        return None
    if text.isdigit():
        return int(text)
    return [part.strip() for part in text.split(",")]


def parse_fixed_positions(items) -> dict:
    """``["Control=1", "A=2,5"]`` (or one text with ``;`` between items) -> ``{"Control": [1], "A": [2, 5]}``."""
    if isinstance(items, str):
        items = [part for part in items.split(";") if part.strip()]
    fixed = {}
    for item in items or []:
        name, sep, positions = str(item).rpartition("=")
        try:
            numbers = [int(p) for p in positions.split(",")]
        except ValueError:
            numbers = None
        if not sep or not name.strip() or not numbers:
            raise TrialInputError(f"A fixed position is written TREATMENT=POSITION, like \"Control=1\", "
                                  f"not {item!r}.")
        fixed[name.strip()] = numbers
    return fixed


def parse_tests(value) -> list[str]:
    """Test keys from ``"f, tukey"`` (blank: ``["f"]``)."""
    tests = [t.strip().casefold() for t in str(value or "").replace(";", ",").split(",") if t.strip()]
    for test in tests:
        if test not in TESTS:
            raise TrialInputError(f"The test must be one of {', '.join(TESTS)}, not {test!r}.")
    return tests or ["f"]


def _read_result(path: Path) -> dict:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise TrialInputError(f"The result file '{path}' does not exist.") from None
    except (OSError, ValueError) as error:
        raise TrialInputError(f"Could not read '{path}' as a JSON result: {error}.") from None


def make_plan(treatments, blocks, *, replicates=1, fixed=None, seed=None, delta=None, sigma2=None, alpha=0.05,
              power=0.8, tests=("f",), alternative="two-sided", max_blocks=1000):
    """The layout and (with ``delta``) the power plan that every front end shows.

    ``treatments`` and ``blocks`` are labels or counts; without ``blocks`` the
    most blocks any of ``tests`` needs. Returns ``(Layout, plan dict or None)``.
    """
    from workbook_tools.analysis import planning

    if treatments is None:
        raise TrialInputError("Give the treatments (labels or their number), or take them from an earlier result.")
    power_plan = None
    if delta is not None:
        if sigma2 is None:
            raise TrialInputError("Give the error variance (sigma2), or take it from an earlier analysis "
                                  "(--from-result RESULT.json on the command line).")
        n_treatments = treatments if isinstance(treatments, int) else len(treatments)
        common = dict(alpha=alpha, power=power, alternative=alternative, replicates=replicates)
        if blocks is None:
            blocks = max(planning.blocks_needed(delta, sigma2, n_treatments, test=test, max_blocks=max_blocks,
                                                **common) for test in tests)
        n_blocks = blocks if isinstance(blocks, int) else len(blocks)
        power_plan = planning.plan_power(delta, sigma2, n_treatments, n_blocks=n_blocks, tests=tests,
                                         max_blocks=max_blocks, **common)
    if blocks is None:
        raise TrialInputError("Give the number of blocks, or the difference worth detecting and the error "
                              "variance to work it out.")
    layout = planning.randomised_layout(treatments, blocks, replicates=replicates, fixed_positions=fixed, seed=seed)
    return layout, power_plan


def run_plan_command(args, say) -> int:
    """Run ``workbook-tools plan``; returns the exit code."""
    from workbook_tools.analysis import planning
    from workbook_tools.layout import PLAN_TEST_TITLES
    from workbook_tools.sheets.plan_book import LAYOUT_SHEET, RUN_ORDER_SHEET, write_plan_book

    sigma2, source, treatments = args.sigma2, None, parse_labels_or_count(args.treatments)
    if args.from_result is not None:
        inputs = planning.planning_inputs_from_result(_read_result(args.from_result), args.response)
        sigma2, source = inputs["sigma2"], f"{inputs['source']} ('{args.from_result.name}')"
        treatments = treatments if treatments is not None else inputs["treatments"]
    tests = args.tests or ["f"]
    if args.delta is None and (args.sigma2 is not None or args.from_result is not None or args.tests):
        raise TrialInputError("Give --delta, the smallest difference worth detecting, to work out power.")
    layout, power_plan = make_plan(treatments, parse_labels_or_count(args.blocks), replicates=args.replicates,
                                   fixed=parse_fixed_positions(args.fixed), seed=args.seed, delta=args.delta,
                                   sigma2=sigma2, alpha=args.alpha, power=args.power, tests=tests,
                                   alternative=args.alternative, max_blocks=args.max_blocks)
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
