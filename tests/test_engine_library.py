"""The engine against a general-purpose reference library: statsmodels OLS + anova_lm.

The reference route fits a dense dummy-variable model, ``y ~ C(treatment) + C(block)``
(and ``* `` for the interaction model), with statsmodels; Type II sums of squares
are the treatment SS adjusted for blocks and the block SS adjusted for treatments.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

statsmodels_api = pytest.importorskip("statsmodels.formula.api")
from statsmodels.stats.anova import anova_lm  # noqa: E402

from workbook_tools import analyze_records  # noqa: E402


def _random_trial(seed, n_blocks, n_treatments, *, missing=0, replicates=1, unequal=False):
    rng = np.random.default_rng(seed)
    rows = []
    block_effect = rng.normal(0, 3, n_blocks)
    treatment_effect = rng.normal(0, 2, n_treatments)
    cells = [(b, t) for b in range(n_blocks) for t in range(n_treatments)]
    drop = set()
    if missing:
        # never drop a whole treatment or break connectedness: drop cells off the first block
        candidates = [c for c in cells if c[0] != 0]
        drop = {candidates[i] for i in rng.choice(len(candidates), missing, replace=False)}
    for b, t in cells:
        if (b, t) in drop:
            continue
        count = replicates + (int(rng.integers(0, 3)) if unequal else 0)
        for _ in range(count):
            rows.append((f"B{b + 1}", f"T{t + 1}", 50 + block_effect[b] + treatment_effect[t] + rng.normal()))
    return pd.DataFrame(rows, columns=["block", "treatment", "y"])


def _reference(frame, formula):
    fit = statsmodels_api.ols(formula, data=frame).fit()
    return fit, anova_lm(fit, typ=2)


def _ours(frame, **options):
    return analyze_records(frame["block"], frame["treatment"], frame["y"], **options)


def _row(result, source):
    return result.anova_row(source)


CASES = [
    dict(seed=1, n_blocks=5, n_treatments=4),
    dict(seed=2, n_blocks=8, n_treatments=6, missing=3),
    dict(seed=3, n_blocks=4, n_treatments=3, replicates=1, unequal=True),
    dict(seed=4, n_blocks=12, n_treatments=7, missing=9),
    dict(seed=5, n_blocks=3, n_treatments=10, missing=1),
]


@pytest.mark.parametrize("case", CASES)
def test_additive_anova_matches_statsmodels_type2(case):
    frame = _random_trial(**case)
    _, table = _reference(frame, "y ~ C(treatment) + C(block)")
    ours = _ours(frame)
    for source, label in [("treatment", "C(treatment)"), ("block", "C(block)"), ("error", "Residual")]:
        row = _row(ours, source)
        assert row.df == int(table.loc[label, "df"])
        assert row.ss == pytest.approx(table.loc[label, "sum_sq"], rel=1e-10)
    for source, label in [("treatment", "C(treatment)"), ("block", "C(block)")]:
        assert _row(ours, source).f == pytest.approx(table.loc[label, "F"], rel=1e-10)
        assert _row(ours, source).p == pytest.approx(table.loc[label, "PR(>F)"], rel=1e-8)


@pytest.mark.parametrize("case", CASES)
def test_adjusted_means_residuals_and_leverage_match_statsmodels(case):
    frame = _random_trial(**case)
    ours = _ours(frame, compare="lsd")   # unadjusted pair p-values, as statsmodels' t_test gives them
    blocks, treatments = list(ours.blocks), list(ours.treatments)
    # dense dummy model built here, fitted by statsmodels: intercept, treatments 2..t, blocks 2..b
    t_dummies = (frame["treatment"].to_numpy(dtype=object)[:, None] == np.array(treatments[1:])[None, :]).astype(float)
    b_dummies = (frame["block"].to_numpy(dtype=object)[:, None] == np.array(blocks[1:])[None, :]).astype(float)
    exog = np.column_stack([np.ones(len(frame)), t_dummies, b_dummies])
    import statsmodels.api as sm

    fit = sm.OLS(frame["y"].values, exog).fit()
    block_average = np.full(len(blocks) - 1, 1.0 / len(blocks))
    contrasts = np.array([
        np.concatenate([[1.0], np.eye(len(treatments))[j, 1:], block_average]) for j in range(len(treatments))
    ])                                                  # least-squares mean of each treatment
    reference_means = contrasts @ fit.params
    reference_se = np.sqrt(np.einsum("ij,jk,ik->i", contrasts, fit.cov_params(), contrasts))
    assert [m.adjusted_mean for m in ours.means] == pytest.approx(reference_means, rel=1e-10)
    assert [m.se for m in ours.means] == pytest.approx(reference_se, rel=1e-9)
    # standard error of each pairwise difference
    for pair in ours.comparisons.pairs:
        i, j = treatments.index(pair.first), treatments.index(pair.second)
        test = fit.t_test(contrasts[i] - contrasts[j])
        assert pair.se == pytest.approx(float(np.squeeze(test.sd)), rel=1e-9)
        assert pair.p == pytest.approx(float(np.squeeze(test.pvalue)), rel=1e-7, abs=1e-14)
    influence = fit.get_influence()
    assert ours.residuals.residual == pytest.approx(fit.resid, abs=1e-9)
    assert ours.residuals.leverage == pytest.approx(influence.hat_matrix_diag, abs=1e-10)
    assert ours.residuals.standardized == pytest.approx(influence.resid_studentized_internal, rel=1e-8)


@pytest.mark.parametrize("seed,unequal", [(11, False), (12, True)])
def test_interaction_model_matches_statsmodels(seed, unequal):
    frame = _random_trial(seed, 4, 3, replicates=2, unequal=unequal)
    _, table = _reference(frame, "y ~ C(treatment) * C(block)")
    fixed = _ours(frame, block_model="fixed")
    for source, label in [("treatment", "C(treatment)"), ("block", "C(block)"),
                          ("interaction", "C(treatment):C(block)"), ("error", "Residual")]:
        assert _row(fixed, source).ss == pytest.approx(table.loc[label, "sum_sq"], rel=1e-10)
        assert _row(fixed, source).df == int(table.loc[label, "df"])
    assert _row(fixed, "treatment").f == pytest.approx(table.loc["C(treatment)", "F"], rel=1e-10)
    # random blocks: treatment tested against the interaction mean square
    random = _ours(frame, block_model="random")
    ms_t = table.loc["C(treatment)", "sum_sq"] / table.loc["C(treatment)", "df"]
    ms_i = table.loc["C(treatment):C(block)", "sum_sq"] / table.loc["C(treatment):C(block)", "df"]
    expected_f = ms_t / ms_i
    assert _row(random, "treatment").f == pytest.approx(expected_f, rel=1e-10)
    assert _row(random, "treatment").p == pytest.approx(
        stats.f.sf(expected_f, table.loc["C(treatment)", "df"], table.loc["C(treatment):C(block)", "df"]), rel=1e-9)
    assert random.summary.treatment_error == "interaction"


def test_tukey_and_bonferroni_against_scipy_route():
    # Reference route: scipy.stats.studentized_range on each pair's q = |d| / SED * sqrt(2)
    frame = _random_trial(21, 6, 5, missing=2)
    ours = _ours(frame, compare="tukey")
    df = ours.error_term.df
    for pair in ours.comparisons.pairs[:4]:
        expected = stats.studentized_range.sf(abs(pair.statistic) * np.sqrt(2), 5, df)
        assert pair.p == pytest.approx(expected, rel=1e-6, abs=1e-9)
    bonferroni = _ours(frame, compare="bonferroni")
    lsd = _ours(frame, compare="lsd")
    for b, l in zip(bonferroni.comparisons.pairs, lsd.comparisons.pairs):
        assert b.p == pytest.approx(min(1.0, 10 * l.p), rel=1e-12)


def test_holm_matches_statsmodels_multipletests():
    from statsmodels.stats.multitest import multipletests

    frame = _random_trial(22, 6, 5)
    holm = _ours(frame, compare="holm")
    raw = [p.p for p in _ours(frame, compare="lsd").comparisons.pairs]
    expected = multipletests(raw, method="holm")[1]
    assert [p.p for p in holm.comparisons.pairs] == pytest.approx(expected, rel=1e-12)


def test_dunnett_balanced_against_scipy_multivariate_t():
    # Balanced blocks: the comparisons with the control are equicorrelated (0.5);
    # the critical value solves P(max |T_i| <= c) = 0.95 for scipy's multivariate t.
    frame = _random_trial(23, 6, 4)
    ours = _ours(frame, compare="dunnett", control="T1")
    df = ours.error_term.df
    corr = np.full((3, 3), 0.5) + 0.5 * np.eye(3)
    c = ours.comparisons.critical_value
    mvt = stats.multivariate_t(loc=np.zeros(3), shape=corr, df=df, seed=7)
    coverage = mvt.cdf(np.full(3, c), lower_limit=np.full(3, -c))
    assert coverage == pytest.approx(0.95, abs=2e-4)
    assert [p.second for p in ours.comparisons.pairs] == ["T1", "T1", "T1"]


def test_a_repeated_dunnett_analysis_takes_the_memoised_critical_value():
    # The memoised value is the one computed afresh (checked above against scipy's multivariate t).
    from workbook_tools.analysis import compare, distributions

    frame = _random_trial(29, 5, 4)
    compare._dunnett_critical_memo.cache_clear()
    first = _ours(frame, compare="dunnett", control="T1").comparisons.critical_value
    again = _ours(frame, compare="dunnett", control="T1").comparisons.critical_value
    assert compare._dunnett_critical_memo.cache_info().hits >= 1 and again == first
    corr = np.full((3, 3), 0.5) + 0.5 * np.eye(3)
    df = _ours(frame, compare="dunnett", control="T1").error_term.df
    assert first == pytest.approx(distributions.dunnett_critical_general(0.05, df, corr), rel=1e-12)
