"""Blind, level-matched comparisons (A/B and ABX) of render variants of one stem.

* :mod:`.assignment` draws which variant plays under each label, per trial (``secrets``).
* :mod:`.session` is the stored session, its states and its views (before and after the
  reveal).
* :mod:`.stats` has the preference counts and the binomial test.
* :mod:`.builder` renders the excerpts, level-matches them and writes the trial files; it
  runs only in a worker's child (:mod:`.build_child`), never in a route.
"""

from __future__ import annotations

from .assignment import MODES, Trial, draw_trials, new_token
from .session import STATES, SessionError
from .stats import binomial_p_at_least, binomial_p_two_sided, preference_counts

__all__ = [
    "MODES",
    "STATES",
    "SessionError",
    "Trial",
    "binomial_p_at_least",
    "binomial_p_two_sided",
    "draw_trials",
    "new_token",
    "preference_counts",
]
