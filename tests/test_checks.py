"""Assumption checks, Q-Q points and the Friedman test against published figures and
reference libraries (scipy; statsmodels as a test-only reference)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy import stats
from statsmodels.stats.anova import anova_lm

from workbook_tools.analysis.checks import (
    CheckOutcome,
    additivity_check,
    equal_variance_check,
    friedman_test,
    normality_check,
    qq_points,
    reference_line,
)
from workbook_tools.analysis.errors import TrialInputError

WORKED = Path(__file__).parent / "data" / "worked"


def json_safe(outcome) -> dict:
    data = outcome.to_dict()
    json.dumps(data, allow_nan=False)
    return data


# ---------------------------------------------------------------- additivity (Tukey 1 df)

def balanced_residualize(rows: np.ndarray, cols: np.ndarray):
    """Residual after row and column effects in a complete two-way table."""
    def residualize(v):
        v = np.asarray(v, dtype=float)
        row_means = np.bincount(rows, v) / np.bincount(rows)
        col_means = np.bincount(cols, v) / np.bincount(cols)
        return v - row_means[rows] - col_means[cols] + v.mean()
    return residualize


def lstsq_residualize(rows: np.ndarray, cols: np.ndarray):
    """Residual after a least-squares fit on treatment and block dummy columns."""
    design = np.column_stack([np.ones(rows.size)]
                             + [(rows == k).astype(float) for k in range(1, rows.max() + 1)]
                             + [(cols == k).astype(float) for k in range(1, cols.max() + 1)])

    def residualize(v):
        v = np.asarray(v, dtype=float)
        return v - design @ np.linalg.lstsq(design, v, rcond=None)[0]
    return residualize


def additive_fit(data: pd.DataFrame):
    """statsmodels additive fit and the statsmodels route to Tukey's test."""
    model = smf.ols("y ~ C(t) + C(b)", data).fit()
    extended = data.assign(fitted_sq=model.fittedvalues ** 2)
    table = anova_lm(smf.ols("y ~ C(t) + C(b) + I(fitted_sq)", extended).fit(), typ=1)
    return model, table.loc["I(fitted_sq)"], table.loc["Residual"]


def impurity() -> pd.DataFrame:
    data = pd.read_csv(WORKED / "E4_impurity_montgomery_tukey1df.csv")
    data = data.rename(columns={"temperature": "t", "pressure": "b"})
    data["ti"] = pd.factorize(data["t"], sort=True)[0]
    data["bi"] = pd.factorize(data["b"], sort=True)[0]
    return data


def test_tukey_one_df_on_montgomery_impurity_example():
    data = impurity()
    rows, cols, y = data["ti"].to_numpy(), data["bi"].to_numpy(), data["y"].to_numpy(float)
    residualize = balanced_residualize(rows, cols)
    residuals = residualize(y)
    fitted = y - residuals
    error_ss = float(residuals @ residuals)
    # tests/data/SOURCES.md (library, statsmodels): error SS 2.0 on 8 df.
    assert error_ss == pytest.approx(2.0, rel=1e-12)
    outcome = additivity_check(residuals, fitted, residualize, error_ss, 8)
    # Montgomery, Design and Analysis of Experiments, impurity example for Tukey's test
    # (memory, via tests/data/SOURCES.md): SS for non-additivity 0.0985, F 0.36 on (1, 7).
    assert outcome.extra["ss_nonadditivity"] == pytest.approx(0.0985, abs=5e-5)
    assert outcome.statistic == pytest.approx(0.36, abs=0.005)
    assert outcome.df == (1, 7)
    # tests/data/SOURCES.md (library): p 0.566.
    assert outcome.p == pytest.approx(0.566, abs=0.001)
    assert outcome.passed is True
    assert outcome.extra["ss_remainder"] == pytest.approx(2.0 - 0.0985, abs=5e-5)
    # statsmodels route: fitted squared as an extra regressor after blocks and treatments.
    _, nonadd, remainder = additive_fit(data)
    assert outcome.extra["ss_nonadditivity"] == pytest.approx(nonadd["sum_sq"], rel=1e-9)
    assert outcome.extra["ss_remainder"] == pytest.approx(remainder["sum_sq"], rel=1e-9)
    assert outcome.statistic == pytest.approx(nonadd["F"], rel=1e-9)
    assert outcome.p == pytest.approx(nonadd["PR(>F)"], rel=1e-9)
    # Tukey's (1949) original form: (sum y a_i b_j)^2 / (sum a_i^2 sum b_j^2), with a_i, b_j
    # the row and column effects.
    grand = y.mean()
    a = np.bincount(rows, y) / np.bincount(rows) - grand
    b = np.bincount(cols, y) / np.bincount(cols) - grand
    classical = (y @ (a[rows] * b[cols])) ** 2 / ((a @ a) * (b @ b))
    assert outcome.extra["ss_nonadditivity"] == pytest.approx(classical, rel=1e-9)
    assert json_safe(outcome)["df"] == [1, 7]


