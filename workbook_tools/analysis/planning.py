"""Planning the next trial: randomised block layouts, power and blocks needed.

Two parts. :func:`randomised_layout` draws the order of treatments within each
block from a recorded seed, optionally with fixed positions (a restricted
randomisation). :func:`power_rcbd`, :func:`blocks_needed`,
:func:`detectable_difference` and :func:`power_table` give the power of a
randomised complete block trial for the smallest difference worth detecting.

Power model
-----------
``t`` treatments in ``b`` blocks, ``r`` observations per block and treatment,
the additive model with error variance ``sigma2``; error df
``b t r - b - t + 1`` (``(b - 1)(t - 1)`` for ``r = 1``). Each treatment mean
rests on ``n = b r`` observations.

* ``"f"``: the overall F test. The difference ``delta`` is spread in the least
  favourable way, two treatments at ``+-delta/2`` and the rest at the mean, so
  the noncentrality is ``lambda = n delta**2 / (2 sigma2)``; power is the upper
  tail of the noncentral F with ``t - 1`` and the error df beyond the central
  F critical value.
* ``"lsd"``: the t test of one pair, ``ncp = delta / sqrt(2 sigma2 / n)``,
  power from the noncentral t beyond the t critical value.
* ``"tukey"``: the same pair judged at the studentized range critical value,
  ``|t| > q(1 - alpha; t, df) / sqrt 2``; the power of that pair's test
  within the simultaneous procedure (per-pair power, not the chance of
  finding every true difference).
* ``"dunnett"``: one treatment against the control at Dunnett's critical
  value for ``t - 1`` comparisons with equal replication (correlation 1/2);
  again the power of that comparison within the procedure.

References
----------
Cochran, W. G. & Cox, G. M. (1957). Experimental Designs, 2nd ed. Wiley, ch. 4.
Cohen, J. (1988). Statistical Power Analysis for the Behavioral Sciences,
2nd ed. Erlbaum.
Montgomery, D. C. (2017). Design and Analysis of Experiments, 9th ed. Wiley,
ch. 4 (power of the randomised complete block design).
Lenth, R. V. (2001). Some practical guidelines for effective sample size
determination. The American Statistician 55, 187-193.
"""

from __future__ import annotations

import functools
import math
import secrets
from dataclasses import dataclass

import numpy as np
from scipy import optimize, stats

from workbook_tools.analysis.distributions import dunnett_critical, studentized_range_quantile
from workbook_tools.analysis.errors import TrialInputError

TESTS = ("f", "lsd", "tukey", "dunnett")
GENERATOR = "numpy.random.default_rng (PCG64)"
SEED_LIMIT = 2**31
"""Drawn seeds stay below this, so a spreadsheet cell holds them exactly."""
_BLOCKS_FLOOR = 2


# ------------------------------------------------------------------ layouts

@dataclass(frozen=True)
class Layout:
    """A randomised complete block layout.

    Attributes
    ----------
    treatments, blocks : tuple of str
        Labels in the order given.
    replicates : int
        Runs of every treatment in every block.
    seed : int
        Seed of the generator; the same seed gives the same layout.
    generator : str
        The random generator used.
    run_orders : tuple of tuple of str
        Per block, the treatment of each run in run order.
    fixed_positions : dict
        Treatment -> tuple of 1-based run positions fixed in every block.
    restrictions : str
        The restriction on the randomisation in words ("" when none).
    """

    treatments: tuple[str, ...]
    blocks: tuple[str, ...]
    replicates: int
    seed: int
    generator: str
    run_orders: tuple[tuple[str, ...], ...]
    fixed_positions: dict
    restrictions: str

    def wide_grid(self) -> list[list]:
        """The input grid the analysis reads back: treatments across, blocks down, values empty.

        The top-left cell is None. Only for one run per block and treatment;
        with replicates use :meth:`run_sheet_rows` (a long layout).
        """
        if self.replicates != 1:
            raise TrialInputError("A wide grid holds one value per block and treatment; with replicates "
                                  "fill in the run order (long layout) instead.")
        return [[None, *self.treatments]] + [[block] + [None] * len(self.treatments) for block in self.blocks]

    def run_sheet_rows(self) -> list[list]:
        """One row per run: block, run position in the block, treatment, empty value."""
        return [[block, position, treatment, None]
                for block, order in zip(self.blocks, self.run_orders)
                for position, treatment in enumerate(order, start=1)]

    def to_dict(self) -> dict:
        """Plain JSON-ready form (lists, not tuples)."""
        return {
            "treatments": list(self.treatments), "blocks": list(self.blocks), "replicates": self.replicates,
            "seed": self.seed, "generator": self.generator,
            "run_orders": [list(order) for order in self.run_orders],
            "fixed_positions": {k: list(v) for k, v in self.fixed_positions.items()},
            "restrictions": self.restrictions,
        }


