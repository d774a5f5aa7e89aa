"""A comparison session: its stored record, its states, and the views of it.

A session lives in ``DATA_DIR/comparisons/ID/``: ``meta.json`` (the request, the blind
assignment, the answers), ``prepared.json`` and ``audio/`` once the builder is done. Its
state follows from those and from its build job:

``preparing``  the build job is queued or running (``progress`` is the job's)
``ready``      the trial audio is there; trials can be answered
``finished``   every trial answered, or finished early; the reveal is open
``failed``     the build failed or was cancelled (``message`` says why)

:func:`public_view` is everything a listener may see before the reveal: the labels of
each trial and opaque audio URLs, never which variant plays under which label, nor
per-variant figures that could tell them apart. :func:`reveal` is the rest.
"""

from __future__ import annotations

import contextlib
import csv
import fcntl
import io
import json
import time
from collections.abc import Callable, Iterator
from pathlib import Path

from ..jobs import Job, JobState
from ..storage import META, Storage, write_json_atomic
from .stats import binomial_p_at_least, binomial_p_two_sided, preference_counts
from .summary import variant_settings, variant_summary

__all__ = [
    "ANSWER_CHOICES",
    "NO_PREFERENCE",
    "STATES",
    "SessionError",
    "answer",
    "finish",
    "locked",
    "prepared",
    "public_view",
    "reveal",
    "reveal_csv",
    "state_of",
]

STATES = ("preparing", "ready", "finished", "failed")

#: The answer of an A/B trial in which the listener prefers neither.
NO_PREFERENCE = "none"

#: The answers each design takes.
#: The answers each design takes: A/B preference also takes ``"none"`` (no preference);
#: ABX is a forced choice.
ANSWER_CHOICES: dict[str, tuple[str, ...]] = {"ab": ("A", "B", NO_PREFERENCE), "abx": ("A", "B")}

_LOCK = ".lock"

#: The file the builder leaves in a comparison's folder when the trial audio is ready.
PREPARED = "prepared.json"


class SessionError(ValueError):
    """An answer or a finish that the session's state does not allow (HTTP 409)."""


def iso(ts: float | None) -> str | None:
    if ts is None:
        return None
    return time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(ts)) + f".{int(ts % 1 * 1000):03d}Z"


@contextlib.contextmanager
def locked(storage: Storage, session_id: str) -> Iterator[Path]:
    """Hold the session's lock (answers from two tabs are applied one after the other)."""
    folder = storage.path("comparisons", session_id)
    with open(folder / _LOCK, "a+") as fh:
        fcntl.flock(fh, fcntl.LOCK_EX)
        try:
            yield folder
        finally:
            fcntl.flock(fh, fcntl.LOCK_UN)


def update(storage: Storage, session_id: str, owner: str, change: Callable[[dict], None]) -> dict:
    """Read the session under its lock, apply ``change``, write it back; the new record."""
    with locked(storage, session_id) as folder:
        meta = storage.read_meta("comparisons", session_id, owner)
        change(meta)
        write_json_atomic(folder / META, meta)
        return meta


def prepared(storage: Storage, session_id: str) -> dict | None:
    """What the builder recorded, or None while it has not finished."""
    try:
        return json.loads((storage.path("comparisons", session_id) / PREPARED).read_text())
    except (OSError, ValueError):
        return None


def state_of(meta: dict, built: dict | None, job: Job | None) -> tuple[str, float, str | None]:
    """(state, progress, message) of a session."""
    if built is not None:
        return ("finished" if meta.get("finished") else "ready"), 1.0, None
    if job is None:
        return (
            "failed",
            0.0,
            "the build job is gone (the server's data was cleaned up); create the comparison again",
        )
    if job.state in (JobState.FAILED, JobState.CANCELLED):
        return "failed", job.progress, job.message or f"the build was {job.state.value}"
    if job.state is JobState.DONE:  # done, but no prepared.json: removed meanwhile
        return "failed", 1.0, "the comparison's audio is gone; create the comparison again"
    return "preparing", job.progress, None