def test_tukey_one_df_with_a_missing_cell_matches_statsmodels():
    data = impurity().drop(index=7).reset_index(drop=True)
    model, nonadd, remainder = additive_fit(data)
    residualize = lstsq_residualize(data["ti"].to_numpy(), data["bi"].to_numpy())
    outcome = additivity_check(model.resid.to_numpy(), model.fittedvalues.to_numpy(),
                               residualize, model.ssr, int(model.df_resid))
    assert outcome.df == (1, int(model.df_resid) - 1)
    assert outcome.extra["ss_nonadditivity"] == pytest.approx(nonadd["sum_sq"], rel=1e-8)
    assert outcome.extra["ss_remainder"] == pytest.approx(remainder["sum_sq"], rel=1e-8)
    assert outcome.statistic == pytest.approx(nonadd["F"], rel=1e-8)
    assert outcome.p == pytest.approx(nonadd["PR(>F)"], rel=1e-8)


@settings(max_examples=60, deadline=None)
@given(st.integers(2, 6), st.integers(3, 6), st.integers(0, 2**32 - 1),
       st.floats(-1e4, 1e4))
def test_centring_fitted_values_does_not_change_the_test(t, b, seed, shift):
    rng = np.random.default_rng(seed)
    rows, cols = np.repeat(np.arange(t), b), np.tile(np.arange(b), t)
    y = rng.normal(size=t * b) * 3 + rows * rng.normal() + cols * rng.normal() + shift
    residualize = balanced_residualize(rows, cols)
    residuals = residualize(y)
    fitted = y - residuals
    error_ss = float(residuals @ residuals)
    outcome = additivity_check(residuals, fitted, residualize, error_ss, (t - 1) * (b - 1))
    z_r = residualize(fitted ** 2)  # the uncentred square, as written by Tukey
    if outcome.extra is None:
        return
    uncentred = (residuals @ z_r) ** 2 / (z_r @ z_r)
    assert outcome.extra["ss_nonadditivity"] == pytest.approx(uncentred, rel=1e-6, abs=1e-9)
    assert 0.0 <= outcome.extra["ss_nonadditivity"] <= error_ss * (1 + 1e-12)
    json_safe(outcome)


def test_tukey_not_available_cases_are_clean():
    rows, cols = np.repeat(np.arange(3), 3), np.tile(np.arange(3), 3)
    residualize = balanced_residualize(rows, cols)
    u, v = np.array([-1.0, 0.0, 1.0]), np.array([-2.0, 0.5, 1.5])
    additive = 10 + u[rows] + v[cols]
    # Exactly additive data: no error to test against.
    res = residualize(additive)
    outcome = additivity_check(res, additive - res, residualize, float(res @ res), 4)
    assert outcome.passed is None and outcome.statistic is None
    # Too few error df.
    assert additivity_check(res, additive, residualize, 1.0, 1).passed is None
    # Constant fitted values: no curvature.
    flat = additivity_check(np.ones(9), np.full(9, 3.0), residualize, 9.0, 4)
    assert flat.passed is None and flat.extra is None
    # y = u_i + v_j + u_i v_j exactly: all of the error is non-additivity.
    y = additive + u[rows] * v[cols]
    res = residualize(y)
    outcome = additivity_check(res, y - res, residualize, float(res @ res), 4)
    data = json_safe(outcome)
    assert outcome.statistic is None and outcome.p is None and outcome.passed is None
    assert data["extra"]["ss_nonadditivity"] == pytest.approx(float(res @ res))
    assert data["df"] == [1, 3]