def _labels(spec, prefix: str, what: str) -> tuple[str, ...]:
    if isinstance(spec, bool):
        raise TrialInputError(f"Give the {what} as a count or a list of labels.")
    if isinstance(spec, (int, np.integer)):
        if spec < 1:
            raise TrialInputError(f"The number of {what} must be at least 1, not {spec}.")
        return tuple(f"{prefix}{i}" for i in range(1, int(spec) + 1))
    labels = tuple(str(s).strip() for s in spec)
    if any(not s for s in labels):
        raise TrialInputError(f"A {what[:-1]} label is empty.")
    seen = set()
    for label in labels:
        if label.casefold() in seen:
            raise TrialInputError(f"The {what[:-1]} label {label!r} appears twice; each needs its own label.")
        seen.add(label.casefold())
    if not labels:
        raise TrialInputError(f"No {what} were given.")
    return labels


def _fixed(fixed_positions, treatments, replicates) -> dict:
    """Validate ``{treatment: position or positions}`` -> ``{treatment: tuple of positions}``."""
    runs = len(treatments) * replicates
    fixed, taken = {}, {}
    for treatment, spec in (fixed_positions or {}).items():
        if treatment not in treatments:
            raise TrialInputError(f"The fixed treatment {treatment!r} is not one of the treatments "
                                  f"({', '.join(treatments)}).")
        positions = (spec,) if isinstance(spec, (int, np.integer)) else tuple(spec)
        if len(positions) > replicates:
            raise TrialInputError(f"{treatment!r} runs {replicates} time(s) per block but {len(positions)} "
                                  "positions were fixed for it.")
        for p in positions:
            if isinstance(p, bool) or not isinstance(p, (int, np.integer)) or not 1 <= p <= runs:
                raise TrialInputError(f"A fixed run position must be a whole number from 1 to {runs}, not {p!r}.")
            if p in taken:
                raise TrialInputError(f"Run position {p} is fixed for both {taken[p]!r} and {treatment!r}.")
            taken[p] = treatment
        fixed[treatment] = tuple(int(p) for p in positions)
    return fixed


def _restriction_text(fixed: dict) -> str:
    if not fixed:
        return ""
    parts = [f"{t!r} at run {', '.join(str(p) for p in positions)}" for t, positions in fixed.items()]
    return ("Restricted randomisation: " + "; ".join(parts) + " in every block; the other runs are in "
            "random order.")


