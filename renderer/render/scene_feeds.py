"""What feeds the ears for an Ambisonic scene: one :class:`ChannelFeed` per ACN channel.

The scenes wing's decoder (:func:`earfold.renderer.scenes.scene_decoder`) is a filter bank
of ``(N + 1)**2`` two-ear pairs for ACN/SN3D input; the scene's own normalisation and the
rotation asked for are folded into those filters (:meth:`SceneDecoder.for_input`), so the
engine convolves the file's channels as they are. No channel is an LFE.

**Calibration** (the level reference of :mod:`earfold.renderer.eq.calibration`, taken to
scenes). The reference is a *diffuse scene*: pink noise arriving from all directions
alike, whose SN3D channels are uncorrelated with powers ``1 / (2n + 1)`` of W's for degree
``n`` (the mean square of an SN3D harmonic of degree ``n`` over the sphere; AmbiX paper,
Nachbar et al. 2011). Its input loudness is that of W, the omnidirectional pressure
(BS.1770 weight 1 on W, 0 on the rest: :attr:`~earfold.renderer.layouts.SceneLayout.
loudness_weights`), and the gain makes its binaural render read that same loudness. For
uncorrelated inputs the output power is the sum over channels of each channel's power
times ``|H|^2``, so the gain is :func:`~earfold.renderer.eq.calibration_gain` of the
responses ``sqrt(1 / (2n + 1)) H_k`` counted as one channel. It is computed on the SN3D
filters before normalisation and rotation: a diffuse scene's statistics do not change
under rotation (each degree's block is orthogonal), and N3D or FuMa input is the same
scene in other units, so one gain serves every input convention, and an N3D or FuMa file
renders exactly as its SN3D twin.

**Room** (off by default; on request): the scene is decoded to the virtual loudspeakers of
the virtual decoder (:func:`~earfold.renderer.scenes.virtual_layout`, a t-design), each
of those is rendered in the room as a loudspeaker layout is (direct sound and early
reflections per loudspeaker, one shared diffuse tail: :func:`~earfold.renderer.room.
build_room_filters`), and the per-loudspeaker early filters are folded back to ACN
channels with the decoder's gains and crossover
(:func:`~earfold.renderer.scenes.decode_speaker_filters`). The shared tail's input is what
the virtual loudspeakers feed it, ``sum_l w_l s_l`` with ``s_l = sum_k D[l, k] b_k``
(``D`` the basic, amplitude-preserving gains), so ACN channel ``k`` feeds the tail with
weight ``sum_l w_l D[l, k]``: on a t-design with equal weights that is the pressure W
alone (every higher harmonic sums to zero over the design). In ``exact`` room mode the
whole response of each virtual loudspeaker is folded instead. With a room the direct
sound therefore comes through the virtual decoder whichever decoder was asked for (the
report says so).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..eq import calibration_gain
from ..geometry import vector_to_direction
from ..hrtf import HrirSet
from ..layouts import Layout, SceneLayout, Speaker
from ..room import Room, RoomFilters, exact_brirs, virtual_distance
from ..scenes import (
    acn_degrees,
    conversion_matrix,
    decode_speaker_filters,
    default_method,
    fold_matrix,
    rotation_matrix,
    scene_decoder,
    speaker_gains,
    virtual_layout,
)
from .feeds import ChannelFeed

__all__ = [
    "SCENE_REFERENCE",
    "SceneBank",
    "scene_bank",
    "scene_calibration_gain",
    "scene_taps",
    "virtual_distance",
    "virtual_room_layout",
]

#: What the report's calibration says the reference of a scene render is.
SCENE_REFERENCE = (
    "a diffuse scene of pink noise (SN3D channels uncorrelated, powers 1/(2n+1) of W): the "
    "render reads the scene's own BS.1770 loudness, that of its W channel"
)

#: Shortest decoder filter (taps), as the scenes wing's own default.
MIN_SCENE_TAPS = 256


def scene_taps(hset: HrirSet) -> int:
    """The decoder's filter length for a render: the prepared set's own response length
    (at least :data:`MIN_SCENE_TAPS`), the length of a loudspeaker's filter from that set,
    so that a scene costs the engine per channel what a loudspeaker does. The scenes
    wing's default rounds up to a power of two (4096 taps for the equalised KEMAR set at
    48 kHz, against 2605 here); on the shipped sets, equalised or not, at orders 1, 3 and
    7 and with both decoders, the energy the shorter cut leaves out is the same to 0.1 dB
    (24 to 50 dB below what is kept: measured when this was written), while the longer
    filter shortened the engine's hop and cost 12 % more per channel.
    """
    return max(MIN_SCENE_TAPS, int(hset.taps))


#: FuMa's channel names and the ACN channel each carries.
_FUMA_ACN = {"W": 0, "X": 3, "Y": 1, "Z": 2}


@dataclass(frozen=True)
class SceneBank:
    """A scene's feeds before calibration, the gain that calibrates them and the report.

    Attributes
    ----------
    feeds : tuple of ChannelFeed
        One per file channel (the scene's normalisation and rotation folded in).
    gain : float
        The calibration gain (see the module), to apply to every filter and the tail.
    tail : ndarray, shape (2, Lt), or None
        The room's shared tail (uncalibrated), None without one or in exact mode.
    tail_offset : int
    section : dict
        The report's ``scene`` section.
    warnings, notes : list of str
    """

    feeds: tuple[ChannelFeed, ...]
    gain: float
    tail: NDArray[np.float64] | None
    tail_offset: int
    section: dict[str, Any]
    warnings: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def virtual_room_layout(order: int, room: Room) -> Layout:
    """The virtual loudspeakers of ``order`` as a layout (``V1`` ...) for the room model,
    all at :func:`virtual_distance`."""
    directions = virtual_layout(order)
    distance = virtual_distance(room, directions)
    az, el = vector_to_direction(directions)
    speakers = tuple(
        Speaker(f"V{i + 1}", round(float(a), 6), round(float(e), 6), distance)
        for i, (a, e) in enumerate(zip(np.atleast_1d(az), np.atleast_1d(el), strict=True))
    )
    return Layout(
        f"virtual-{order}",
        speakers,
        f"the {len(speakers)} virtual loudspeakers of an order-{order} scene "
        f"(antipodal spherical {2 * order + 1}-design) at {distance:g} m",
        "earfold.renderer.scenes.virtual_layout",
    )


def scene_calibration_gain(
    filters: NDArray[np.float64],
    order: int,
    samplerate: float,
    tail: NDArray[np.float64] | None = None,
    tail_weights: NDArray[np.float64] | None = None,
    tail_offset: int = 0,
) -> float:
    """The gain that renders a diffuse scene at its W loudness (see the module).

    Parameters
    ----------
    filters : ndarray, shape ((order + 1)**2, 2, L)
        The ACN/SN3D filters, unrotated.
    tail, tail_weights, tail_offset
        The room's shared tail and each ACN/SN3D channel's share of it, if any.
    """
    power = 1.0 / (2.0 * acn_degrees(order) + 1.0)

    def responses() -> Any:
        for k, scale in enumerate(np.sqrt(power)):
            r = filters[k]
            if tail is not None and tail_weights is not None:
                n = max(r.shape[-1], tail_offset + tail.shape[-1])
                full = np.zeros((2, n))
                full[:, : r.shape[-1]] = r
                full[:, tail_offset : tail_offset + tail.shape[-1]] += tail_weights[k] * tail
                r = full
            yield scale * r

    return float(calibration_gain(responses(), 1, samplerate))


def _channel_entry(i: int, label: str, normalisation: str) -> dict[str, Any]:
    acn = _FUMA_ACN[label] if normalisation == "fuma" else i
    degree = int(np.floor(np.sqrt(acn)))
    return {
        "channel": i,
        "label": label,
        "acn": acn,
        "degree": degree,
        "index": acn - degree * degree - degree,
    }


def scene_bank(
    scene: SceneLayout,
    hset: HrirSet,
    samplerate: float,
    *,
    method: str | None = None,
    rotation: tuple[float, float, float] | None = None,
    order: int | None = None,
    room: RoomFilters | None = None,
    exact: bool = False,
) -> SceneBank:
    """The feeds of a scene, their calibration gain and the report's ``scene`` section.

    Parameters
    ----------
    scene : SceneLayout
        The order and the input normalisation.
    hset : HrirSet
        The (equalised) set at ``samplerate``.
    samplerate : float
    method : {"magls", "virtual"}, optional
        The decoder; None: :func:`~earfold.renderer.scenes.default_method` of the order.
    rotation : (yaw, pitch, roll), optional
        Degrees (:func:`~earfold.renderer.scenes.rotation_matrix`); None: none.
    order : int, optional
        The order decoded, at most the scene's (default: the scene's): the channels of
        the higher orders get no filters (truncation; a rotation keeps every order apart,
        so it commutes with it).
    room : RoomFilters, optional
        The room's filters for :func:`virtual_room_layout` of the scene's order; None
        renders free field.
    exact : bool
        Fold each virtual loudspeaker's whole room response (no shared tail).
    """
    order = scene.order if order is None else int(order)
    if not 1 <= order <= scene.order:
        raise ValueError(f"cannot decode an order-{scene.order} scene at order {order}")
    decoded = (order + 1) ** 2
    asked = method
    chosen = method if method is not None else default_method(order)
    warnings: list[str] = []
    notes: list[str] = []
    if room is not None and chosen != "virtual":
        text = (
            "with a room the scene is decoded to the virtual loudspeakers and rendered in "
            "the room, so the virtual decoder is used, not magls"
        )
        (warnings if asked is not None else notes).append(f"scene: {text}")
        chosen = "virtual"
    decoder = scene_decoder(
        hset, order, method=chosen, samplerate=samplerate, taps=scene_taps(hset)
    )
    # The decoder's own remarks are properties of the set and the order (a hole in the
    # grid), shown by every render with them: notes, not alarms.
    notes.extend(f"scene decoder: {w}" for w in decoder.warnings)
    yaw, pitch, roll = rotation if rotation is not None else (0.0, 0.0, 0.0)
    matrix = rotation_matrix(order, yaw, pitch, roll) @ conversion_matrix(
        order, scene.normalisation
    )
    tail: NDArray[np.float64] | None = None
    tail_offset = 0
    sn3d_tail_weights: NDArray[np.float64] | None = None
    if room is None:
        sn3d = decoder.filters
        room_text = None
    else:
        directions = virtual_layout(order)
        per_speaker = exact_brirs(room) if exact else room.early
        sn3d = decode_speaker_filters(per_speaker, directions, order, samplerate)
        if not exact:
            gains = speaker_gains(directions, order, "basic")
            sn3d_tail_weights = gains.T @ np.asarray(room.tail_weights, dtype=float)
            tail, tail_offset = np.asarray(room.tail, dtype=float), int(room.tail_offset)
        room_text = (
            f"decoded to the {len(directions)} virtual loudspeakers, each rendered in the "
            "room, folded back to ACN channels with the decoder's gains"
            + (" (whole responses: exact mode)" if exact else "; shared tail fed by W")
        )
    gain = scene_calibration_gain(sn3d, order, samplerate, tail, sn3d_tail_weights, tail_offset)
    filters = np.zeros((scene.channels, *sn3d.shape[1:]))
    filters[:decoded] = fold_matrix(sn3d, matrix)
    tail_weights = None
    if sn3d_tail_weights is not None:
        tail_weights = np.zeros(scene.channels)
        tail_weights[:decoded] = matrix.T @ sn3d_tail_weights
    feeds = tuple(
        ChannelFeed(
            label=label,
            filters=filters[i],
            lfe=False,
            tail_weight=0.0 if tail_weights is None else float(tail_weights[i]),
            report=_channel_entry(i, label, scene.normalisation),
        )
        for i, label in enumerate(scene.labels)
    )
    section: dict[str, Any] = {
        "order": order,
        "stem_order": scene.order,
        "channels": scene.channels,
        "channels_decoded": decoded,
        "normalisation": scene.normalisation,
        "channel_order": "FuMa (W X Y Z)" if scene.normalisation == "fuma" else "ACN",
        "decoder": decoder.description,
        "decoder_chosen": "requested" if asked is not None else f"default for order {order}",
        "rotation": None
        if rotation is None
        else {"yaw_deg": yaw, "pitch_deg": pitch, "roll_deg": roll},
        "room": room_text,
        "calibration": SCENE_REFERENCE,
        "decoder_notes": list(decoder.warnings),
    }
    return SceneBank(feeds, gain, tail, tail_offset, section, warnings, notes)
