"""Statistics and blind assignment of comparisons (earfold.service.comparisons.stats, .assignment).

References
----------
* scipy.stats.binomtest (scipy, the general-purpose reference library) for every p-value.
* Worked example (../shared/REFERENCES.md, "ABX"): 12 correct of 16 trials with p = 0.5
  gives a one-sided p of about 0.038; exactly sum_{k>=12} C(16, k) / 2**16 = 2517 / 65536.
* Balance: Pearson's chi-square goodness-of-fit test (scipy.stats.chisquare) on 200 drawn
  trials, accepted at p > 0.001 (the issue's criterion).
"""

from __future__ import annotations

import itertools
import random
import re

import pytest
from scipy import stats

from earfold.service.comparisons import (
    binomial_p_at_least,
    binomial_p_two_sided,
    draw_trials,
    preference_counts,
)

# ----------------------------------------------------------------------------- p-values


def test_worked_example_12_of_16():
    # REFERENCES.md: 12 of 16 ABX trials right -> one-sided p ~ 0.038.
    assert binomial_p_at_least(12, 16) == pytest.approx(2517 / 65536, rel=1e-12)
    assert round(binomial_p_at_least(12, 16), 3) == 0.038


@pytest.mark.parametrize(
    ("k", "n"),
    [
        (0, 1),
        (1, 1),
        (5, 10),
        (8, 10),
        (10, 10),
        (0, 16),
        (9, 16),
        (13, 16),
        (30, 50),
        (41, 60),
        (70, 100),
    ],
)
def test_one_sided_p_matches_scipy_binomtest(k, n):
    expected = stats.binomtest(k, n, 0.5, alternative="greater").pvalue
    assert binomial_p_at_least(k, n) == pytest.approx(expected, rel=1e-9, abs=1e-15)


@pytest.mark.parametrize(("k", "n"), [(0, 4), (2, 4), (3, 10), (7, 10), (12, 16), (50, 100)])
def test_two_sided_p_matches_scipy_binomtest(k, n):
    expected = stats.binomtest(k, n, 0.5, alternative="two-sided").pvalue
    assert binomial_p_two_sided(k, n) == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize("p", [0.1, 0.25, 0.9])
def test_one_sided_p_with_other_chance_levels(p):
    assert binomial_p_at_least(4, 9, p) == pytest.approx(
        stats.binomtest(4, 9, p, alternative="greater").pvalue, rel=1e-9
    )


@pytest.mark.parametrize(("k", "n"), [(-1, 4), (5, 4), (1.5, 4), (1, -1)])
def test_impossible_counts_are_refused(k, n):
    with pytest.raises(ValueError, match="successes <= trials"):
        binomial_p_at_least(k, n)


def test_preference_counts_by_hand():
    # Three trials of variants (0, 1), (1, 2), (0, 2); chosen 1, 1, not answered.
    counts = preference_counts(3, [(0, 1), (1, 2), (0, 2)], [1, 1, None])
    assert [c["answered_trials"] for c in counts] == [1, 2, 1]
    assert [c["preferred"] for c in counts] == [0, 2, 0]
    assert counts[1]["preferred_share"] == 1.0


# --------------------------------------------------------------------------- assignment


def test_tokens_are_random_hex_and_unique():
    trials = draw_trials(2, "abx", 100)
    tokens = [t for trial in trials for t in trial.tokens.values()]
    assert len(set(tokens)) == len(tokens) == 300
    assert all(re.fullmatch(r"[0-9a-f]{32}", t) for t in tokens)


def test_ab_assignment_is_balanced_over_200_trials():
    trials = draw_trials(2, "ab", 200)
    a_is_first = sum(1 for t in trials if t.labels["A"] == 0)
    result = stats.chisquare([a_is_first, 200 - a_is_first])
    assert result.pvalue > 0.001, (a_is_first, result)
    assert all(sorted(t.labels.values()) == [0, 1] for t in trials)


def test_abx_assignment_is_balanced_over_200_trials():
    trials = draw_trials(2, "abx", 200)
    x_is_a = sum(1 for t in trials if t.labels["X"] == t.labels["A"])
    x_is_first = sum(1 for t in trials if t.labels["X"] == 0)
    for count in (x_is_a, x_is_first):
        assert stats.chisquare([count, 200 - count]).pvalue > 0.001, count
    # The four (A, X) arrangements together, too.
    cells = [
        sum(1 for t in trials if (t.labels["A"], t.labels["X"]) == c)
        for c in itertools.product((0, 1), repeat=2)
    ]
    assert stats.chisquare(cells).pvalue > 0.001, cells


def test_pairs_of_four_variants_are_scheduled_evenly():
    trials = draw_trials(4, "ab", 200)
    pairs = [tuple(sorted(t.labels.values())) for t in trials]
    per_pair = [pairs.count(p) for p in itertools.combinations(range(4), 2)]
    # 200 trials over 6 pairs: whole rounds of every pair, so 33 or 34 each.
    assert sorted(set(per_pair)) in ([33, 34], [33], [34])
    heard = [sum(1 for p in pairs if v in p) for v in range(4)]
    assert max(heard) - min(heard) <= 3
    first = sum(1 for t in trials if t.labels["A"] < t.labels["B"])
    assert stats.chisquare([first, 200 - first]).pvalue > 0.001


def test_a_seeded_source_repeats_the_draw():
    one = draw_trials(3, "ab", 12, rng=random.Random(5))
    two = draw_trials(3, "ab", 12, rng=random.Random(5))
    assert [t.labels for t in one] == [t.labels for t in two]


@pytest.mark.parametrize(
    ("n", "mode", "trials", "pattern"),
    [
        (3, "abx", 5, "exactly 2"),
        (1, "ab", 5, "2 to 8"),
        (9, "ab", 5, "2 to 8"),
        (2, "ab", 0, "at least 1"),
        (2, "mushra", 5, "unknown mode"),
    ],
)
def test_bad_assignment_requests(n, mode, trials, pattern):
    with pytest.raises(ValueError, match=pattern):
        draw_trials(n, mode, trials)
