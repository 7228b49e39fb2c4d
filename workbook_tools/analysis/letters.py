"""Compact letter display of all-pairwise comparisons.

Two treatments share a letter exactly when they do not differ significantly. Letters are
built with Piepho's insert-absorb algorithm, then swept of redundant letters, ordered so
that ``a`` goes to the group holding the highest mean, and named ``a`` .. ``z``, then
``aa``, ``ab``, ... (see ``letter_names``).
"""

from __future__ import annotations

import numpy as np

from workbook_tools.analysis.errors import TrialInputError

_ALPHABET = "abcdefghijklmnopqrstuvwxyz"


def letter_names(count: int) -> list[str]:
    """The first ``count`` letter names: ``a`` .. ``z``, ``aa`` .. ``az``, ``ba``, ...

    Names are counted in bijective base 26, as spreadsheet columns are. When more than 26
    letters are needed, ``letter_groups`` separates the letters of a treatment with spaces,
    so that ``a ab`` cannot be misread as ``aa b``.
    """
    names = []
    for number in range(1, count + 1):
        name = ""
        while number:
            number, digit = divmod(number - 1, 26)
            name = _ALPHABET[digit] + name
        names.append(name)
    return names


def _validated(significant, t: int) -> np.ndarray:
    matrix = np.asarray(significant, dtype=bool)
    if matrix.shape != (t, t):
        raise TrialInputError(f"The significance table must be {t} by {t}.")
    if not np.array_equal(matrix, matrix.T):
        raise TrialInputError("The significance table must be symmetric.")
    matrix = matrix.copy()
    np.fill_diagonal(matrix, False)
    return matrix


def _insert_absorb(significant: np.ndarray) -> np.ndarray:
    """Letter columns (rows of the result: letters; columns: treatments), swept.

    Start with one letter shared by all treatments. For each significant pair (i, j), every
    letter held by both is split into a copy without i and a copy without j (insert); a
    new letter whose treatments are a subset of another letter's is dropped (absorb). Only
    new letters need checking: the letters form an antichain before each step, old letters
    cannot be subsets of new ones (which are subsets of old ones), and no two new letters
    are equal. Without pruning the letters are the maximal cliques of the non-significance
    graph, whose number can grow exponentially; so whenever the letters double past the
    last count, the sweep is run in between. Every step keeps the invariant (pairs not yet
    split share a letter, pairs split do not), and after a sweep each letter is the only
    one of some treatment or the only one shared by some pair, so at most
    ``t + t (t - 1) / 2`` letters remain and the work stays polynomial.
    """
    t = significant.shape[0]
    columns = np.ones((1, t), dtype=bool)
    threshold = 4 * t
    for i, j in zip(*np.nonzero(np.triu(significant))):
        both = columns[:, i] & columns[:, j]
        if not both.any():
            continue
        split = columns[both]
        without_i, without_j = split.copy(), split.copy()
        without_i[:, i] = False
        without_j[:, j] = False
        kept = columns[~both]
        new = np.vstack([without_i, without_j])
        # new[a] is a subset of candidates[c] iff it has no treatment outside candidates[c].
        candidates = np.vstack([kept, new])
        outside = new.astype(np.int32) @ (~candidates).T.astype(np.int32)
        own = np.arange(new.shape[0]) + kept.shape[0]
        outside[np.arange(new.shape[0]), own] = 1  # a letter is not absorbed by itself
        absorbed = (outside == 0).any(axis=1)
        columns = np.vstack([kept, new[~absorbed]])
        if columns.shape[0] > threshold:
            columns = _sweep(columns)
            threshold = max(4 * t, 2 * columns.shape[0])
    return _sweep(columns)


def _runs_of_sorted_means(significant: np.ndarray, by_mean: np.ndarray) -> np.ndarray | None:
    """Letters as maximal runs of mean-sorted treatments, when that is exact; else None.

    When, in mean order, every treatment's non-significant partners form one unbroken
    run that starts at the treatment itself and the runs' ends never move backwards,
    the maximal runs are exactly the maximal groups of mutually non-differing
    treatments, so they are the letters (and no letter is redundant). This is the usual
    pattern with one common critical difference and is found in O(t^2).
    """
    t = by_mean.size
    same = ~significant[np.ix_(by_mean, by_mean)]
    upper = np.triu(same)
    positions = np.arange(t)
    end = np.where(upper, positions[None, :], -1).max(axis=1)
    if np.any(np.diff(end) < 0):
        return None
    band = (positions[None, :] >= positions[:, None]) & (positions[None, :] <= end[:, None])
    if not np.array_equal(band, upper):
        return None
    starts = np.flatnonzero(np.r_[True, end[1:] > end[:-1]])
    columns = np.zeros((starts.size, t), dtype=bool)
    for row, start in enumerate(starts):
        columns[row, by_mean[start:end[start] + 1]] = True
    return columns


