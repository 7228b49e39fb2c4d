"""Planning the next trial: randomised layouts, power, blocks needed, the plan workbook and command.

Power is checked four ways: against statsmodels' power functions where the
design maps onto them, against scipy's noncentral F and t computed here with
critical values found independently of the project (scipy's studentized range;
scipy's multivariate t for Dunnett's coverage), against published sample sizes,
and by seeded simulation of block trials in the least favourable configuration.
"""

from __future__ import annotations

import contextlib
import io
import json
import math
import re

import numpy as np
import openpyxl
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from statsmodels.stats.power import TTestPower, ftest_power

from workbook_tools import analyze_grid, cli
from workbook_tools.analysis import planning
from workbook_tools.analysis.distributions import dunnett_critical
from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.analysis.planning import (
    blocks_needed, detectable_difference, plan_power, planning_inputs_from_result, power_rcbd, power_table,
    randomised_layout,
)
from workbook_tools.layout import blocks_needed_table, plan_layout_table, plan_run_order_table, power_table_table
from workbook_tools.sheets.plan_book import write_plan_book
from workbook_tools.sheets.reader import read_trials

ALPHA = 0.05


def _lambda(delta, sigma2, b, r=1):
    # two treatments at +-delta/2, the rest at the mean: sum tau^2 = delta^2 / 2, each mean on b r runs
    return b * r * delta**2 / (2 * sigma2)


def _df(t, b, r=1):
    return b * t * r - b - t + 1


# ----------------------------------------------------------- statsmodels

@pytest.mark.parametrize("t, b, r, delta, sigma2", [
    (3, 4, 1, 2.0, 1.0), (5, 6, 1, 1.0, 0.5), (8, 10, 1, 0.7, 0.3), (4, 3, 3, 1.2, 1.0), (2, 12, 1, 1.0, 1.0),
])
def test_f_power_matches_statsmodels_ftest_power(t, b, r, delta, sigma2):
    # statsmodels: nc = f^2 (df1 + df2 + ncc); with ncc = 0, f = sqrt(lambda / (df1 + df2))
    df1, df2 = t - 1, _df(t, b, r)
    f = math.sqrt(_lambda(delta, sigma2, b, r) / (df1 + df2))
    expected = ftest_power(f, df2=df2, df1=df1, alpha=ALPHA, ncc=0)
    assert power_rcbd(delta, sigma2, t, b, ALPHA, "f", replicates=r) == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize("b, dz", [(5, 1.2), (10, 0.8), (34, 0.5), (60, 0.3)])
@pytest.mark.parametrize("alternative", ["two-sided", "greater"])
def test_two_treatment_lsd_is_the_paired_t_test_of_statsmodels(b, dz, alternative):
    # t = 2: error df b - 1, the pair's t test is the paired t test of d_z = delta / sqrt(2 sigma2)
    sigma2 = 1.7
    delta = dz * math.sqrt(2 * sigma2)
    expected = TTestPower().power(dz, nobs=b, alpha=ALPHA,
                                  alternative="two-sided" if alternative == "two-sided" else "larger")
    got = power_rcbd(delta, sigma2, 2, b, ALPHA, "lsd", alternative=alternative)
    assert got == pytest.approx(expected, rel=1e-7)


def test_two_treatment_blocks_needed_is_statsmodels_sample_size_rounded_up():
    for dz in (0.3, 0.5, 0.8, 1.0):
        n = TTestPower().solve_power(dz, power=0.9, alpha=ALPHA)
        assert blocks_needed(dz * math.sqrt(2.0), 1.0, 2, ALPHA, 0.9, "lsd") == math.ceil(n)


# ------------------------------------------------------- scipy directly

@pytest.mark.parametrize("t, b, r", [(3, 4, 1), (5, 6, 1), (6, 3, 2), (10, 8, 1)])
def test_pairwise_powers_from_scipy_noncentral_t(t, b, r):
    delta, sigma2 = 1.3, 0.9
    df = _df(t, b, r)
    ncp = delta / math.sqrt(2 * sigma2 / (b * r))

    def two_sided(c):
        return stats.nct.sf(c, df, ncp) + stats.nct.cdf(-c, df, ncp)

    lsd = two_sided(stats.t.ppf(1 - ALPHA / 2, df))
    tukey = two_sided(stats.studentized_range.ppf(1 - ALPHA, t, df) / math.sqrt(2))
    assert power_rcbd(delta, sigma2, t, b, ALPHA, "lsd", replicates=r) == pytest.approx(lsd, rel=1e-9)
    # scipy's studentized range quantile is good to about 1e-7 relative
    assert power_rcbd(delta, sigma2, t, b, ALPHA, "tukey", replicates=r) == pytest.approx(tukey, rel=1e-5)