def test_tukey_detects_multiplicative_effects():
    rows, cols = np.repeat(np.arange(5), 6), np.tile(np.arange(6), 5)
    noise = np.random.default_rng(3).normal(scale=0.01, size=30)
    y = np.exp(0.5 * rows + 0.4 * cols + noise)  # proportional effects
    residualize = balanced_residualize(rows, cols)
    res = residualize(y)
    outcome = additivity_check(res, y - res, residualize, float(res @ res), 20)
    assert outcome.passed is False and "log" in outcome.verdict


# ---------------------------------------------------------------- normality

@settings(max_examples=40, deadline=None)
@given(st.integers(3, 300), st.integers(0, 2**32 - 1))
def test_normality_matches_scipy_shapiro(n, seed):
    values = np.random.default_rng(seed).standard_t(3, size=n)
    outcome = normality_check(values)
    expected = stats.shapiro(values)
    assert outcome.method == "Shapiro-Wilk"
    assert outcome.statistic == pytest.approx(expected.statistic, rel=1e-12)
    assert outcome.p == pytest.approx(expected.pvalue, rel=1e-12)
    assert outcome.passed is bool(expected.pvalue >= 0.05)
    json_safe(outcome)


def test_normality_above_5000_uses_dagostino_pearson():
    values = np.random.default_rng(1).exponential(size=6000)
    outcome = normality_check(values)
    expected = stats.normaltest(values)
    assert "D'Agostino-Pearson" in outcome.method
    assert outcome.p == pytest.approx(expected.pvalue, rel=1e-12, abs=1e-300)
    assert outcome.passed is False and "Q-Q" in outcome.verdict


def test_normality_ignores_missing_cells():
    values = np.array([0.3, np.nan, -1.2, 0.8, 0.1, np.nan, -0.5])
    outcome = normality_check(values)
    assert outcome.p == pytest.approx(stats.shapiro(values[np.isfinite(values)]).pvalue)


@pytest.mark.parametrize("values, kwargs", [
    ([0.5, -0.5], {}),
    ([], {}),
    ([0.0] * 6, {}),
    ([2.0] * 6, {}),
    ([1e-15, -2e-15, 1e-15, 0.0], {"zero_tolerance": 1e-12}),
])
def test_normality_not_available(values, kwargs):
    outcome = normality_check(values, **kwargs)
    assert outcome.passed is None and outcome.p is None
    assert outcome.verdict.startswith("Not available")
    json_safe(outcome)


# ---------------------------------------------------------------- equal variance

@settings(max_examples=40, deadline=None)
@given(st.integers(2, 6), st.integers(3, 8), st.integers(0, 2**32 - 1))
def test_brown_forsythe_matches_scipy_and_an_anova_of_deviations(t, b, seed):
    rng = np.random.default_rng(seed)
    index = np.repeat(np.arange(t), b)
    residuals = rng.normal(size=t * b) * (1 + index)
    outcome = equal_variance_check(residuals, index, t)
    groups = [residuals[index == k] for k in range(t)]
    expected = stats.levene(*groups, center="median")
    assert outcome.statistic == pytest.approx(expected.statistic, rel=1e-9)
    assert outcome.p == pytest.approx(expected.pvalue, rel=1e-9)
    assert outcome.df == (t - 1, t * b - t)
    # Brown & Forsythe (1974): one-way ANOVA of absolute deviations from group medians.
    deviations = np.abs(residuals - np.array([np.median(g) for g in groups])[index])
    table = anova_lm(smf.ols("d ~ C(g)", pd.DataFrame({"d": deviations, "g": index})).fit())
    assert outcome.statistic == pytest.approx(table.loc["C(g)", "F"], rel=1e-9)
    json_safe(outcome)