def _sweep(columns: np.ndarray) -> np.ndarray:
    """Remove letters that are not needed to keep every non-significant pair together.

    Treatment i may give up letter c when it holds another letter and shares at least one
    other letter with every treatment holding c. Within one letter these removals do not
    interact (a pair that loses c keeps its other shared letter), so each letter is swept
    in one step. Passes repeat until nothing changes; letters left empty are dropped.
    """
    columns = columns[np.argsort(-columns.sum(axis=1), kind="stable")]
    shared = columns.T.astype(np.int64) @ columns.astype(np.int64)
    changed = True
    while changed:
        changed = False
        for c in range(columns.shape[0]):
            members = np.flatnonzero(columns[c])
            # shared[i, i] > 1 is "holds another letter"; off-diagonal: another shared one.
            removable = members[np.all(shared[np.ix_(members, members)] > 1, axis=1)]
            if removable.size == 0:
                continue
            shared[np.ix_(members, members)] -= 1
            columns[c, removable] = False
            remaining = np.flatnonzero(columns[c])
            shared[np.ix_(remaining, remaining)] += 1
            changed = True
    return columns[columns.any(axis=1)]


def letter_matrix(means, significant) -> np.ndarray:
    """Ordered letter membership: row k tells which treatments hold the k-th letter.

    Parameters
    ----------
    means : array_like, shape (t,)
        Treatment means; they only decide the order of the letters.
    significant : array_like of bool, shape (t, t)
        Symmetric; True where the pair differs significantly (diagonal ignored).

    Returns
    -------
    numpy.ndarray of bool, shape (letters, t)
        Letters ordered by the highest-mean treatment holding them, ties broken by the
        next highest, and so on; two treatments share a row iff they do not differ.

    References
    ----------
    Piepho, H.-P. (2004). An algorithm for a letter-based representation of all-pairwise
    comparisons. J. Comput. Graph. Statist. 13:456-466.
    """
    means = np.asarray(means, dtype=float).ravel()
    t = means.size
    significant = _validated(significant, t)
    if t == 0:
        return np.zeros((0, 0), dtype=bool)
    by_mean = np.argsort(-np.where(np.isfinite(means), means, -np.inf), kind="stable")
    columns = _runs_of_sorted_means(significant, by_mean)
    if columns is None:
        columns = _insert_absorb(significant)
    rank = np.empty(t, dtype=int)
    rank[by_mean] = np.arange(t)
    keys = [tuple(sorted(rank[np.flatnonzero(row)])) for row in columns]
    return columns[sorted(range(len(keys)), key=keys.__getitem__)]


def letter_groups(labels, means, significant) -> dict[str, str]:
    """Compact letter display: each treatment label mapped to its string of letters.

    Two treatments share a letter exactly when they do not differ significantly. The
    letter ``a`` goes to the group holding the highest mean, ``b`` to the next, and so on.
    Beyond 26 letters the names go on ``aa``, ``ab``, ... and each treatment's letters are
    then separated by single spaces.

    Parameters
    ----------
    labels : sequence of str
        Treatment labels, in the order of ``means`` and ``significant``.
    means : array_like, shape (t,)
        Treatment means.
    significant : array_like of bool, shape (t, t)
        Symmetric; True where the pair differs significantly.

    Returns
    -------
    dict of str to str

    References
    ----------
    Piepho, H.-P. (2004). An algorithm for a letter-based representation of all-pairwise
    comparisons. J. Comput. Graph. Statist. 13:456-466.
    """
    labels = [str(label) for label in labels]
    if len(labels) != np.asarray(means).size:
        raise TrialInputError("There must be one mean per treatment label.")
    if len(set(labels)) != len(labels):
        raise TrialInputError("Treatment labels must be distinct.")
    matrix = letter_matrix(means, significant)
    names = letter_names(matrix.shape[0])
    separator = " " if matrix.shape[0] > 26 else ""
    return {label: separator.join(names[k] for k in np.flatnonzero(matrix[:, i]))
            for i, label in enumerate(labels)}
