"""Blind assignment: which variant each listener-facing label plays, trial by trial.

Every draw comes from :class:`secrets.SystemRandom` (the operating system's
cryptographic source), so a listener cannot predict or reconstruct the assignment from
anything they see. The assignment stays on the server; what the listener gets are the
labels and one random token per label and trial (:data:`TOKEN_BYTES`), unrelated to the
variant behind it.

Modes
-----
``ab``
    Each trial presents two variants as A and B; the listener says which they prefer.
    With more than two variants, the pairs are scheduled so that every pair comes up
    equally often (to within one round), in a random order, with A and B drawn per trial.
``abx``
    Exactly two variants, as A and B in a random order per trial; X is A or B, drawn
    per trial with equal chance; the listener says which one X is.
"""

from __future__ import annotations

import itertools
import secrets
from dataclasses import dataclass

__all__ = ["MODES", "TOKEN_BYTES", "Trial", "draw_trials", "new_token"]

MODES = ("ab", "abx")

#: Bytes of randomness per audio token (128 bits: not guessable, common practice for
#: capability URLs).
TOKEN_BYTES = 16


def new_token() -> str:
    """A fresh random audio token: 32 hex digits, like every id of the service."""
    return secrets.token_hex(TOKEN_BYTES)


@dataclass(frozen=True)
class Trial:
    """One trial: ``labels`` maps each label (``A``, ``B``, ``X``) to a variant index."""

    labels: dict[str, int]
    tokens: dict[str, str]

    def to_dict(self) -> dict:
        return {"labels": dict(self.labels), "tokens": dict(self.tokens)}


def draw_trials(
    n_variants: int, mode: str, trials: int, rng: secrets.SystemRandom | None = None
) -> list[Trial]:
    """Draw the assignment of a session.

    Parameters
    ----------
    n_variants : int
        2 to 8 (``abx``: exactly 2).
    mode : str
        ``"ab"`` or ``"abx"``.
    trials : int
        Number of trials (1 or more).
    rng : secrets.SystemRandom, optional
        The random source (tests may pass a seeded ``random.Random`` for repeatability).
    """
    if mode not in MODES:
        raise ValueError(f"unknown mode {mode!r}; choose one of {', '.join(MODES)}")
    if mode == "abx" and n_variants != 2:
        raise ValueError(f"abx compares exactly 2 variants, not {n_variants}")
    if not 2 <= n_variants <= 8:
        raise ValueError(f"a comparison has 2 to 8 variants, not {n_variants}")
    if trials < 1:
        raise ValueError(f"trials must be at least 1, not {trials}")
    rng = rng or secrets.SystemRandom()
    pairs = list(itertools.combinations(range(n_variants), 2))
    schedule: list[tuple[int, int]] = []
    while len(schedule) < trials:
        round_ = pairs[:]
        rng.shuffle(round_)
        schedule.extend(round_)
    out = []
    for first, second in schedule[:trials]:
        a, b = (first, second) if rng.randrange(2) == 0 else (second, first)
        labels = {"A": a, "B": b}
        if mode == "abx":
            labels["X"] = a if rng.randrange(2) == 0 else b
        out.append(Trial(labels, {label: new_token() for label in labels}))
    return out