def test_brown_forsythe_drops_small_groups_and_says_so():
    residuals = np.array([1.0, -2.0, 0.5, 3.0, -1.0, 0.2, 4.0, np.nan])
    index = np.array([0, 0, 0, 1, 1, 1, 2, 2])
    outcome = equal_variance_check(residuals, index, 4)
    expected = stats.levene(residuals[:3], residuals[3:6], center="median")
    assert outcome.p == pytest.approx(expected.pvalue)
    assert "2 treatments with fewer than 2 residuals" in outcome.verdict


@pytest.mark.parametrize("residuals, index", [
    ([1.0, -1.0, 2.0, -2.0], [0, 0, 1, 1]),  # two per treatment: no within variation
    ([1.0, -1.0, 2.0], [0, 0, 0]),  # one treatment
    ([0.0] * 6, [0, 0, 0, 1, 1, 1]),  # perfect fit
])
def test_brown_forsythe_not_available(residuals, index):
    outcome = equal_variance_check(residuals, index, 2)
    assert outcome.passed is None and outcome.statistic is None
    json_safe(outcome)


def test_brown_forsythe_refuses_mismatched_lengths():
    with pytest.raises(TrialInputError):
        equal_variance_check([1.0, 2.0, 3.0], [0, 1], 2)


# ---------------------------------------------------------------- Q-Q points

def test_qq_points_use_blom_positions_and_leave_out_undefined_residuals():
    values = np.array([0.4, np.nan, -1.3, 2.2, 0.0, -0.1])
    points = qq_points(values)
    n = 5
    # Blom (1958): plotting positions (i - 3/8) / (n + 1/4).
    expected = stats.norm.ppf([(i - 0.375) / (n + 0.25) for i in range(1, n + 1)])
    np.testing.assert_allclose(points["theoretical"], expected, rtol=1e-12)
    np.testing.assert_array_equal(points["sample"], [-1.3, -0.1, 0.0, 0.4, 2.2])
    assert set(points) == {"theoretical", "sample", "plotting_position"}
    assert points["plotting_position"] == "Blom (i - 3/8)/(n + 1/4)"


def test_reference_line_through_quartiles():
    x = np.linspace(-2, 2, 9)
    assert reference_line(x, 3.0 + 2.0 * x) == pytest.approx((3.0, 2.0))
    assert reference_line([0.0], [1.5]) == (0.0, 1.0)
    assert reference_line([], []) == (0.0, 1.0)


# ---------------------------------------------------------------- Friedman

def test_friedman_on_hollander_wolfe_rounding_first_base():
    data = pd.read_csv(WORKED / "E5_rounding_first_base_friedman.csv")
    grid = data.pivot(index="player", columns="method", values="y").to_numpy()
    outcome = friedman_test(grid)
    # Hollander & Wolfe (1973), Nonparametric Statistical Methods, p. 140 (via
    # tests/data/SOURCES.md): chi-square 11.143 with the tie correction (10.636 without),
    # df 2, p 0.003805.
    assert outcome.statistic == pytest.approx(11.143, abs=5e-4)
    assert outcome.df == 2
    assert outcome.p == pytest.approx(0.003805, abs=5e-7)
    assert outcome.kendall_w == pytest.approx(11.143 / (22 * 2), abs=1e-4)
    expected = stats.friedmanchisquare(*grid.T)
    assert outcome.statistic == pytest.approx(expected.statistic, rel=1e-12)
    data = json_safe(outcome)
    assert set(data) == {"statistic", "df", "p", "kendall_w", "verdict", "method"}