@pytest.mark.parametrize("t, df, alternative", [(3, 10, "two-sided"), (5, 20, "two-sided"), (4, 15, "greater")])
def test_dunnett_power_uses_a_critical_value_with_coverage_one_minus_alpha(t, df, alternative):
    # coverage checked with scipy's multivariate t (Genz-Bretz QMC), correlation 1/2 for equal replication
    m = t - 1
    c = dunnett_critical(ALPHA, df, [math.sqrt(0.5)] * m, alternative)
    corr = np.full((m, m), 0.5) + 0.5 * np.eye(m)
    lower = -c if alternative == "two-sided" else -np.inf
    coverage = stats.multivariate_t.cdf(np.full(m, c), shape=corr, df=df, lower_limit=np.full(m, lower),
                                        maxpts=200_000, random_state=np.random.default_rng(1))
    assert coverage == pytest.approx(1 - ALPHA, abs=5e-4)
    # and power is the noncentral t beyond it
    b = df // (t - 1) + 1
    assert _df(t, b) == df
    ncp = 1.1 / math.sqrt(2 * 0.8 / b)
    expected = stats.nct.sf(c, df, ncp) + (stats.nct.cdf(-c, df, ncp) if alternative == "two-sided" else 0.0)
    assert power_rcbd(1.1, 0.8, t, b, ALPHA, "dunnett", alternative=alternative) == pytest.approx(expected, rel=1e-9)


def test_with_two_treatments_every_test_is_the_same_t_test():
    # F = t^2 with one numerator df; Tukey's q / sqrt 2 and Dunnett's one-comparison value are the t quantile
    for b in (3, 7, 15):
        powers = [power_rcbd(1.0, 1.0, 2, b, ALPHA, test) for test in planning.TESTS]
        assert powers == pytest.approx([powers[0]] * 4, rel=1e-7)


# ------------------------------------------------------- published values

def test_paired_t_sample_size_for_a_medium_effect():
    # Cohen (1988), ch. 2, and the paired-t example of G*Power (Faul et al. 2007): d_z = 0.5, two-sided
    # alpha 0.05, power 0.80 needs 34 pairs, actual power 0.808 (memory). Two treatments in b blocks
    # are b pairs with d_z = delta / sqrt(2 sigma2).
    assert blocks_needed(0.5 * math.sqrt(2.0), 1.0, 2, 0.05, 0.80, "lsd") == 34
    assert power_rcbd(0.5 * math.sqrt(2.0), 1.0, 2, 34, 0.05, "lsd") == pytest.approx(0.808, abs=0.001)


def test_paired_t_sample_size_for_a_large_effect():
    # d_z = 1.0, two-sided alpha 0.05, power 0.80: 10 pairs, actual power 0.803 (memory; G*Power)
    assert blocks_needed(math.sqrt(2.0), 1.0, 2, 0.05, 0.80, "lsd") == 10
    assert power_rcbd(math.sqrt(2.0), 1.0, 2, 10, 0.05, "lsd") == pytest.approx(0.803, abs=0.001)


def test_f_power_at_cohens_one_way_medium_effect():
    # Cohen (1988) Table 8.4.4 (memory): k = 4 groups, f = 0.25, alpha 0.05 needs n = 45 per group for
    # power 0.80. lambda = f^2 k n here too (least favourable spread: f^2 = delta^2 / (2 k sigma2)); only the
    # error df differs (3 (b - 1) instead of 4 (n - 1)), which moves power by well under 0.01 at this size.
    delta = math.sqrt(0.25**2 * 2 * 4)
    assert power_rcbd(delta, 1.0, 4, 45, 0.05, "f") == pytest.approx(0.80, abs=0.01)
    assert blocks_needed(delta, 1.0, 4, 0.05, 0.80, "f") in (45, 46)


# ------------------------------------------------------------- simulation

