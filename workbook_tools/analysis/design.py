"""Observations in, a validated block design out.

Everything the rest of the engine trusts is checked here once: labels, finite
values, at least two blocks and two treatments, every treatment observed, the
blocks connecting the treatments, and error degrees of freedom left over.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from numbers import Real

import numpy as np

from workbook_tools.analysis.errors import TrialInputError


@dataclass(frozen=True)
class BlockDesign:
    """A validated randomised block layout.

    Attributes
    ----------
    blocks, treatments : tuple of str
        Labels in the user's order (first appearance).
    block_index, treatment_index : ndarray of int
        Per observation, the position of its block and treatment label.
    values : ndarray of float
        The observations.
    counts : ndarray of int, shape (n_blocks, n_treatments)
        Observations per cell; 0 marks a missing cell.
    dropped_blocks : tuple of str
        Blocks given without any observation (left out, with a warning).
    """

    blocks: tuple[str, ...]
    treatments: tuple[str, ...]
    block_index: np.ndarray
    treatment_index: np.ndarray
    values: np.ndarray
    counts: np.ndarray
    dropped_blocks: tuple[str, ...] = field(default=())

    @property
    def n(self) -> int:
        """Number of observations."""
        return int(self.values.size)

    @property
    def n_blocks(self) -> int:
        return len(self.blocks)

    @property
    def n_treatments(self) -> int:
        return len(self.treatments)

    @property
    def equal_counts(self) -> bool:
        """Every cell holds the same, non-zero number of observations."""
        first = self.counts.flat[0]
        return bool(first > 0 and np.all(self.counts == first))

    @property
    def replicated(self) -> bool:
        """Every cell holds at least two observations (interaction estimable)."""
        return bool(self.counts.min() >= 2)

    @property
    def one_per_cell_at_most(self) -> bool:
        return bool(self.counts.max() <= 1)

    @property
    def missing_cells(self) -> list[tuple[int, int]]:
        """(block position, treatment position) of every empty cell."""
        rows, cols = np.nonzero(self.counts == 0)
        return list(zip(rows.tolist(), cols.tolist()))


def _label_text(label: object, kind: str, position: int) -> str:
    if label is None or (isinstance(label, float) and math.isnan(label)):
        raise TrialInputError(f"The {kind} label in position {position + 1} is empty; give every {kind} a name.")
    if isinstance(label, bool):
        return str(label)
    if isinstance(label, Real):
        number = float(label)
        if number.is_integer():
            return str(int(number))
        return repr(number)
    text = str(label).strip()
    if not text:
        raise TrialInputError(f"The {kind} label in position {position + 1} is empty; give every {kind} a name.")
    return text


def _unique_labels(labels, kind: str) -> list[str]:
    labels = list(labels)
    if all(type(label) is str for label in labels):
        texts = [label.strip() for label in labels]
        if not all(texts):
            empty = texts.index("")
            raise TrialInputError(f"The {kind} label in position {empty + 1} is empty; give every {kind} a name.")
    else:
        texts = [_label_text(label, kind, i) for i, label in enumerate(labels)]
    seen: dict[str, int] = {}
    for i, text in enumerate(texts):
        if text in seen:
            raise TrialInputError(
                f"The {kind} label '{text}' appears twice (positions {seen[text] + 1} and {i + 1}); "
                f"every {kind} needs its own name."
            )
        seen[text] = i
    return texts


def _as_value(value: object, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (Real, np.floating, np.integer)):
        raise TrialInputError(f"{where} holds {value!r}, which is not a number.")
    number = float(value)
    if not math.isfinite(number):
        raise TrialInputError(f"{where} holds {number}, which is not a finite number.")
    return number


def _is_missing(value: object) -> bool:
    return value is None or (isinstance(value, (float, np.floating)) and math.isnan(value))


def design_from_grid(values, blocks, treatments) -> BlockDesign:
    """Build a design from a blocks-by-treatments grid.

    Parameters
    ----------
    values : 2-D array-like, shape (n_blocks, n_treatments)
        One observation per cell; ``None`` or NaN marks a missing cell.
    blocks, treatments : sequence
        Row and column labels, in the order to report them.

    Returns
    -------
    BlockDesign
    """
    block_labels = _unique_labels(blocks, "block")
    treatment_labels = _unique_labels(treatments, "treatment")
    if isinstance(values, np.ndarray) and values.dtype.kind in "fiu":
        return _from_numeric_grid(values, block_labels, treatment_labels)
    rows = [list(row) for row in values]
    if len(rows) != len(block_labels):
        raise TrialInputError(f"The grid has {len(rows)} rows but {len(block_labels)} block labels.")
    block_of, treatment_of, observed = [], [], []
    for i, row in enumerate(rows):
        if len(row) != len(treatment_labels):
            raise TrialInputError(
                f"Row {i + 1} of the grid has {len(row)} values but there are {len(treatment_labels)} treatments."
            )
        for j, value in enumerate(row):
            if _is_missing(value):
                continue
            where = f"The value for block '{block_labels[i]}', treatment '{treatment_labels[j]}'"
            observed.append(_as_value(value, where))
            block_of.append(i)
            treatment_of.append(j)
    return _validated(block_labels, treatment_labels, block_of, treatment_of, observed)


def _from_numeric_grid(values: np.ndarray, block_labels, treatment_labels) -> BlockDesign:
    """Vectorised path for a numeric array (NaN = missing)."""
    grid = np.asarray(values, dtype=float)
    if grid.ndim != 2 or grid.shape != (len(block_labels), len(treatment_labels)):
        raise TrialInputError(
            f"The grid has shape {grid.shape} but there are {len(block_labels)} blocks and "
            f"{len(treatment_labels)} treatments."
        )
    infinite = np.isinf(grid)
    if infinite.any():
        i, j = (int(k[0]) for k in np.nonzero(infinite))
        raise TrialInputError(
            f"The value for block '{block_labels[i]}', treatment '{treatment_labels[j]}' holds {grid[i, j]}, "
            "which is not a finite number."
        )
    present = ~np.isnan(grid)
    if present.all():   # a complete grid: positions follow from the shape
        b, t = grid.shape
        block_of = np.repeat(np.arange(b, dtype=np.intp), t)
        treatment_of = np.tile(np.arange(t, dtype=np.intp), b)
        return _validated(block_labels, treatment_labels, block_of, treatment_of, grid.ravel())
    block_of, treatment_of = np.nonzero(present)
    return _validated(block_labels, treatment_labels, block_of, treatment_of, grid[present])


def design_from_records(blocks, treatments, values) -> BlockDesign:
    """Build a design from one record per observation.

    Parameters
    ----------
    blocks, treatments, values : sequence
        Equal-length sequences: the block and treatment of each observation and
        its value. Any number of observations per cell is allowed; records with
        a missing value (``None``/NaN) are skipped.

    Returns
    -------
    BlockDesign
    """
    blocks, treatments, values = list(blocks), list(treatments), list(values)
    if not (len(blocks) == len(treatments) == len(values)):
        raise TrialInputError(
            f"Blocks, treatments and values must have the same length "
            f"(got {len(blocks)}, {len(treatments)} and {len(values)})."
        )
    block_pos: dict[str, int] = {}
    treatment_pos: dict[str, int] = {}
    block_of, treatment_of, observed = [], [], []
    for i, (block, treatment, value) in enumerate(zip(blocks, treatments, values)):
        block_text = _label_text(block, "block", i)
        treatment_text = _label_text(treatment, "treatment", i)
        b = block_pos.setdefault(block_text, len(block_pos))
        t = treatment_pos.setdefault(treatment_text, len(treatment_pos))
        if _is_missing(value):
            continue
        observed.append(_as_value(value, f"Observation {i + 1} (block '{block_text}', treatment '{treatment_text}')"))
        block_of.append(b)
        treatment_of.append(t)
    return _validated(list(block_pos), list(treatment_pos), block_of, treatment_of, observed)


def _connected(counts: np.ndarray) -> bool:
    """Whether the block-treatment incidence graph is connected."""
    n_blocks, n_treatments = counts.shape
    seen_t = np.zeros(n_treatments, bool)
    seen_b = np.zeros(n_blocks, bool)
    seen_t[0] = True
    frontier_t = seen_t.copy()
    present = counts > 0
    while frontier_t.any():
        new_b = present[:, frontier_t].any(axis=1) & ~seen_b
        seen_b |= new_b
        new_t = present[new_b].any(axis=0) & ~seen_t
        seen_t |= new_t
        frontier_t = new_t
    return bool(seen_t.all())


LARGEST_MAGNITUDE = 1e40
"""Values beyond this in size are refused: the checks' sums of powers of them would overflow."""
SMALLEST_LARGEST_MAGNITUDE = 1e-40
"""When no value is at least this large (and some are not zero), sums of squares would underflow."""


