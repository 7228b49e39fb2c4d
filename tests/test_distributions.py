"""Studentized range and Dunnett distributions against published tables and scipy."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from workbook_tools.analysis.distributions import (
    dunnett_critical,
    dunnett_critical_general,
    dunnett_sf,
    dunnett_sf_general,
    product_form_weights,
    studentized_range_cdf,
    studentized_range_quantile,
    studentized_range_sf,
)

K_GRID = [2, 3, 5, 10, 20, 50, 100]
DF_GRID = [1, 2, 5, 10, 20, 60, 120, 1000, np.inf]


def _probe_points(k, df):
    """q values with upper tails from about 0.5 down to about 1e-8 (Bonferroni)."""
    alphas = np.array([0.5, 1e-2, 1e-4, 1e-8])
    pairs = alphas / (k * (k - 1))
    t = stats.norm.isf(pairs) if np.isinf(df) else stats.t.isf(pairs, df)
    return np.sqrt(2.0) * t


@pytest.mark.parametrize("k", K_GRID)
@pytest.mark.parametrize("df", DF_GRID)
def test_range_cdf_sf_match_scipy(k, df):
    # reference: scipy.stats.studentized_range (adaptive integration).  scipy's
    # own error is up to about 5e-13 absolute (at sf = 1e-8 it is off by ~1e-7
    # relative where k = 2 gives the exact value), hence atol; and for df <= 2
    # its integral returns 0 or loses digits at the huge q of small tails, so only
    # the point near sf = 0.5 is compared (the far tail is covered by the exact k = 2 test)
    q = _probe_points(k, df)
    if df <= 2:
        q = q[:1]
    ref_sf = stats.studentized_range.sf(q, k, df)
    ref_cdf = stats.studentized_range.cdf(q, k, df)
    np.testing.assert_allclose(studentized_range_sf(q, k, df), ref_sf, rtol=1e-7, atol=1e-12)
    np.testing.assert_allclose(studentized_range_cdf(q, k, df), ref_cdf, rtol=1e-7, atol=1e-12)


def test_range_df_large_between_scipy_values():
    # scipy.stats.studentized_range uses its infinite-df integral for df >= 1e5,
    # so df = 1e6 is checked by the O(1/df) approach to the limit: the gap to
    # scipy's df = inf is 1/100 of scipy's gap at df = 1e4
    q = np.array([2.0, 4.0, 6.0])
    limit = stats.studentized_range.sf(q, 5, np.inf)
    gap_1e4 = stats.studentized_range.sf(q, 5, 1e4) - limit
    ratio = (studentized_range_sf(q, 5, 1e6) - limit) / gap_1e4
    np.testing.assert_allclose(ratio, 0.01, rtol=0.05)


@pytest.mark.parametrize("k, df", [(3, 5), (10, 20), (50, 60), (5, np.inf), (100, 1000), (20, 1)])
def test_range_quantile_matches_scipy(k, df):
    # reference: scipy.stats.studentized_range.ppf
    p = np.array([0.5, 0.9, 0.95, 0.99, 0.999])
    ref = stats.studentized_range.ppf(p, k, df)
    np.testing.assert_allclose(studentized_range_quantile(p, k, df), ref, rtol=1e-7)


@pytest.mark.parametrize("df", [1, 2, 7, 30, 1e6])
def test_range_two_means_is_scaled_t(df):
    # exact identity: for k = 2, Q / sqrt(2) = |T_df|, so P(Q > q) = 2 P(T > q / sqrt 2);
    # reference scipy.stats.t; this checks the far tail down to 1e-15
    q = np.geomspace(0.05, 1e4, 40)
    ref = 2 * stats.t.sf(q / np.sqrt(2), df)
    keep = ref > 1e-15
    np.testing.assert_allclose(studentized_range_sf(q, 2, df)[keep], ref[keep], rtol=1e-7)


@pytest.mark.parametrize("p, k, df, table", [
    (0.95, 2, 10, 3.151),     # Harter (1960), Ann. Math. Statist. 31, p. 1122, Table 3
    (0.95, 8, 20, 4.768),     # Harter (1960), Table 3
    (0.95, 20, np.inf, 5.012),  # Harter (1960), Table 3
    (0.99, 8, 10, 6.875),     # Harter (1960), Table 3
    (0.95, 3, np.inf, 3.314),  # (memory) usual Tukey HSD table, q(0.05; 3, inf)
    (0.95, 4, 20, 3.958),     # (memory) usual Tukey HSD table, q(0.05; 4, 20)
])
def test_range_quantile_published(p, k, df, table):
    assert round(studentized_range_quantile(p, k, df), 3) == pytest.approx(table, abs=1e-9)


def test_range_scalar_in_scalar_out():
    assert isinstance(studentized_range_cdf(3.0, 4, 12), float)
    assert isinstance(studentized_range_quantile(0.95, 4, 12), float)
    assert studentized_range_sf([0.0], 4, 12)[0] == 1.0


@settings(max_examples=40, deadline=None)
@given(k=st.integers(2, 40), df=st.sampled_from([1, 3, 8, 25, 200, np.inf]),
       q=st.lists(st.floats(0.05, 30.0), min_size=2, max_size=8))
def test_range_invariants(k, df, q):
    q = np.sort(np.array(q))
    cdf = studentized_range_cdf(q, k, df)
    sf = studentized_range_sf(q, k, df)
    assert np.all((cdf >= 0) & (cdf <= 1))
    assert np.all(np.diff(cdf) >= -1e-14)
    np.testing.assert_allclose(cdf + sf, 1.0, atol=1e-12)


@settings(max_examples=25, deadline=None)
@given(k=st.integers(2, 30), df=st.sampled_from([2, 6, 15, 60, np.inf]), q=st.floats(0.5, 12.0))
def test_range_quantile_inverts_cdf(k, df, q):
    p = studentized_range_cdf(q, k, df)
    if 1e-6 < p < 1 - 1e-9:
        assert studentized_range_quantile(p, k, df) == pytest.approx(q, rel=1e-6)


# ----------------------------------------------------------------------- Dunnett

def _equicorrelated(m, rho):
    corr = np.full((m, m), rho)
    np.fill_diagonal(corr, 1.0)
    return corr


@pytest.mark.parametrize("m, df, table", [
    (2, 10, 2.15),  # (memory) Dunnett (1955) JASA 50, one-sided 0.05 table, p = 2, df = 10
    (3, 10, 2.34),  # (memory) same table, p = 3, df = 10
    (3, 20, 2.19),  # (memory) same table, p = 3, df = 20
    (4, 20, 2.30),  # (memory) same table, p = 4, df = 20
])
def test_dunnett_one_sided_table(m, df, table):
    c = dunnett_critical(0.05, df, np.full(m, np.sqrt(0.5)), alternative="greater")
    assert round(c, 2) == pytest.approx(table, abs=1e-9)
    # independent reference: scipy.stats.multivariate_t (Genz quasi-Monte Carlo)
    ref = stats.multivariate_t.cdf(np.full(m, c), shape=_equicorrelated(m, 0.5), df=df,
                                   maxpts=500_000, random_state=1)
    assert ref == pytest.approx(0.95, abs=2e-4)


def test_dunnett_two_sided_exact_example():
    # 3 treatments vs control, 10 df, alpha 0.05, correlation 0.5: exact 2.759
    # (the value by exact integration; Dunnett's 1955 two-sided table gave 2.81
    # from an approximation); checked with scipy.stats.multivariate_t
    c = dunnett_critical(0.05, 10, np.full(3, np.sqrt(0.5)))
    assert round(c, 3) == pytest.approx(2.759, abs=1e-9)
    ref = stats.multivariate_t.cdf(np.full(3, c), shape=_equicorrelated(3, 0.5), df=10,
                                   lower_limit=np.full(3, -c), maxpts=500_000, random_state=1)
    assert ref == pytest.approx(0.95, abs=2e-4)


def test_dunnett_one_sided_directions_agree():
    w = np.array([0.5, 0.6, 0.7])
    assert dunnett_critical(0.05, 12, w, "less") == dunnett_critical(0.05, 12, w, "greater")
    t = np.array([-2.5, -0.3, 1.0, 2.4])
    np.testing.assert_allclose(dunnett_sf(t, 12, w, "less"), dunnett_sf(-t, 12, w, "greater"))


def _control_data(sizes, seed):
    rng = np.random.default_rng(seed)
    control = rng.normal(10.0, 2.0, sizes[0])
    groups = [rng.normal(10.0 + shift, 2.0, n) for shift, n in zip([0.5, 2.0, 3.0], sizes[1:])]
    return control, groups


@pytest.mark.parametrize("sizes", [(6, 6, 6, 6), (4, 7, 5, 9)])
@pytest.mark.parametrize("alternative", ["two-sided", "greater", "less"])
def test_dunnett_sf_matches_scipy_dunnett(sizes, alternative):
    # reference: scipy.stats.dunnett p-values (randomised Genz integration, ~1e-4)
    control, groups = _control_data(sizes, seed=sum(sizes))
    res = stats.dunnett(*groups, control=control, alternative=alternative, rng=7)
    n0, ns = sizes[0], np.array(sizes[1:])
    df = sum(sizes) - len(sizes)
    weights = np.sqrt(ns / (ns + n0))
    mine = dunnett_sf(res.statistic, df, weights, alternative)
    np.testing.assert_allclose(mine, res.pvalue, atol=5e-4)


@pytest.mark.parametrize("df", [5, 24, np.inf])
def test_dunnett_unequal_weights_match_multivariate_t(df):
    # reference: scipy.stats.multivariate_t / multivariate_normal with corr = w w^T
    w = np.array([0.3, 0.55, 0.7, 0.85])
    corr = np.outer(w, w)
    np.fill_diagonal(corr, 1.0)
    for c in [1.5, 2.6, 3.4]:
        box = np.full(4, c)
        if np.isinf(df):
            inside = stats.multivariate_normal.cdf(box, cov=corr, lower_limit=-box,
                                                   maxpts=400_000, abseps=1e-7, rng=3)
        else:
            inside = stats.multivariate_t.cdf(box, shape=corr, df=df, lower_limit=-box,
                                              maxpts=400_000, random_state=3)
        assert dunnett_sf(c, df, w) == pytest.approx(1.0 - inside, abs=1e-4)


def test_dunnett_single_comparison_is_t():
    # one comparison: the adjusted p-value is the plain t-test p-value (scipy.stats.t)
    t = np.array([0.4, 2.0, 5.0, 9.0])
    np.testing.assert_allclose(dunnett_sf(t, 9, [0.6]), 2 * stats.t.sf(t, 9), rtol=1e-9)
    np.testing.assert_allclose(dunnett_sf(t, 9, [0.6], "greater"), stats.t.sf(t, 9), rtol=1e-9)


def test_dunnett_independent_is_sidak():
    # zero correlation: P(max |T_i| > c) = 1 - (1 - p)^m exactly for df = inf (scipy.stats.norm)
    c = np.array([1.0, 2.5, 4.0, 6.0])
    p = 2 * stats.norm.sf(c)
    ref = -np.expm1(3 * np.log1p(-p))
    np.testing.assert_allclose(dunnett_sf(c, np.inf, np.zeros(3)), ref, rtol=1e-9)


def test_general_matrix_routes_product_form():
    w = np.array([0.4, 0.6, 0.75])
    corr = np.outer(w, w)
    np.fill_diagonal(corr, 1.0)
    np.testing.assert_allclose(product_form_weights(corr), w, rtol=1e-12)
    assert dunnett_critical_general(0.05, 15, corr) == dunnett_critical(0.05, 15, w)
    np.testing.assert_allclose(dunnett_sf_general([2.0, 3.0], 15, corr),
                               dunnett_sf([2.0, 3.0], 15, w))


def test_general_matrix_quasi_monte_carlo():
    # a correlation matrix that is not product form (missing-cell designs give such)
    corr = np.array([[1.0, 0.5, 0.1], [0.5, 1.0, 0.45], [0.1, 0.45, 1.0]])
    assert product_form_weights(corr) is None
    c = dunnett_critical_general(0.05, 12, corr)
    ref = stats.multivariate_t.cdf(np.full(3, c), shape=corr, df=12, lower_limit=np.full(3, -c),
                                   maxpts=1_000_000, random_state=11)
    assert ref == pytest.approx(0.95, abs=1e-4)
    p = dunnett_sf_general(c, 12, corr)
    assert p == pytest.approx(0.05, abs=1e-4)
    # the same seed gives the same answer
    assert dunnett_sf_general(c, 12, corr) == p