def _simulate(t, b, delta, tau, reps, seed):
    """Block trials with random block effects; returns means (reps x t) and MSE (reps)."""
    rng = np.random.default_rng(seed)
    y = rng.normal(0, 3, (reps, b, 1)) + np.asarray(tau)[None, None, :] + rng.normal(0, 1, (reps, b, t))
    means = y.mean(axis=1)
    resid = y - y.mean(axis=2, keepdims=True) - means[:, None, :] + y.mean(axis=(1, 2))[:, None, None]
    mse = (resid**2).sum(axis=(1, 2)) / _df(t, b)
    return y, means, mse


def _within_3_se(hits, reps, expected):
    share = hits / reps
    se = math.sqrt(expected * (1 - expected) / reps)
    assert abs(share - expected) < 3 * se, (share, expected, se)


@pytest.mark.parametrize("test", ["lsd", "tukey", "dunnett"])
def test_pairwise_power_agrees_with_seeded_simulation(test):
    t, b, delta, reps = 4, 6, 1.6, 4000
    df = _df(t, b)
    if test == "dunnett":  # control is treatment 0, one treatment delta above it
        tau, pair = [0.0, delta, 0.0, 0.0], (1, 0)
        critical = dunnett_critical(ALPHA, df, [math.sqrt(0.5)] * (t - 1))
    else:  # two treatments at +-delta/2
        tau, pair = [delta / 2, -delta / 2, 0.0, 0.0], (0, 1)
        critical = (stats.t.ppf(1 - ALPHA / 2, df) if test == "lsd"
                    else stats.studentized_range.ppf(1 - ALPHA, t, df) / math.sqrt(2))
    _, means, mse = _simulate(t, b, delta, tau, reps, seed={"lsd": 11, "tukey": 12, "dunnett": 13}[test])
    statistic = (means[:, pair[0]] - means[:, pair[1]]) / np.sqrt(2 * mse / b)
    _within_3_se(int(np.sum(np.abs(statistic) > critical)), reps, power_rcbd(delta, 1.0, t, b, ALPHA, test))


def test_f_power_agrees_with_seeded_simulation():
    t, b, delta, reps = 5, 5, 1.8, 4000
    y, means, mse = _simulate(t, b, delta, [delta / 2, -delta / 2, 0, 0, 0], reps, seed=21)
    ms_treatment = b * ((means - means.mean(axis=1, keepdims=True))**2).sum(axis=1) / (t - 1)
    f = ms_treatment / mse
    hits = int(np.sum(f > stats.f.ppf(1 - ALPHA, t - 1, _df(t, b))))
    _within_3_se(hits, reps, power_rcbd(delta, 1.0, t, b, ALPHA, "f"))


@pytest.mark.parametrize("compare", ["lsd", "tukey", "dunnett"])
def test_simulated_statistic_is_the_analysis_own_pair_statistic(compare):
    # the simulation above computes the pair's t directly; the project's analysis gives the same t and decision
    t, b, delta = 4, 6, 1.6
    y, means, mse = _simulate(t, b, delta, [0.0, delta, 0.0, 0.0], 6, seed=5)
    labels = ["C", "A", "B", "D"]
    for k in range(len(y)):
        result = analyze_grid(y[k].tolist(), blocks=[f"B{j}" for j in range(b)], treatments=labels,
                              compare=compare, control="C" if compare == "dunnett" else None).to_dict()
        pair = next(p for p in result["comparisons"]["pairs"] if {p["first"], p["second"]} == {"A", "C"})
        direct = (means[k, 1] - means[k, 0]) / math.sqrt(2 * mse[k] / b)
        assert abs(pair["statistic"]) == pytest.approx(abs(direct), rel=1e-9)
        critical = planning._pair_critical(compare, ALPHA, t, _df(t, b), "two-sided")
        assert pair["significant"] == (abs(direct) > critical)


# ------------------------------------------------------------ invariants

@settings(max_examples=20, deadline=None)
@given(delta=st.floats(0.5, 5.0), sigma2=st.floats(0.1, 2.0), t=st.integers(2, 8),
       test=st.sampled_from(["f", "lsd", "tukey", "dunnett"]), target=st.sampled_from([0.7, 0.8, 0.9]))
def test_blocks_needed_is_the_first_number_of_blocks_reaching_the_target(delta, sigma2, t, test, target):
    b = blocks_needed(delta, sigma2, t, ALPHA, target, test)
    assert power_rcbd(delta, sigma2, t, b, ALPHA, test) >= target
    assert b == 2 or power_rcbd(delta, sigma2, t, b - 1, ALPHA, test) < target


