"""Statistics of a finished comparison: preference counts and the ABX binomial test.

An ABX listener who hears no difference answers each trial right with probability 1/2,
so the number right out of ``n`` trials is binomial(n, 1/2); the p-value is the chance
of at least that many right by guessing (one-sided binomial test, as in any statistics
handbook; checked against ``scipy.stats.binomtest`` in the tests). It is computed
exactly with integers, so this module needs no scipy.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from fractions import Fraction

__all__ = ["binomial_p_at_least", "binomial_p_two_sided", "preference_counts"]


def binomial_p_at_least(successes: int, trials: int, p: float | Fraction = Fraction(1, 2)) -> float:
    """P(K >= ``successes``) for K ~ binomial(``trials``, ``p``): the one-sided p-value.

    Parameters
    ----------
    successes, trials : int
        0 <= successes <= trials.
    p : float or Fraction
        Chance of a success in one trial under the null hypothesis (1/2 for ABX).

    Examples
    --------
    >>> round(binomial_p_at_least(12, 16), 4)   # 2517 / 65536
    0.0384
    """
    _check(successes, trials)
    q = Fraction(p)
    if not 0 <= q <= 1:
        raise ValueError(f"p must be from 0 to 1, not {p!r}")
    total = sum(
        math.comb(trials, i) * q**i * (1 - q) ** (trials - i) for i in range(successes, trials + 1)
    )
    return float(total)


def binomial_p_two_sided(successes: int, trials: int) -> float:
    """Two-sided p-value of ``successes`` out of ``trials`` against p = 1/2.

    With p = 1/2 the distribution is symmetric, so this is twice the smaller tail,
    capped at 1 (the same as ``scipy.stats.binomtest(..., alternative="two-sided")``).
    """
    _check(successes, trials)
    k = max(successes, trials - successes)
    return min(1.0, 2.0 * binomial_p_at_least(k, trials))


def preference_counts(
    n_variants: int,
    presented: Sequence[Sequence[int]],
    chosen: Sequence[int | None],
    no_preference: Sequence[bool] | None = None,
) -> list[dict]:
    """Per variant: trials it was heard in with a preference given, trials it was
    preferred in, and trials it was heard in answered "no preference".

    A "no preference" answer (a tie) is counted apart and left out of
    ``answered_trials`` and ``preferred_share``: the share is of the trials in which the
    listener chose (as the sign test drops ties; common practice).

    Parameters
    ----------
    n_variants : int
    presented : sequence of sequences of int
        The variants heard in each trial.
    chosen : sequence of int or None
        The variant preferred in each trial (None: not answered, or no preference).
    no_preference : sequence of bool, optional
        Per trial: answered "no preference" (its ``chosen`` is None).

    Examples
    --------
    >>> c = preference_counts(2, [[0, 1], [1, 0], [0, 1]], [1, None, 1], [False, True, False])
    >>> [(x["answered_trials"], x["preferred"], x["no_preference"]) for x in c]
    [(2, 0, 1), (2, 2, 1)]
    """
    ties = list(no_preference) if no_preference is not None else [False] * len(chosen)
    heard = [0] * n_variants
    won = [0] * n_variants
    tied = [0] * n_variants
    for variants, choice, tie in zip(presented, chosen, ties):
        if tie:
            for v in set(variants):
                tied[v] += 1
            continue
        if choice is None:
            continue
        for v in set(variants):
            heard[v] += 1
        won[choice] += 1
    return [
        {
            "variant": i,
            "answered_trials": heard[i],
            "preferred": won[i],
            "no_preference": tied[i],
            "preferred_share": round(won[i] / heard[i], 4) if heard[i] else None,
        }
        for i in range(n_variants)
    ]


def _check(successes: int, trials: int) -> None:
    if (
        not (isinstance(successes, int) and isinstance(trials, int))
        or trials < 0
        or not 0 <= successes <= trials
    ):
        raise ValueError(
            f"need 0 <= successes <= trials (integers), not {successes!r} of {trials!r}"
        )