def _trial_view(session_id: str, index: int, trial: dict, ready: bool) -> dict:
    # Labels in a fixed order and tokens only: nothing here depends on the variants.
    labels = sorted(trial["labels"], key="ABX".index)
    return {
        "index": index,
        "labels": labels,
        "audio": (
            {
                label: f"/v1/comparisons/{session_id}/audio/{trial['tokens'][label]}"
                for label in labels
            }
            if ready
            else None
        ),
        "answer": (trial.get("answer") or {}).get("choice"),
    }


def public_view(meta: dict, built: dict | None, job: Job | None) -> dict:
    """The JSON of ``GET /v1/comparisons/{id}``: nothing in it tells variants apart."""
    sid = meta["id"]
    state, progress, message = state_of(meta, built, job)
    ready = state in ("ready", "finished")
    trials = [_trial_view(sid, i, t, ready) for i, t in enumerate(meta["trials"])]
    answered = sum(1 for t in trials if t["answer"] is not None)
    open_trials = [t["index"] for t in trials if t["answer"] is None]
    excerpt = dict(meta["excerpt"])
    if built is not None:
        excerpt = {**built["excerpt"]}
    return {
        "id": sid,
        "state": state,
        "progress": round(progress, 4),
        "message": message,
        "mode": meta["mode"],
        "question": _QUESTION[meta["mode"]],
        "stem_id": meta["stem_id"],
        "stem_name": meta.get("stem_name"),
        "variants": [
            {
                "name": v["name"],
                "request": v["request"],
                "summary": variant_summary(v["request"], v.get("uploads")),
                "settings": variant_settings(v["request"]),
            }
            for v in meta["variants"]
        ],
        "excerpt": excerpt,
        "level_lufs": None if built is None else built["common_lufs"],
        "trial_count": len(trials),
        "answered": answered,
        "next_trial": (open_trials[0] if open_trials and state == "ready" else None),
        "trials": trials,
        "created": iso(meta.get("created_ts")),
        "finished": iso(meta.get("finished_ts")),
        "links": {
            "self": f"/v1/comparisons/{sid}",
            "page": f"/compare/{sid}",
            "results": f"/v1/comparisons/{sid}/results" if state == "finished" else None,
        },
    }


_QUESTION = {"ab": "Which do you prefer, A or B?", "abx": "Is X the same as A or as B?"}


def answer(meta: dict, index: int, choice: str, built: dict | None) -> None:
    """Record ``choice`` for trial ``index`` in ``meta`` (in place).

    Answering again with the same choice changes nothing (a retried request); a
    different choice for an answered trial, or any answer once finished, is refused.
    """
    if built is None:
        raise SessionError(
            "the comparison is still being prepared; wait until its state is 'ready'"
        )
    if meta.get("finished"):
        raise SessionError("the comparison is finished; its answers can no longer change")
    trials = meta["trials"]
    if not 0 <= index < len(trials):
        raise IndexError(index)
    trial = trials[index]
    valid = ANSWER_CHOICES[meta["mode"]]
    if choice not in valid:
        raise ValueError(f"choice must be one of {', '.join(valid)}, not {choice!r}")
    old = trial.get("answer")
    if old is not None:
        if old["choice"] == choice:
            return
        raise SessionError(
            f"trial {index + 1} was already answered {old['choice']!r}; an "
            "answer cannot be changed (that would unblind the test)"
        )
    trial["answer"] = {"choice": choice, "at": time.time()}
    if all(t.get("answer") for t in trials):
        meta["finished"] = True
        meta["finished_ts"] = time.time()


def finish(meta: dict, built: dict | None) -> None:
    """End the session early (in place); the unanswered trials stay unanswered."""
    if built is None:
        raise SessionError("the comparison is still being prepared; nothing to finish yet")
    if not meta.get("finished"):
        meta["finished"] = True
        meta["finished_ts"] = time.time()


def _chosen_variant(trial: dict, mode: str) -> int | None:
    """The variant the answer chose; None if unanswered or answered "no preference"."""
    ans = trial.get("answer")
    if ans is None or ans["choice"] == NO_PREFERENCE:
        return None
    return trial["labels"][ans["choice"]]