@settings(max_examples=20, deadline=None)
@given(sigma2=st.floats(0.1, 5.0), t=st.integers(2, 8), b=st.integers(2, 30),
       test=st.sampled_from(["f", "lsd", "tukey", "dunnett"]))
def test_detectable_difference_has_the_target_power(sigma2, t, b, test):
    delta = detectable_difference(sigma2, t, b, ALPHA, 0.8, test)
    assert power_rcbd(delta, sigma2, t, b, ALPHA, test) == pytest.approx(0.8, abs=1e-8)


def test_power_rises_with_blocks_and_with_the_difference():
    rows = power_table(1.0, 1.0, 5, range(2, 30), ALPHA, planning.TESTS)
    for test in planning.TESTS:
        series = [r[test] for r in rows]
        assert all(a < b for a, b in zip(series, series[1:]))
    powers = [power_rcbd(d, 1.0, 5, 6, ALPHA, "tukey") for d in (0.5, 1.0, 1.5, 2.0)]
    assert powers == sorted(powers)
    assert [r["error_df"] for r in rows] == [4 * (b - 1) for b in range(2, 30)]


@pytest.mark.parametrize("call", [
    lambda: power_rcbd(0, 1, 3, 4), lambda: power_rcbd(1, -1, 3, 4), lambda: power_rcbd(1, 1, 1, 4),
    lambda: power_rcbd(1, 1, 3, 1), lambda: power_rcbd(1, 1, 3, 4, alpha=1.0), lambda: power_rcbd(1, 1, 3, 4, test="x"),
    lambda: power_rcbd(1, 1, 3, 4, test="tukey", alternative="greater"),
    lambda: blocks_needed(1, 1, 3, power=1.0), lambda: detectable_difference(1, 3, 4, power=0.0),
    lambda: detectable_difference(1, 3, 4, alpha=0.5, power=0.2),
])
def test_bad_planning_inputs_are_refused(call):
    with pytest.raises(TrialInputError):
        call()


def test_too_few_allowed_blocks_says_so():
    with pytest.raises(TrialInputError, match="Even 20 blocks"):
        blocks_needed(0.01, 1.0, 4, max_blocks=20)


def test_planning_inputs_come_from_an_earlier_result():
    values = [[10.1, 11.3, 9.8], [10.9, 12.0, 10.2], [9.7, 11.1, 9.9], [10.4, 11.8, 10.6]]
    result = analyze_grid(values, blocks=list("1234"), treatments=list("ABC")).to_dict()
    inputs = planning_inputs_from_result(result)
    assert inputs["sigma2"] == result["summary"]["mse"]
    assert inputs["n_treatments"] == 3 and inputs["treatments"] == ["A", "B", "C"]
    two = {"schema": 1, "results": [dict(result, source={"response": "x"}), dict(result, source={"response": "y"})]}
    with pytest.raises(TrialInputError, match="several responses"):
        planning_inputs_from_result(two)
    assert planning_inputs_from_result(two, "y")["sigma2"] == result["summary"]["mse"]
    with pytest.raises(TrialInputError):
        planning_inputs_from_result({"anova": []})


# --------------------------------------------------------------- layouts

def test_same_seed_same_layout_other_seed_other_layout():
    a = randomised_layout(6, 5, seed=2024)
    assert a == randomised_layout(6, 5, seed=2024)
    assert a.run_orders != randomised_layout(6, 5, seed=2025).run_orders
    assert a.generator.endswith("(PCG64)") and a.treatments[0] == "T1" and a.blocks[-1] == "Block 5"


def test_a_drawn_seed_is_recorded_and_repeats_the_layout():
    drawn = randomised_layout(["A", "B", "C"], 4)
    assert 0 <= drawn.seed < planning.SEED_LIMIT
    assert randomised_layout(["A", "B", "C"], 4, seed=drawn.seed) == drawn


def test_randomisation_is_numpy_pcg64_permutations_block_by_block():
    # the documented recipe: one default_rng(seed), one permutation of the free runs per block
    layout = randomised_layout(["A", "B", "C", "D"], 3, seed=99)
    rng = np.random.default_rng(99)
    assert isinstance(rng.bit_generator, np.random.PCG64)
    expected = tuple(tuple(["A", "B", "C", "D"][i] for i in rng.permutation(4)) for _ in range(3))
    assert layout.run_orders == expected


