"""Channel orders: which of a layout's speakers each file channel feeds."""

from __future__ import annotations

from collections.abc import Sequence

from ..errors import LayoutError, shown
from ._model import Layout

__all__ = ["resolve_channel_order"]


def _plain(label: object) -> str:
    """A label as a list in a message shows it: text as it is, anything else as `shown`."""
    return label if isinstance(label, str) else shown(label)


def resolve_channel_order(layout: Layout, labels: Sequence[str]) -> tuple[int, ...]:
    """Map file channels, given by label in file order, onto the layout's speakers.

    Parameters
    ----------
    layout : Layout
        The layout the stem was mixed for.
    labels : sequence of str
        Label of each file channel, in file order (aliases accepted, see
        :meth:`Layout.index`).

    Returns
    -------
    tuple of int
        ``result[i]`` is the index in ``layout.speakers`` that file channel ``i`` feeds.
        Every speaker appears exactly once.

    Raises
    ------
    LayoutError
        If the count differs, or labels are unknown, repeated or missing; one message
        names all of them and lists the layout's labels.
    """
    labels = list(labels)
    listing = f"layout {shown(layout.name)} has {layout.channels}: {', '.join(layout.labels)}"
    if len(labels) != layout.channels:
        raise LayoutError(
            f"the channel order names {len(labels)} channel(s) "
            f"({', '.join(_plain(label) for label in labels)}) but {listing}"
        )
    order: list[int] = []
    unknown: list[str] = []
    claimed: dict[int, list[str]] = {}
    for label in labels:
        i = layout._find(label)
        if i is None:
            unknown.append(shown(label))
            continue
        order.append(i)
        claimed.setdefault(i, []).append(label)
    problems: list[str] = []
    if unknown:
        problems.append(f"unknown label(s) {', '.join(unknown)}")
    dupes = [
        f"{layout.labels[i]} (given as {', '.join(map(shown, given))})"
        for i, given in claimed.items()
        if len(given) > 1
    ]
    if dupes:
        problems.append(f"repeated: {'; '.join(dupes)}")
    missing = [layout.labels[i] for i in range(layout.channels) if i not in claimed]
    if missing:
        problems.append(f"missing: {', '.join(missing)}")
    if problems:
        raise LayoutError(f"bad channel order: {'; '.join(problems)}; {listing}")
    return tuple(order)
