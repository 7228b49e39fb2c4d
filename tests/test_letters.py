"""Compact letter display: correctness property, simple cases, letter names."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.analysis.letters import letter_groups, letter_matrix, letter_names


def letters_of(text: str, spaced: bool) -> set[str]:
    """The letters of one display string (space-separated beyond 26 letters)."""
    return set(text.split(" ")) if spaced else set(text)


def assert_display_is_faithful(labels, means, significant):
    groups = letter_groups(labels, means, significant)
    assert list(groups) == list(labels)
    spaced = letter_matrix(means, significant).shape[0] > 26
    sets = [letters_of(groups[label], spaced) for label in labels]
    assert all(sets), "every treatment needs at least one letter"
    t = len(labels)
    for i in range(t):
        for j in range(i + 1, t):
            assert bool(sets[i] & sets[j]) == (not significant[i][j]), (i, j, groups)
    if t:
        top = int(np.argmax(means))
        assert "a" in sets[top]
    return groups


@st.composite
def comparison_patterns(draw, max_t=12):
    t = draw(st.integers(1, max_t))
    upper = draw(st.lists(st.booleans(), min_size=t * t, max_size=t * t))
    significant = np.triu(np.array(upper, dtype=bool).reshape(t, t), 1)
    significant = significant | significant.T
    means = draw(st.lists(st.floats(-100, 100), min_size=t, max_size=t))
    return [f"T{k}" for k in range(t)], np.array(means), significant


@settings(max_examples=300, deadline=None)
@given(comparison_patterns())
def test_shared_letter_iff_not_significant_on_arbitrary_patterns(pattern):
    # Arbitrary symmetric patterns: non-transitive and overlapping, not runs of sorted means.
    assert_display_is_faithful(*pattern)


@settings(max_examples=100, deadline=None)
@given(st.lists(st.floats(-10, 10), min_size=2, max_size=15), st.floats(0.1, 5))
def test_runs_of_sorted_means_from_a_threshold(means, threshold):
    means = np.array(means)
    significant = np.abs(means[:, None] - means[None, :]) > threshold
    assert_display_is_faithful([f"T{k}" for k in range(len(means))], means, significant)


def test_many_overlapping_groups_stay_correct():
    # A significant perfect matching on 40 treatments has 2**20 maximal non-significant
    # groups; the display must still be exact.
    t = 40
    significant = np.zeros((t, t), dtype=bool)
    for k in range(0, t, 2):
        significant[k, k + 1] = significant[k + 1, k] = True
    means = np.linspace(10, 1, t)
    assert_display_is_faithful([f"T{k}" for k in range(t)], means, significant)


def test_random_fifty_treatment_patterns_stay_correct():
    rng = np.random.default_rng(7)
    t = 50
    for share in (0.05, 0.5, 0.95):
        upper = np.triu(rng.random((t, t)) < share, 1)
        significant = upper | upper.T
        assert_display_is_faithful([f"T{k}" for k in range(t)], rng.normal(size=t), significant)


def test_no_significant_pairs_gives_everyone_a():
    groups = letter_groups(["A", "B", "C"], [3.0, 1.0, 2.0], np.zeros((3, 3), dtype=bool))
    assert groups == {"A": "a", "B": "a", "C": "a"}


def test_all_pairs_significant_gives_distinct_letters_in_mean_order():
    significant = ~np.eye(4, dtype=bool)
    groups = letter_groups(["A", "B", "C", "D"], [2.0, 4.0, 1.0, 3.0], significant)
    assert groups == {"B": "a", "D": "b", "A": "c", "C": "d"}


def test_hand_worked_overlap():
    # Worked by hand: means A > B > C, only A-C significant, so A and B share one letter,
    # B and C another: A "a", B "ab", C "b".
    significant = np.array([[0, 0, 1], [0, 0, 0], [1, 0, 0]], dtype=bool)
    assert letter_groups(["A", "B", "C"], [9.0, 5.0, 1.0], significant) == {
        "A": "a", "B": "ab", "C": "b"}


def test_hand_worked_non_transitive_square():
    # Worked by hand: four treatments on a cycle A-B-C-D-A of non-significant pairs
    # (A-C and B-D significant) need four letters, one per edge of the cycle.
    significant = np.array([[0, 0, 1, 0], [0, 0, 0, 1], [1, 0, 0, 0], [0, 1, 0, 0]], bool)
    groups = letter_groups(["A", "B", "C", "D"], [4.0, 3.0, 2.0, 1.0], significant)
    assert groups == {"A": "ab", "B": "ac", "C": "cd", "D": "bd"}


def test_more_than_26_letters_are_named_and_separated():
    t = 28
    groups = letter_groups([f"T{k}" for k in range(t)], np.arange(t, 0, -1.0),
                           ~np.eye(t, dtype=bool))
    assert groups["T0"] == "a"
    assert groups["T25"] == "z"
    assert groups["T26"] == "aa"
    assert groups["T27"] == "ab"
    significant = ~np.eye(t, dtype=bool)
    significant[0, 1] = significant[1, 0] = False
    groups = letter_groups([f"T{k}" for k in range(t)], np.arange(t, 0, -1.0), significant)
    assert groups["T0"] == "a" and groups["T1"] == "a" and groups["T27"] == "aa"


def test_letter_names_count_like_spreadsheet_columns():
    names = letter_names(703)
    assert names[:3] == ["a", "b", "c"]
    assert names[25:28] == ["z", "aa", "ab"]
    assert names[701:] == ["zz", "aaa"]
    assert len(set(names)) == 703


def test_letter_matrix_rows_are_ordered_by_highest_mean():
    significant = np.array([[0, 0, 1], [0, 0, 0], [1, 0, 0]], dtype=bool)
    matrix = letter_matrix([1.0, 5.0, 9.0], significant)
    np.testing.assert_array_equal(matrix, [[False, True, True], [True, True, False]])


def test_empty_and_single_treatment():
    assert letter_groups([], [], np.zeros((0, 0), dtype=bool)) == {}
    assert letter_groups(["only"], [1.0], [[False]]) == {"only": "a"}


@pytest.mark.parametrize("significant", [
    np.array([[0, 1], [0, 0]], dtype=bool),  # not symmetric
    np.zeros((3, 3), dtype=bool),  # wrong size
])
def test_bad_significance_tables_are_refused(significant):
    with pytest.raises(TrialInputError):
        letter_groups(["A", "B"], [1.0, 2.0], significant)


def test_duplicate_labels_are_refused():
    with pytest.raises(TrialInputError):
        letter_groups(["A", "A"], [1.0, 2.0], np.zeros((2, 2), dtype=bool))