@settings(max_examples=40, deadline=None)
@given(t=st.integers(2, 7), b=st.integers(1, 6), r=st.integers(1, 3), seed=st.integers(0, 2**40),
       fix=st.booleans())
def test_every_block_holds_every_treatment_replicates_times(t, b, r, seed, fix):
    fixed = {"T1": 1} if fix else None
    layout = randomised_layout(t, b, replicates=r, fixed_positions=fixed, seed=seed)
    assert len(layout.run_orders) == b
    for order in layout.run_orders:
        assert sorted(order) == sorted([f"T{i}" for i in range(1, t + 1)] * r)
        if fix:
            assert order[0] == "T1"
    assert ("T1" in layout.restrictions) == fix


def test_fixed_positions_with_replicates_and_their_checks():
    layout = randomised_layout(["Control", "A", "B"], 4, replicates=2, fixed_positions={"Control": [1, 6]}, seed=3)
    assert all(o[0] == "Control" and o[5] == "Control" for o in layout.run_orders)
    assert "'Control' at run 1, 6 in every block" in layout.restrictions
    for bad in ({"X": 1}, {"A": 7}, {"A": 1, "B": 1}, {"A": [1, 2, 3]}, {"A": 0}):
        with pytest.raises(TrialInputError):
            randomised_layout(["Control", "A", "B"], 4, replicates=2, fixed_positions=bad, seed=3)
    for bad in (dict(treatments=1, blocks=3), dict(treatments=["A", "a"], blocks=2),
                dict(treatments=3, blocks=0), dict(treatments=3, blocks=2, seed=-1),
                dict(treatments=3, blocks=2, replicates=0)):
        with pytest.raises(TrialInputError):
            randomised_layout(**bad)


def test_wide_grid_and_run_rows():
    layout = randomised_layout(["A", "B", "C"], ["Mon", "Tue"], seed=1)
    assert layout.wide_grid() == [[None, "A", "B", "C"], ["Mon", None, None, None], ["Tue", None, None, None]]
    rows = layout.run_sheet_rows()
    assert [r[:2] for r in rows] == [["Mon", 1], ["Mon", 2], ["Mon", 3], ["Tue", 1], ["Tue", 2], ["Tue", 3]]
    assert [r[2] for r in rows] == [*layout.run_orders[0], *layout.run_orders[1]]
    assert all(r[3] is None for r in rows)
    table = plan_layout_table(layout.to_dict())
    assert table.grid()[1:] == layout.wide_grid()[1:] and table.grid()[0][1:] == ["A", "B", "C"]
    with pytest.raises(TrialInputError):
        randomised_layout(3, 2, replicates=2, seed=1).wide_grid()


def test_filled_wide_grid_reads_back_through_the_reader(tmp_path):
    layout = randomised_layout(["Old", "New 1", "New 2"], 4, seed=8)
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Layout"
    grid = layout.wide_grid()
    filled = {}
    for i, row in enumerate(grid):
        for j, value in enumerate(row):
            if i and j:
                value = filled[(row[0], grid[0][j])] = 10.0 + i + 0.1 * j
            ws.cell(3 + i, 2 + j, value)
    wb.save(tmp_path / "plan.xlsx")
    [table] = read_trials(tmp_path / "plan.xlsx", "Layout!B3:E7", layout="wide")
    assert dict(zip(zip(table.blocks, table.treatments), table.values)) == filled


# ------------------------------------------------- plan workbook and command

def test_plan_workbook_sheets_chart_and_read_back(tmp_path):
    layout = randomised_layout(["Control", "A", "B", "C"], 5, fixed_positions={"Control": 1}, seed=4)
    plan = plan_power(1.5, 1.0, 4, n_blocks=5, tests=("f", "tukey", "dunnett"))
    book = write_plan_book(tmp_path / "plan.xlsx", layout.to_dict(), plan)
    wb = openpyxl.load_workbook(book.path)
    assert wb.sheetnames == ["Trial layout", "Run order", "Plan"]
    assert len(wb["Plan"]._charts) == 1 and len(wb["Plan"]._charts[0].series) == 3
    texts = [c.value for row in wb["Run order"].iter_rows() for c in row if isinstance(c.value, str)]
    assert any("seed 4" in t for t in texts)
    # fill in the layout range and analyse exactly that range
    sheet, cells = book.layout_range.rsplit("!", 1)
    ws = wb[sheet.strip("'")]
    rows = list(ws[cells])
    assert [c.value for c in rows[0][1:]] == ["Control", "A", "B", "C"]
    for i, row in enumerate(rows[1:]):
        for j, cell in enumerate(row[1:]):
            cell.value = 20.0 + i + j * 0.5 + 0.1 * ((i * j) % 3)
    wb.save(book.path)
    [table] = read_trials(book.path, book.layout_range, layout="wide")
    assert len(table.values) == 20 and set(table.blocks) == set(layout.blocks)
    [named] = read_trials(book.path, "TrialLayout", layout="wide")
    assert named.values == table.values
    assert blocks_needed_table(plan).rows[0][1] == plan["tests"][0]["blocks_needed"]
    assert len(power_table_table(plan).rows) == len(plan["power_table"])