def randomised_layout(treatments, blocks, *, replicates=1, fixed_positions=None, seed=None) -> Layout:
    """Randomise the order of treatments within each block of a complete block trial.

    Parameters
    ----------
    treatments, blocks : int or sequence of str
        Labels, or counts (labels ``T1, T2, ...`` and ``Block 1, Block 2, ...``).
    replicates : int
        Runs of each treatment in each block.
    fixed_positions : dict, optional
        ``{treatment: position}`` (or a list of positions, at most
        ``replicates``), 1-based, fixed in every block, e.g. ``{"Control": 1}``
        to run the control first for instrument warm-up. The remaining runs are
        randomised; the restriction is stated in ``Layout.restrictions``.
    seed : int, optional
        Seed of ``numpy.random.default_rng`` (PCG64). When None one is drawn
        with ``secrets.randbelow`` and recorded.

    Returns
    -------
    Layout

    Notes
    -----
    One generator serves the blocks in order; in each block the free run
    positions receive a random permutation of the runs not fixed.

    References
    ----------
    Cochran, W. G. & Cox, G. M. (1957). Experimental Designs, 2nd ed. Wiley,
    ch. 4 (randomisation within blocks).
    """
    treatment_labels = _labels(treatments, "T", "treatments")
    block_labels = _labels(blocks, "Block ", "blocks")
    if len(treatment_labels) < 2:
        raise TrialInputError("A block trial compares at least 2 treatments.")
    if isinstance(replicates, bool) or not isinstance(replicates, (int, np.integer)) or replicates < 1:
        raise TrialInputError(f"Replicates per block must be a whole number of at least 1, not {replicates!r}.")
    replicates = int(replicates)
    fixed = _fixed(fixed_positions, treatment_labels, replicates)
    if seed is None:
        seed = secrets.randbelow(SEED_LIMIT)
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise TrialInputError(f"The seed must be a whole number of at least 0, not {seed!r}.")
    rng = np.random.default_rng(int(seed))
    runs = len(treatment_labels) * replicates
    fixed_at = {p - 1: t for t, positions in fixed.items() for p in positions}
    free_slots = [i for i in range(runs) if i not in fixed_at]
    pool = [t for t in treatment_labels
            for _ in range(replicates - len(fixed.get(t, ())))]
    orders = []
    for _ in block_labels:
        order = [fixed_at.get(i) for i in range(runs)]
        for slot, index in zip(free_slots, rng.permutation(len(pool))):
            order[slot] = pool[index]
        orders.append(tuple(order))
    return Layout(treatment_labels, block_labels, replicates, int(seed), GENERATOR, tuple(orders), fixed,
                  _restriction_text(fixed))


# -------------------------------------------------------------------- power

def _check_inputs(*, delta=None, sigma2=None, n_treatments=None, alpha=None, power=None, test=None,
                  alternative="two-sided", replicates=1, n_blocks=None):
    if delta is not None and not (math.isfinite(delta) and delta > 0):
        raise TrialInputError(f"The difference worth detecting must be a positive number, not {delta!r}.")
    if sigma2 is not None and not (math.isfinite(sigma2) and sigma2 > 0):
        raise TrialInputError(f"The error variance must be a positive number, not {sigma2!r}.")
    if n_treatments is not None and (int(n_treatments) != n_treatments or n_treatments < 2):
        raise TrialInputError(f"Planning needs at least 2 treatments, not {n_treatments!r}.")
    if n_blocks is not None and (int(n_blocks) != n_blocks or n_blocks < _BLOCKS_FLOOR):
        raise TrialInputError(f"Power needs at least {_BLOCKS_FLOOR} blocks, not {n_blocks!r}.")
    if alpha is not None and not 0 < alpha < 1:
        raise TrialInputError(f"alpha must lie strictly between 0 and 1, not {alpha!r}.")
    if power is not None and not 0 < power < 1:
        raise TrialInputError(f"The target power must lie strictly between 0 and 1, not {power!r}.")
    if int(replicates) != replicates or replicates < 1:
        raise TrialInputError(f"Replicates per cell must be a whole number of at least 1, not {replicates!r}.")
    if test is not None and test not in TESTS:
        raise TrialInputError(f"The test must be one of {', '.join(TESTS)}, not {test!r}.")
    if alternative not in ("two-sided", "greater", "less"):
        raise TrialInputError(f"The alternative must be two-sided, greater or less, not {alternative!r}.")
    if test in ("f", "tukey") and alternative != "two-sided":
        raise TrialInputError(f"The {test} test is two-sided only; one-sided planning applies to lsd and dunnett.")


