"""Channel orders: which of a layout's speakers each file channel feeds."""

from __future__ import annotations

from collections.abc import Sequence

from ..errors import LayoutError, shown
from ._model import Layout

__all__ = ["ORDER_NAMES", "order_labels", "order_name", "resolve_channel_order"]

#: Names of the channel orders a layout may offer (:attr:`Layout.orders`).
ORDER_NAMES = ("wav", "film")


def order_name(layout: Layout, labels: str | Sequence[str]) -> str | None:
    """The order name ``labels`` stands for, or None if it is a list of labels.

    One word (a text without commas, or a list of one text) that is no label of the
    layout is taken as the name of an order (lower-cased; :func:`order_labels` checks
    that the layout has it).
    """
    if isinstance(labels, str):
        text = labels if "," not in labels else None
    else:
        text = labels[0] if len(labels) == 1 and isinstance(labels[0], str) else None
    if text is None or not text.strip() or layout._find(text) is not None:
        return None
    return text.strip().lower()


def order_labels(layout: Layout, name: str) -> tuple[str, ...]:
    """The labels, in file order, of the layout's channel order ``name`` (``wav``, ``film``).

    Raises
    ------
    LayoutError
        If the layout has no order of that name; the message lists those it has.
    """
    orders = layout.orders
    key = name.strip().lower() if isinstance(name, str) else name
    if key not in orders:
        missing = [n for n in ORDER_NAMES if n not in orders]
        why = (
            f" ({' and '.join(missing)} needs the labels L and R, which it lacks)"
            if "film" in missing and key == "film"
            else ""
        )
        raise LayoutError(
            f"unknown channel order {shown(name)} for layout {shown(layout.name)}{why}; its "
            f"orders are {', '.join(orders)}, or give the labels in file order, e.g. "
            f"{','.join(layout.labels)}"
        )
    return orders[key]


def _plain(label: object) -> str:
    """A label as a list in a message shows it: text as it is, anything else as `shown`."""
    return label if isinstance(label, str) else shown(label)


def resolve_channel_order(layout: Layout, labels: str | Sequence[str]) -> tuple[int, ...]:
    """Map file channels, given by label in file order or by an order's name, onto the
    layout's speakers.

    Parameters
    ----------
    layout : Layout
        The layout the stem was mixed for.
    labels : sequence of str, or str
        Label of each file channel, in file order (aliases accepted, see
        :meth:`Layout.index`; a text is split at commas), or the name of one of the
        layout's orders (:attr:`Layout.orders`: ``wav``, ``film``), also as a list of
        that one word.

    Returns
    -------
    tuple of int
        ``result[i]`` is the index in ``layout.speakers`` that file channel ``i`` feeds.
        Every speaker appears exactly once.

    Raises
    ------
    LayoutError
        If the count differs, or labels are unknown, repeated or missing; one message
        names all of them and lists the layout's labels. An unknown order name lists
        the layout's orders.
    """
    name = order_name(layout, labels)
    if name is not None:
        labels = order_labels(layout, name)
    elif isinstance(labels, str):
        labels = [part.strip() for part in labels.split(",")]
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