def test_replicated_plan_reads_back_from_the_run_order(tmp_path):
    layout = randomised_layout(3, 2, replicates=2, seed=6)
    book = write_plan_book(tmp_path / "rep.xlsx", layout.to_dict())
    assert book.layout_range is None and "--layout long" in book.analyze_command()
    wb = openpyxl.load_workbook(book.path)
    sheet, cells = book.run_order_range.rsplit("!", 1)
    rows = list(wb[sheet.strip("'")][cells])
    assert [c.value for c in rows[0]] == plan_run_order_table(layout.to_dict()).headers
    for k, row in enumerate(rows[1:]):
        row[3].value = float(k)
    wb.save(book.path)
    [table] = read_trials(book.path, book.run_order_range, layout="long", block="Block", treatment="Treatment",
                          responses=["Response"])
    assert len(table.values) == 12 and sorted(table.values) == [float(k) for k in range(12)]


def _run(argv):
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            code = cli.main(argv)
        except SystemExit as stop:  # argparse refusing an option
            code = stop.code
    return code, out.getvalue(), err.getvalue()


def test_plan_command_writes_the_plan_and_prints_seed_and_blocks(tmp_path):
    target = tmp_path / "next.xlsx"
    code, out, _ = _run(["plan", "--treatments", "Control,A,B", "--blocks", "4", "--fixed", "Control=1",
                         "--seed", "77", "--delta", "2", "--sigma2", "1.5", "--test", "f", "--test", "dunnett",
                         "--out", str(target)])
    assert code == 0
    assert "Randomisation seed: 77" in out and str(target) in out
    needed = blocks_needed(2, 1.5, 3, test="dunnett")
    assert f"Dunnett against the control, one comparison: {needed} blocks" in out
    wb = openpyxl.load_workbook(target)
    assert wb["Trial layout"]["A1"].value and "Plan" in wb.sheetnames


def test_plan_command_takes_sigma2_and_treatments_from_a_json_result(tmp_path):
    values = [[10.1, 11.3, 9.8], [10.9, 12.0, 10.2], [9.7, 11.1, 9.9], [10.4, 11.8, 10.6]]
    result = analyze_grid(values, blocks=list("1234"), treatments=["P", "Q", "R"]).to_dict()
    (tmp_path / "r.json").write_text(json.dumps(result, allow_nan=False))
    code, out, _ = _run(["plan", "--from-result", str(tmp_path / "r.json"), "--delta", "0.5", "--test", "lsd",
                         "--out", str(tmp_path / "p.xlsx")])
    assert code == 0
    needed = blocks_needed(0.5, result["summary"]["mse"], 3, test="lsd")
    assert f"{needed} blocks" in out and f"3 treatments x {needed} blocks" in out
    printed = re.search(r'--range "(.+?)!(.+?)"', out)
    ws = openpyxl.load_workbook(tmp_path / "p.xlsx")[printed.group(1).strip("'")]
    assert [c.value for c in ws[printed.group(2)][0][1:]] == ["P", "Q", "R"]


@pytest.mark.parametrize("argv", [
    ["plan", "--treatments", "3"],                                   # neither blocks nor delta
    ["plan", "--treatments", "3", "--blocks", "4", "--delta", "1"],  # delta without a variance
    ["plan", "--treatments", "3", "--blocks", "4", "--test", "anova"],
    ["plan", "--treatments", "3", "--blocks", "4", "--fixed", "T9=1"],
    ["plan", "--treatments", "3", "--blocks", "4", "--fixed", "T1"],
    ["plan", "--treatments", "3", "--blocks", "4", "--delta", "1", "--sigma2", "-2"],
    ["plan", "--treatments", "3", "--sigma2", "1", "--from-result", "r.json", "--delta", "1"],
    ["plan", "--from-result", "missing.json", "--delta", "1"],
])
def test_plan_command_refuses_bad_options_with_exit_2(argv, tmp_path):
    code, _, err = _run(argv + ["--out", str(tmp_path / "x.xlsx")])
    assert code == 2 and err
    assert not (tmp_path / "x.xlsx").exists()