def error_df(n_treatments: int, n_blocks: int, replicates: int = 1) -> int:
    """Error degrees of freedom of the additive block model, ``b t r - b - t + 1``."""
    return n_blocks * n_treatments * replicates - n_blocks - n_treatments + 1


@functools.lru_cache(maxsize=512)
def _pair_critical(test: str, alpha: float, n_treatments: int, df: int, alternative: str) -> float:
    """Critical |t| (or t, one-sided) of one pair's test under ``test``."""
    two_sided = alternative == "two-sided"
    if test == "lsd":
        return float(stats.t.isf(alpha / 2 if two_sided else alpha, df))
    if test == "tukey":
        return float(studentized_range_quantile(1 - alpha, n_treatments, df)) / math.sqrt(2.0)
    weights = [math.sqrt(0.5)] * (n_treatments - 1)
    with np.errstate(divide="ignore"):
        return dunnett_critical(alpha, df, weights, alternative)


def _power(delta, sigma2, n_treatments, n_blocks, alpha, test, alternative, replicates) -> float:
    df = error_df(n_treatments, n_blocks, replicates)
    n = n_blocks * replicates
    if test == "f":
        lam = n * delta**2 / (2.0 * sigma2)
        critical = stats.f.isf(alpha, n_treatments - 1, df)
        return float(stats.ncf.sf(critical, n_treatments - 1, df, lam))
    ncp = delta / math.sqrt(2.0 * sigma2 / n)
    critical = _pair_critical(test, float(alpha), int(n_treatments), int(df), alternative)
    if alternative != "two-sided":
        return float(stats.nct.sf(critical, df, ncp))
    # P(|T| > c) as the noncentral F with 1 numerator df: scipy's nct.cdf far in the
    # lower tail can return NaN at small df and large ncp (scipy 1.17)
    return float(stats.ncf.sf(critical**2, 1, df, ncp**2))


def power_rcbd(delta, sigma2, n_treatments, n_blocks, alpha=0.05, test="f", alternative="two-sided",
               replicates=1) -> float:
    """Power of a randomised complete block trial to detect a difference ``delta``.

    Parameters
    ----------
    delta : float
        Smallest difference between two treatment means worth detecting.
    sigma2 : float
        Error variance (e.g. the error mean square of an earlier trial).
    n_treatments, n_blocks : int
        Treatments (at least 2) and blocks (at least 2).
    alpha : float
        Significance level (familywise for Tukey and Dunnett).
    test : {"f", "lsd", "tukey", "dunnett"}
        See the module notes; for the pairwise tests the power of the one pair's test.
    alternative : {"two-sided", "greater", "less"}
        One-sided only for "lsd" and "dunnett"; the difference is taken in the
        direction tested.
    replicates : int
        Observations per block and treatment (additive model).

    Returns
    -------
    float

    References
    ----------
    Cohen, J. (1988). Statistical Power Analysis for the Behavioral Sciences, 2nd ed.
    Montgomery, D. C. (2017). Design and Analysis of Experiments, 9th ed., ch. 4.
    """
    _check_inputs(delta=delta, sigma2=sigma2, n_treatments=n_treatments, n_blocks=n_blocks, alpha=alpha,
                  test=test, alternative=alternative, replicates=replicates)
    return _power(float(delta), float(sigma2), int(n_treatments), int(n_blocks), float(alpha), test,
                  alternative, int(replicates))