@settings(max_examples=80, deadline=None)
@given(st.integers(2, 12), st.integers(3, 7), st.integers(0, 2**32 - 1), st.integers(1, 5))
def test_friedman_matches_scipy_with_ties(b, t, seed, levels):
    grid = np.random.default_rng(seed).integers(0, levels, size=(b, t)).astype(float)
    assume(any(len(set(row)) > 1 for row in grid))
    outcome = friedman_test(grid)
    expected = stats.friedmanchisquare(*grid.T)
    assert outcome.statistic == pytest.approx(expected.statistic, rel=1e-9)
    assert outcome.p == pytest.approx(expected.pvalue, rel=1e-9)
    assert 0.0 <= outcome.kendall_w <= 1.0 + 1e-12
    assert outcome.kendall_w == pytest.approx(expected.statistic / (b * (t - 1)), rel=1e-9)


def test_friedman_all_ties_and_two_treatments():
    tied = friedman_test(np.ones((4, 3)))
    assert tied.statistic is None and tied.p is None and "tied" in tied.verdict
    json_safe(tied)
    # Two treatments: the first wins in 6 of 8 blocks, one block tied. By hand: rank sums
    # deviate by +-2.5 from 12, rank deviations squared sum to 7 * 0.5 = 3.5, so
    # chi2 = 1 * 2 * 2.5**2 / 3.5.
    grid = np.array([[2, 1]] * 6 + [[1, 2], [1, 1]], dtype=float)
    outcome = friedman_test(grid)
    assert outcome.statistic == pytest.approx(2 * 2.5 ** 2 / 3.5)
    assert outcome.df == 1


def test_friedman_handles_a_large_grid():
    grid = np.random.default_rng(0).integers(0, 20, size=(10_000, 50)).astype(float)
    outcome = friedman_test(grid)
    expected = stats.friedmanchisquare(*grid.T)
    assert outcome.statistic == pytest.approx(expected.statistic, rel=1e-9)


@pytest.mark.parametrize("grid", [np.ones((1, 3)), np.ones((3, 1)), [[1.0, np.nan], [2, 3]]])
def test_friedman_refuses_unusable_grids(grid):
    with pytest.raises(TrialInputError):
        friedman_test(grid)


def test_check_outcome_to_dict_replaces_non_finite_numbers():
    outcome = CheckOutcome("normality", "x", float("nan"), float("inf"), None, None, "v",
                           {"slope": np.float64("nan"), "n": np.int64(3)})
    assert json_safe(outcome) == {"name": "normality", "method": "x", "statistic": None,
                                  "p": None, "df": None, "passed": None, "verdict": "v",
                                  "extra": {"slope": None, "n": 3}}


@settings(max_examples=60, deadline=None)
@given(st.integers(1, 6), st.integers(1, 8), st.integers(0, 2**31 - 1), st.integers(1, 5))
def test_average_ranks_match_scipy_rankdata(b, t, seed, levels):
    # Reference: scipy.stats.rankdata(method="average") row by row, with many ties.
    from workbook_tools.analysis.checks import average_ranks

    values = np.random.default_rng(seed).integers(0, levels, (b, t)).astype(float)
    np.testing.assert_allclose(average_ranks(values), stats.rankdata(values, axis=1))


@pytest.mark.parametrize("n", [20, 57, 5001, 60000])
@pytest.mark.parametrize("shape", ["normal", "exponential", "t3", "uniform"])
def test_dagostino_pearson_matches_scipy_normaltest(n, shape):
    # Reference: scipy.stats.normaltest (D'Agostino 1970; Anscombe & Glynn 1983), same formulas.
    from workbook_tools.analysis.checks import dagostino_pearson

    rng = np.random.default_rng(n)
    draw = {"normal": rng.normal, "exponential": rng.exponential, "uniform": rng.uniform,
            "t3": lambda size: rng.standard_t(3, size)}[shape]
    values = draw(size=n)
    statistic, p = dagostino_pearson(values)
    reference = stats.normaltest(values)
    assert statistic == pytest.approx(reference.statistic, rel=1e-10)
    assert p == pytest.approx(reference.pvalue, rel=1e-8, abs=1e-300)