# ------------------------------------------- worksheet functions and the job sheet

def test_worksheet_blocks_needed_is_the_plan_table():
    from workbook_tools.excel import functions as udf

    grid = udf.WBT_BLOCKS_NEEDED(2.0, 1.5, "Control,A,B,C", None, 0.9, "f, tukey, dunnett", 5.0)
    plan = plan_power(2.0, 1.5, 4, n_blocks=5, power=0.9, tests=("f", "tukey", "dunnett"))
    assert grid == blocks_needed_table(plan).grid()
    assert [row[1] for row in grid[1:]] == [blocks_needed(2.0, 1.5, 4, power=0.9, test=t)
                                           for t in ("f", "tukey", "dunnett")]
    table = udf.WBT_POWER_TABLE(2.0, 1.5, 4.0)
    assert table[0][:2] == ["Blocks", "Error df"] and table[1][0] == 2
    assert udf.WBT_BLOCKS_NEEDED("x", 1, 3) == [["The difference worth detecting must be a number; the cell "
                                                 "holds 'x'."]]
    assert "must be one of" in udf.WBT_BLOCKS_NEEDED(1, 1, 3, None, None, "anova")[0][0]


def test_worksheet_run_order_repeats_the_seeded_layout():
    from workbook_tools.excel import functions as udf

    grid = udf.WBT_RUN_ORDER([["C", "A", "B"]], 3.0, 11.0, None, "C=1")
    layout = randomised_layout(["C", "A", "B"], 3, fixed_positions={"C": 1}, seed=11)
    assert [row[2] for row in grid[1:]] == [t for order in layout.run_orders for t in order]
    assert udf.WBT_RUN_ORDER("A,B", 2, None) == [["Give the seed."]]


def _job_book(path):
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "wbt-jobs"
    ws.append(["Range", "Kind", "Treatments", "Blocks", "Fixed", "Seed", "Delta", "Sigma2", "Tests"])
    ws.append([None, "plan", "Control,A,B", None, "Control=1", None, 1.0, 0.2, "f, dunnett"])
    ws.append([None, "plan", 3, None, None, 5, None, None, None])  # neither blocks nor delta
    ws.append([None, "survey", 3, 4])
    wb.save(path)


def test_plan_rows_of_the_job_sheet(tmp_path):
    from workbook_tools.jobs import run_file

    _job_book(tmp_path / "jobs.xlsx")
    outcomes, target = run_file(tmp_path / "jobs.xlsx", tmp_path / "out.xlsx")
    assert outcomes[0].done and outcomes[0].sheets == ["wbt-plan 2"]
    assert "number of blocks" in outcomes[1].status and "kind of job" in outcomes[2].status
    wb = openpyxl.load_workbook(target)
    assert {"Plan 2 layout", "Plan 2 run order", "wbt-plan 2"} <= set(wb.sheetnames)
    seed = wb["wbt-jobs"]["F2"].value  # the drawn seed, written back into the row
    needed = max(blocks_needed(1.0, 0.2, 3, test=t) for t in ("f", "dunnett"))
    layout = randomised_layout(["Control", "A", "B"], needed, fixed_positions={"Control": 1}, seed=seed)
    run_rows = [[c.value for c in row] for row in wb["Plan 2 run order"].iter_rows() if row[1].value in (1, 2, 3)]
    assert [r[2] for r in run_rows] == [t for order in layout.run_orders for t in order]
    # type values into the layout, run again: the typed sheet stays, the plan sheet is rewritten
    ws = wb["Plan 2 layout"]
    header = next(r for r in ws.iter_rows() if r[1].value == "Control")
    ws.cell(header[0].row + 1, 2, 12.5)
    wb.save(target)
    again, _ = run_file(target, tmp_path / "again.xlsx")
    assert again[0].done
    wb2 = openpyxl.load_workbook(tmp_path / "again.xlsx")
    assert wb2["Plan 2 layout"].cell(header[0].row + 1, 2).value == 12.5
    assert wb2.sheetnames.count("wbt-plan 2") == 1