def blocks_needed(delta, sigma2, n_treatments, alpha=0.05, power=0.8, test="f", max_blocks=1000, *,
                  alternative="two-sided", replicates=1) -> int:
    """Smallest number of blocks (at least 2) whose power reaches ``power``.

    Parameters
    ----------
    delta, sigma2, n_treatments, alpha, test, alternative, replicates
        As in :func:`power_rcbd`.
    power : float
        Target power, e.g. 0.8.
    max_blocks : int
        Largest number of blocks considered.

    Returns
    -------
    int

    Raises
    ------
    TrialInputError
        When even ``max_blocks`` blocks do not reach the target power.

    Notes
    -----
    Power rises with the number of blocks, so the answer is found by doubling
    and then bisection.

    References
    ----------
    Lenth, R. V. (2001). The American Statistician 55, 187-193.
    """
    _check_inputs(delta=delta, sigma2=sigma2, n_treatments=n_treatments, alpha=alpha, power=power, test=test,
                  alternative=alternative, replicates=replicates)

    def enough(b):
        return _power(float(delta), float(sigma2), int(n_treatments), b, float(alpha), test, alternative,
                      int(replicates)) >= power

    low, high = _BLOCKS_FLOOR - 1, _BLOCKS_FLOOR
    while not enough(high):
        if high >= max_blocks:
            raise TrialInputError(
                f"Even {max_blocks} blocks do not reach power {power:g} for a difference of {delta:g} "
                f"(error variance {sigma2:g}, {test} test). Consider a larger difference worth detecting, "
                "a smaller error variance (better control of the runs) or a larger alpha.")
        low, high = high, min(2 * high, max_blocks)
    while high - low > 1:  # enough(high), not enough(low) (or low below the floor)
        middle = (low + high) // 2
        low, high = (low, middle) if enough(middle) else (middle, high)
    return high


def detectable_difference(sigma2, n_treatments, n_blocks, alpha=0.05, power=0.8, test="f", *,
                          alternative="two-sided", replicates=1) -> float:
    """Difference between two treatment means detected with the given power.

    Parameters
    ----------
    sigma2, n_treatments, n_blocks, alpha, test, alternative, replicates
        As in :func:`power_rcbd`.
    power : float
        Target power; must exceed the test's level.

    Returns
    -------
    float

    References
    ----------
    Lenth, R. V. (2001). The American Statistician 55, 187-193.
    """
    _check_inputs(sigma2=sigma2, n_treatments=n_treatments, n_blocks=n_blocks, alpha=alpha, power=power,
                  test=test, alternative=alternative, replicates=replicates)
    scale = math.sqrt(2.0 * sigma2 / (n_blocks * replicates))

    def gap(delta):
        return _power(delta, float(sigma2), int(n_treatments), int(n_blocks), float(alpha), test, alternative,
                      int(replicates)) - power

    tiny = 1e-6 * scale
    if gap(tiny) >= 0:
        raise TrialInputError(f"A power of {power:g} is reached by any difference at this alpha; ask for a "
                              "target power above the significance level.")
    high = scale
    while gap(high) < 0:
        high *= 2.0
    return float(optimize.brentq(gap, tiny, high, xtol=1e-10 * scale, rtol=1e-12))


def power_table(delta, sigma2, n_treatments, blocks_range, alpha=0.05, tests=TESTS, *, alternative="two-sided",
                replicates=1) -> list[dict]:
    """Power for each number of blocks in ``blocks_range`` and each test.

    Returns
    -------
    list of dict
        One row per number of blocks: ``blocks``, ``error_df`` and one power per test key.
    """
    for test in tests:
        _check_inputs(delta=delta, sigma2=sigma2, n_treatments=n_treatments, alpha=alpha, test=test,
                      alternative=alternative, replicates=replicates)
    rows = []
    for b in blocks_range:
        _check_inputs(n_blocks=b)
        row = {"blocks": int(b), "error_df": error_df(int(n_treatments), int(b), int(replicates))}
        for test in tests:
            row[test] = _power(float(delta), float(sigma2), int(n_treatments), int(b), float(alpha), test,
                               alternative, int(replicates))
        rows.append(row)
    return rows


