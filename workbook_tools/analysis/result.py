"""The result object of a blocked analysis: typed fields, ``to_dict()``, ``to_frames()``."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from workbook_tools.analysis.anova import AnovaRow, Efficiency, ErrorTerm
from workbook_tools.analysis.compare import Comparisons
from workbook_tools.analysis.means import TreatmentMean

SCHEMA_VERSION = 1

CAUTIONS = (
    "The analysis assumes additive block and treatment effects, independent errors with one common "
    "variance, and approximately normal residuals; randomisation within each block is what justifies it.",
    "A failed check means the p-values and intervals may be wrong: look at the residual plots, consider "
    "a transformation of the response, the rank-based Friedman test, or advice from a statistician.",
    "Statistical significance is not practical importance: judge every difference by its size and "
    "confidence interval against what matters for the product or process.",
    "Decisions on product release, safety or regulatory compliance must follow your laboratory's "
    "validated procedures; this tool's output supports, and does not replace, them.",
)


def json_safe(value):
    """Turn numpy scalars into Python ones and non-finite floats into None, recursively."""
    if isinstance(value, dict):
        return {str(k): json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_safe(v) for v in value]
    if isinstance(value, np.ndarray):
        return [json_safe(v) for v in value.tolist()]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        value = float(value)
        return value if math.isfinite(value) else None
    return value


@dataclass(frozen=True)
class Summary:
    """Headline figures of the blocked analysis."""

    grand_mean: float
    cv_percent: float | None
    mse: float
    root_mse: float
    error_df: int
    r_squared: float | None
    n_observations: int
    n_blocks: int
    n_treatments: int
    model: str
    treatment_error: str
    treatment_error_ms: float
    treatment_error_df: int
    treatment_error_reason: str
    sed: float | None
    lsd: float | None


@dataclass(frozen=True)
class ResidualTable:
    """Per-observation fitted values and residuals, stored as columns.

    Labels are kept as positions into ``block_labels`` / ``treatment_labels``
    so that large trials do not build per-observation lists until asked.
    """

    block_labels: tuple[str, ...]
    treatment_labels: tuple[str, ...]
    block_index: np.ndarray
    treatment_index: np.ndarray
    observed: np.ndarray
    fitted: np.ndarray
    residual: np.ndarray
    standardized: np.ndarray   # NaN where leverage is 1 or the error variance is zero
    leverage: np.ndarray
    outlier: np.ndarray        # |standardized| > 3 (common practice)

    @property
    def block(self) -> list[str]:
        """Block label of each observation."""
        return [self.block_labels[i] for i in self.block_index.tolist()]

    @property
    def treatment(self) -> list[str]:
        """Treatment label of each observation."""
        return [self.treatment_labels[j] for j in self.treatment_index.tolist()]

    def rows(self) -> list[dict]:
        """One dict per observation, JSON-safe."""
        columns = {
            "observed": self.observed.tolist(), "fitted": self.fitted.tolist(),
            "residual": self.residual.tolist(), "standardized": self.standardized.tolist(),
            "leverage": self.leverage.tolist(), "outlier": self.outlier.tolist(),
        }
        out = []
        blocks, treatments = self.block, self.treatment
        for i in range(len(blocks)):
            std = columns["standardized"][i]
            out.append({
                "block": blocks[i], "treatment": treatments[i],
                "observed": columns["observed"][i], "fitted": columns["fitted"][i],
                "residual": columns["residual"][i],
                "standardized": std if math.isfinite(std) else None,
                "leverage": columns["leverage"][i], "outlier": bool(columns["outlier"][i]),
            })
        return out


@dataclass(frozen=True)
class MissingCell:
    """A block-treatment cell with no observation and its missing-plot estimate."""

    block: str
    treatment: str
    estimate: float


@dataclass(frozen=True)
class BlockTrialResult:
    """Everything the blocked analysis found, for every front end to lay out.

    ``to_dict()`` is the JSON contract that sheets, command line and worksheet
    functions are built on.
    """

    blocks: tuple[str, ...]
    treatments: tuple[str, ...]
    options: dict
    anova: list[AnovaRow]
    error_term: ErrorTerm
    one_way: list[AnovaRow]
    efficiency: Efficiency
    summary: Summary
    means: list[TreatmentMean]
    comparisons: Comparisons
    residuals: ResidualTable
    checks: dict
    qq: dict
    friedman: object | None
    missing: list[MissingCell]
    warnings: list[str] = field(default_factory=list)
    cautions: tuple[str, ...] = CAUTIONS

    def anova_row(self, source: str) -> AnovaRow:
        """The ANOVA row of one source (treatment, block, interaction, error, total)."""
        for row in self.anova:
            if row.source == source:
                return row
        raise KeyError(source)

    def to_dict(self) -> dict:
        """JSON-safe dictionary (no NaN or inf: None instead)."""
        qq = self.qq
        return json_safe({
            "schema": SCHEMA_VERSION,
            "design": {
                "blocks": list(self.blocks), "treatments": list(self.treatments),
                "n_observations": self.summary.n_observations,
            },
            "options": self.options,
            "anova": [row.to_dict() for row in self.anova],
            "one_way": [row.to_dict() for row in self.one_way],
            "efficiency": self.efficiency.to_dict(),
            "summary": dict(self.summary.__dict__),
            "means": [row.to_dict() for row in self.means],
            "comparisons": self.comparisons.to_dict(),
            "residuals": self.residuals.rows(),
            "checks": {name: outcome.to_dict() for name, outcome in self.checks.items()},
            "qq": {
                "plotting_position": qq["plotting_position"],
                "theoretical": qq["theoretical"], "sample": qq["sample"],
                "reference_line": {"intercept": qq["reference_line"][0], "slope": qq["reference_line"][1]},
            },
            "friedman": None if self.friedman is None else self.friedman.to_dict(),
            "missing": [dict(cell.__dict__) for cell in self.missing],
            "warnings": list(self.warnings),
            "cautions": list(self.cautions),
        })

    def to_frames(self) -> dict:
        """Tidy pandas DataFrames keyed by table name (pandas imported on demand)."""
        import pandas as pd

        data = self.to_dict()
        frames = {
            "anova": pd.DataFrame(data["anova"]),
            "one_way": pd.DataFrame(data["one_way"]),
            "means": pd.DataFrame(data["means"]),
            "comparisons": pd.DataFrame(data["comparisons"]["pairs"]),
            "residuals": pd.DataFrame(data["residuals"]),
            "checks": pd.DataFrame([{"check": name, **values} for name, values in data["checks"].items()]),
            "missing": pd.DataFrame(data["missing"], columns=["block", "treatment", "estimate"]),
            "summary": pd.DataFrame([data["summary"]]),
            "efficiency": pd.DataFrame([data["efficiency"]]),
        }
        groups = data["comparisons"]["groups"]
        if groups is not None:
            frames["means"]["group"] = frames["means"]["treatment"].map(groups)
        return frames