def _check_magnitude(values: np.ndarray) -> None:
    """Refuse values whose sums of squares (and of cubes, in Tukey's check) overflow or lose precision."""
    largest = float(np.max(np.abs(values))) if values.size else 0.0
    if largest > LARGEST_MAGNITUDE:
        raise TrialInputError(
            f"A value as large as {largest:.3g} cannot be analysed reliably (the sums of squares would "
            f"overflow); values up to {LARGEST_MAGNITUDE:g} in size are allowed. Express the response in a "
            "larger unit (for example, divide every value by a power of ten)."
        )
    if 0.0 < largest < SMALLEST_LARGEST_MAGNITUDE:
        raise TrialInputError(
            f"Every value is smaller than {SMALLEST_LARGEST_MAGNITUDE:g} in size (the largest is {largest:.3g}), "
            "so the sums of squares would lose their precision. Express the response in a smaller unit "
            "(for example, multiply every value by a power of ten)."
        )


def _validated(block_labels, treatment_labels, block_of, treatment_of, observed) -> BlockDesign:
    block_index = np.asarray(block_of, dtype=np.intp)
    treatment_index = np.asarray(treatment_of, dtype=np.intp)
    values = np.asarray(observed, dtype=float)
    _check_magnitude(values)
    if len(treatment_labels) < 2:
        raise TrialInputError(f"At least two treatments are needed to compare; found {len(treatment_labels)}.")
    n_b, n_t = len(block_labels), len(treatment_labels)
    counts = np.bincount(block_index * n_t + treatment_index, minlength=n_b * n_t).reshape(n_b, n_t)
    empty_treatments = [treatment_labels[j] for j in np.nonzero(counts.sum(axis=0) == 0)[0]]
    if empty_treatments:
        raise TrialInputError(
            "These treatments have no observations at all: " + ", ".join(f"'{t}'" for t in empty_treatments)
            + ". Remove them or enter their values."
        )
    kept = counts.sum(axis=1) > 0
    dropped = tuple(label for label, keep in zip(block_labels, kept) if not keep)
    if dropped:
        new_position = np.cumsum(kept) - 1
        block_index = new_position[block_index]
        block_labels = [label for label, keep in zip(block_labels, kept) if keep]
        counts = counts[kept]
    if len(block_labels) < 2:
        raise TrialInputError(
            f"At least two blocks with observations are needed; found {len(block_labels)}. "
            "With a single block there is nothing to separate from the error."
        )
    if not _connected(counts):
        raise TrialInputError(
            "The blocks do not connect the treatments: some treatments never share a block, even "
            "through other treatments, so their difference cannot be separated from the block effects."
        )
    error_df = values.size - len(block_labels) - len(treatment_labels) + 1
    if error_df < 1:
        raise TrialInputError(
            f"No degrees of freedom are left for the error ({values.size} observations for "
            f"{len(block_labels)} blocks and {len(treatment_labels)} treatments); more observations are needed."
        )
    return BlockDesign(
        blocks=tuple(block_labels),
        treatments=tuple(treatment_labels),
        block_index=block_index,
        treatment_index=treatment_index,
        values=values,
        counts=counts,
        dropped_blocks=dropped,
    )
