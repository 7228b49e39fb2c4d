"""Invariants of the blocked analysis, checked with hypothesis-generated trials."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from workbook_tools import analyze_grid
from workbook_tools.analysis.design import design_from_grid
from workbook_tools.analysis import fit as fit_module

SETTINGS = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@st.composite
def grids(draw, allow_missing=False):
    b = draw(st.integers(3, 7))
    t = draw(st.integers(2, 6))
    seed = draw(st.integers(0, 2**31 - 1))
    rng = np.random.default_rng(seed)
    values = rng.normal(20, 4, (b, t)) + rng.normal(0, 5, (b, 1))
    values = np.round(values, 3)
    if allow_missing:
        n_missing = draw(st.integers(1, max(1, (b - 1) * (t - 1) // 3)))
        rows = rng.integers(1, b, n_missing)          # never the first block: stays connected
        cols = rng.integers(0, t, n_missing)
        values[rows, cols] = np.nan
    return values


def _labels(prefix, n):
    return [f"{prefix}{i + 1}" for i in range(n)]


def _run(values, **options):
    b, t = values.shape
    return analyze_grid(values, _labels("B", b), _labels("T", t), **options)


def _ss(result):
    return {row.source: row.ss for row in result.anova}


@SETTINGS
@given(grids(allow_missing=True), st.randoms(use_true_random=False))
def test_permuting_blocks_and_treatments_changes_only_order(values, rnd):
    b, t = values.shape
    blocks, treatments = _labels("B", b), _labels("T", t)
    rows, cols = list(range(b)), list(range(t))
    rnd.shuffle(rows)
    rnd.shuffle(cols)
    base = analyze_grid(values, blocks, treatments)
    shuffled = analyze_grid(values[np.ix_(rows, cols)], [blocks[i] for i in rows], [treatments[j] for j in cols])
    for source, ss in _ss(base).items():
        assert _ss(shuffled)[source] == pytest.approx(ss, rel=1e-9, abs=1e-9)
    by_label = {m.treatment: m.adjusted_mean for m in shuffled.means}
    for m in base.means:
        assert by_label[m.treatment] == pytest.approx(m.adjusted_mean, rel=1e-10)
    estimates = {(c.block, c.treatment): c.estimate for c in shuffled.missing}
    for c in base.missing:
        assert estimates[(c.block, c.treatment)] == pytest.approx(c.estimate, rel=1e-10)


@SETTINGS
@given(grids(allow_missing=True), st.floats(-1e6, 1e6), st.floats(0.01, 100))
def test_shift_leaves_and_scale_squares_the_sums_of_squares(values, shift, scale):
    base = _ss(_run(values))
    shifted = _ss(_run(values + shift))
    scaled = _ss(_run(values * scale))
    for source, ss in base.items():
        tolerance = 1e-9 * base["total"]
        assert shifted[source] == pytest.approx(ss, abs=tolerance + 1e-12 * abs(shift) ** 2)
        assert scaled[source] == pytest.approx(ss * scale**2, rel=1e-9, abs=tolerance * scale**2)


@SETTINGS
@given(grids())
def test_closed_form_equals_least_squares_on_balanced_data(values):
    b, t = values.shape
    design = design_from_grid(values, _labels("B", b), _labels("T", t))
    closed = fit_module.fit_additive(design, solver=fit_module.AdditiveSolver(design, closed_form=True))
    absorbed = fit_module.fit_additive(design, solver=fit_module.AdditiveSolver(design, closed_form=False))
    assert closed.solver.equal and not absorbed.solver.equal
    assert closed.sse == pytest.approx(absorbed.sse, rel=1e-10)
    np.testing.assert_allclose(closed.fitted, absorbed.fitted, rtol=1e-12)
    np.testing.assert_allclose(closed.leverage, absorbed.leverage, rtol=1e-10)
    np.testing.assert_allclose(closed.c_plus, absorbed.c_plus, atol=1e-12)


@SETTINGS
@given(grids(allow_missing=True))
def test_filling_missing_cells_with_estimates_reproduces_error_ss(values):
    result = _run(values)
    filled = values.copy()
    b_index = {label: i for i, label in enumerate(result.blocks)}
    t_index = {label: j for j, label in enumerate(result.treatments)}
    for cell in result.missing:
        filled[b_index[cell.block], t_index[cell.treatment]] = cell.estimate
    complete = _run(filled)
    assert complete.anova_row("error").ss == pytest.approx(result.anova_row("error").ss, rel=1e-9, abs=1e-9)
    assert complete.anova_row("error").df - result.anova_row("error").df == len(result.missing)


@SETTINGS
@given(grids(allow_missing=True), st.sampled_from(["lsd", "tukey", "bonferroni", "holm", "dunnett"]))
def test_outputs_are_json_safe_and_letters_agree_with_pairs(values, method):
    import json

    result = _run(values, compare=method)
    text = json.dumps(result.to_dict(), allow_nan=False)
    assert "NaN" not in text
    groups = result.comparisons.groups
    if groups is not None:
        for pair in result.comparisons.pairs:
            shares_letter = bool(set(groups[pair.first]) & set(groups[pair.second]))
            assert shares_letter == (not pair.significant)