def planning_inputs_from_result(result_dict: dict, response: str | None = None) -> dict:
    """Error variance and treatments of an earlier analysis, for planning the next trial.

    Parameters
    ----------
    result_dict : dict
        ``BlockTrialResult.to_dict()`` or the JSON of ``workbook-tools analyze
        --json`` (one result, or ``{"results": [...]}`` for several responses).
    response : str, optional
        Which response to take when there are several.

    Returns
    -------
    dict
        ``sigma2`` (the summary's error mean square), ``n_treatments``,
        ``treatments``, ``error_df`` and ``source`` (a sentence saying where
        ``sigma2`` came from).
    """
    results = result_dict.get("results", [result_dict]) if isinstance(result_dict, dict) else []
    if len(results) > 1:
        names = [(r.get("source") or {}).get("response") for r in results]
        if response is None or response not in names:
            raise TrialInputError(f"The result holds several responses ({', '.join(map(str, names))}); "
                                  "say which one to plan for.")
        results = [results[names.index(response)]]
    try:
        summary = results[0]["summary"]
        treatments = list(results[0]["design"]["treatments"])
        sigma2 = summary["mse"]
    except (IndexError, KeyError, TypeError):
        raise TrialInputError("This is not a workbook-tools analysis result (no summary or design found).") \
            from None
    if sigma2 is None or not sigma2 > 0:
        raise TrialInputError("The earlier result has no positive error mean square to plan with.")
    return {"sigma2": float(sigma2), "n_treatments": len(treatments), "treatments": treatments,
            "error_df": summary.get("error_df"),
            "source": f"error mean square {sigma2:.6g} on {summary.get('error_df')} df of the earlier analysis"}


def plan_power(delta, sigma2, n_treatments, *, n_blocks=None, alpha=0.05, power=0.8, tests=("f",),
               alternative="two-sided", replicates=1, blocks_range=None, max_blocks=1000) -> dict:
    """Everything a front end shows about power: blocks needed per test and a power table.

    Parameters
    ----------
    delta, sigma2, n_treatments, alpha, power, alternative, replicates, max_blocks
        As in :func:`blocks_needed`.
    n_blocks : int, optional
        Blocks planned; power and detectable difference are reported for it.
    tests : sequence of str
        Test keys, in the order shown.
    blocks_range : sequence of int, optional
        Rows of the power table; by default 2 up to a little beyond the
        largest number needed (at most 60 rows).

    Returns
    -------
    dict
        ``inputs``, ``tests`` (per test: ``test``, ``blocks_needed``,
        ``error_df``, ``power_at_needed``, ``power_at_planned``,
        ``detectable_at_planned``) and ``power_table`` (as :func:`power_table`).
    """
    tests = tuple(dict.fromkeys(tests))
    if not tests:
        raise TrialInputError("Name at least one test to plan for.")
    if n_blocks is not None:
        _check_inputs(n_blocks=n_blocks)
    rows = []
    for test in tests:
        needed = blocks_needed(delta, sigma2, n_treatments, alpha, power, test, max_blocks,
                               alternative=alternative, replicates=replicates)
        row = {"test": test, "blocks_needed": needed, "error_df": error_df(n_treatments, needed, replicates),
               "power_at_needed": _power(delta, sigma2, n_treatments, needed, alpha, test, alternative, replicates),
               "power_at_planned": None, "detectable_at_planned": None}
        if n_blocks is not None:
            row["power_at_planned"] = _power(delta, sigma2, n_treatments, n_blocks, alpha, test, alternative,
                                             replicates)
            row["detectable_at_planned"] = detectable_difference(sigma2, n_treatments, n_blocks, alpha, power,
                                                                 test, alternative=alternative,
                                                                 replicates=replicates)
        rows.append(row)
    if blocks_range is None:
        top = max([r["blocks_needed"] for r in rows] + [n_blocks or 0])
        top = max(10, min(_BLOCKS_FLOOR + 59, math.ceil(1.25 * top)))
        blocks_range = range(_BLOCKS_FLOOR, top + 1)
    inputs = {"delta": delta, "sigma2": sigma2, "n_treatments": n_treatments, "n_blocks": n_blocks,
              "alpha": alpha, "power": power, "alternative": alternative, "replicates": replicates}
    return {"inputs": inputs, "tests": rows,
            "power_table": power_table(delta, sigma2, n_treatments, blocks_range, alpha, tests,
                                       alternative=alternative, replicates=replicates)}
