"""The retention sweep: stems, HRTF uploads, renders and comparisons expire after a set time."""

from __future__ import annotations

import time

from .jobs import JobNotFound, JobQueue, WrongState
from .storage import Storage

#: Leftovers in ``tmp/`` older than this are removed by a sweep (s); younger ones may be
#: uploads in progress.
TMP_MAX_AGE_S = 24 * 3600.0


def sweep(storage: Storage, queue: JobQueue, max_age_s: float) -> dict[str, int]:
    """Delete what is older than ``max_age_s``; returns how many of each kind went.

    Finished renders expire by their finish time; queued and running ones are left
    alone, and so are the stems they use.
    """
    cutoff = time.time() - max_age_s
    removed = {"stems": 0, "hrtf": 0, "renders": 0, "comparisons": 0, "tmp": 0}
    in_use = {j.payload.get("stem_id") for j in queue.list(active=True, limit=100000)}
    for stem_id in storage.expired("stems", max_age_s):
        if stem_id not in in_use:
            storage.delete("stems", stem_id)
            removed["stems"] += 1
    for set_id in storage.expired("hrtf", max_age_s):
        storage.delete("hrtf", set_id)
        removed["hrtf"] += 1
    active_ids = {j.id for j in queue.list(active=True, limit=100000)}
    for session_id in storage.expired("comparisons", max_age_s):
        if session_id not in active_ids:  # a build still running keeps its session
            storage.delete("comparisons", session_id)
            removed["comparisons"] += 1
    for job in queue.list(active=False, limit=100000):
        if (job.finished or job.updated) < cutoff:
            try:
                queue.delete(job.id)
            except (WrongState, JobNotFound):  # another API process's sweep was first
                continue
            if job.payload.get("kind") == "comparison":
                continue  # a comparison's build job: its session went above
            storage.delete("renders", job.id)
            removed["renders"] += 1
    removed["tmp"] = storage.clean_tmp(older_than_s=TMP_MAX_AGE_S)
    return removed