#: How the results treat a "no preference" answer (said in the results JSON).
TIES_TREATMENT = (
    "a 'none' answer (no preference) counts as answered and is reported per variant and in "
    "total as no_preference; it is left out of preferred_share and of the sign test "
    "(preference_p_value), which tests only the trials with a preference (the sign test "
    "drops ties: common practice)"
)


def reveal(meta: dict, built: dict) -> dict:
    """The results: per-variant figures, preference counts, ABX score, per-trial mapping."""
    mode = meta["mode"]
    trials = meta["trials"]
    rows = []
    for i, t in enumerate(trials):
        chosen = _chosen_variant(t, mode)
        row = {
            "index": i,
            "variants": dict(t["labels"]),
            "answer": (t.get("answer") or {}).get("choice"),
            "answered_at": iso((t.get("answer") or {}).get("at")),
        }
        if mode == "abx":
            row["correct"] = None if chosen is None else chosen == t["labels"]["X"]
        else:
            row["preferred_variant"] = chosen
            row["no_preference"] = row["answer"] == NO_PREFERENCE
        rows.append(row)
    answered = [r for r in rows if r["answer"] is not None]
    variants = []
    for v, b in zip(meta["variants"], built["variants"]):
        variants.append(
            {
                "index": b["index"],
                "name": v["name"],
                "request": v["request"],
                "summary": variant_summary(v["request"], v.get("uploads")),
                **{
                    k: b[k]
                    for k in (
                        "measured_lufs",
                        "true_peak_dbtp",
                        "gain_db",
                        "matched_lufs",
                        "matched_true_peak_dbtp",
                    )
                },
            }
        )
    out: dict = {
        "id": meta["id"],
        "mode": mode,
        "trial_count": len(trials),
        "answered": len(answered),
        "excerpt": built["excerpt"],
        "level_lufs": built["common_lufs"],
        "ceiling_dbtp": built["ceiling_dbtp"],
        "variants": variants,
        "trials": rows,
    }
    if mode == "abx":
        correct = sum(1 for r in answered if r["correct"])
        out["abx"] = {
            "correct": correct,
            "answered": len(answered),
            "p_value": binomial_p_at_least(correct, len(answered)),
            "test": "one-sided binomial, p = 0.5 per trial (guessing)",
        }
    else:
        counts = preference_counts(
            len(meta["variants"]),
            [list(t["labels"].values()) for t in trials],
            [_chosen_variant(t, mode) for t in trials],
            [bool(r["no_preference"]) for r in rows],
        )
        for v, c in zip(variants, counts):
            v["answered_trials"] = c["answered_trials"]
            v["preferred"] = c["preferred"]
            v["no_preference"] = c["no_preference"]
            v["preferred_share"] = c["preferred_share"]
        ties = sum(1 for r in rows if r["no_preference"])
        decided = len(answered) - ties
        out["no_preference"] = ties
        out["ties"] = TIES_TREATMENT
        if len(variants) == 2 and decided:
            out["preference_p_value"] = binomial_p_two_sided(counts[0]["preferred"], decided)
    return out


CSV_COLUMNS = ("trial", "A", "B", "X", "answer", "chosen_variant", "chosen_name", "correct")


def reveal_csv(meta: dict, built: dict) -> str:
    """The per-trial mapping and answers as CSV (one row per trial, 1-based trial numbers)."""
    result = reveal(meta, built)
    names = [v["name"] for v in result["variants"]]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    for r in result["trials"]:
        labels = r["variants"]
        chosen = None if r["answer"] in (None, NO_PREFERENCE) else labels[r["answer"]]
        w.writerow(
            [
                r["index"] + 1,
                names[labels["A"]],
                names[labels["B"]],
                names[labels["X"]] if "X" in labels else "",
                r["answer"] or "",
                "" if chosen is None else chosen + 1,
                "" if chosen is None else names[chosen],
                "" if r.get("correct") is None else str(r["correct"]).lower(),
            ]
        )
    return buf.getvalue()
