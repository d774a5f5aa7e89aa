"""A summary of a SOFA file for people: what it holds and whether it can be rendered with."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import numpy as np

from ..eq import describe as diffuse_field_summary
from ..geometry import vector_to_direction
from ..hrtf import HrirSet, file_sha256, is_shipped, read_sofa, read_sofa_guarded


def inspect_sofa(path: str | os.PathLike[str], *, emitter: int | None = None) -> dict[str, Any]:
    """Summarise a SOFA file; raises :class:`~earfold.renderer.errors.SofaError` if it is unusable.

    Returns a JSON-ready dict with the figures and, under ``"text"``, the same figures
    as display strings in a fixed order.
    """
    # A user's file is read in a child process with time and memory limits (a damaged file
    # can hang the HDF5 library); the shipped sets are trusted.
    reader = read_sofa if is_shipped(path) else read_sofa_guarded
    data = reader(path, emitter=emitter)
    # Raises HrirError when every response is zero: such a file reads but cannot render.
    hset = HrirSet.from_sofa(data, sha256=file_sha256(path))
    az, el = vector_to_direction(hset.directions)
    itd_min, itd_max = hset.itd_range()
    grid = hset._grid()
    warnings: list[str] = list(data.warnings)
    if hset.dropped:
        warnings.append(
            f"{hset.dropped} of {data.measurements} measurements have a silent ear and are left out"
        )
    if data.room_type not in ("free field", "freefield", "free-field", ""):
        warnings.append(
            f"RoomType is {data.room_type!r}: the responses include a room; renders with this "
            "set should not add a synthetic room"
        )
    if grid.hull is None and grid.ring_order is None:
        warnings.append("the directions cannot be triangulated; every lookup uses the nearest one")
    elif grid.hull is not None and grid.facet_ok is not None and not grid.facet_ok.all():
        warnings.append(
            "the grid has gaps (e.g. no low elevations); directions there use the nearest "
            "measurement"
        )
    attrs = data.attributes
    summary: dict[str, Any] = {
        "file": Path(path).name,
        "sha256": hset.sha256,
        "convention": data.convention,
        "convention_version": data.convention_version,
        "sofa_version": data.sofa_version,
        "room_type": data.room_type,
        "emitter": data.emitter,
        "measurements": data.measurements,
        "taps": data.taps,
        "samplerate": data.samplerate,
        "duration_ms": round(1000 * data.taps / data.samplerate, 3),
        "elevation_range_deg": [round(float(el.min()), 2), round(float(el.max()), 2)],
        "azimuth_range_deg": [round(float(az.min()), 2), round(float(az.max()), 2)],
        "grid_spacing_deg": round(grid.spacing_deg, 2),
        "distance_m": (
            None
            if np.all(np.isnan(data.distances))
            else round(float(np.nanmedian(data.distances)), 3)
        ),
        "itd_range_ms": [round(itd_min * 1000, 3), round(itd_max * 1000, 3)],
        "title": attrs.get("Title", ""),
        "database": attrs.get("DatabaseName", ""),
        "listener": attrs.get("ListenerShortName", ""),
        "licence": attrs.get("License", ""),
        "warnings": warnings,
    }
    # The diffuse-field response (solid-angle weighted), its usable band and the inverse
    # filter a render would apply with --eq diffuse-field.
    df = diffuse_field_summary(hset)
    summary["diffuse_field"] = df
    lo, hi = df["usable_band_hz"]
    if df["boost_limited"]:
        warnings.append(
            f"the diffuse-field inverse reaches its {df['max_boost_db']:g} dB boost limit; the "
            "deepest dips are only partly filled"
        )
    summary["text"] = {
        "convention": f"{data.convention} {data.convention_version} (SOFA {data.sofa_version})",
        "room type": data.room_type or "(not given)",
        "directions": f"{data.measurements}, elevation {summary['elevation_range_deg'][0]:g} to "
        f"{summary['elevation_range_deg'][1]:g} deg, median spacing "
        f"{summary['grid_spacing_deg']:g} deg",
        "taps": f"{data.taps} ({summary['duration_ms']:g} ms)",
        "sample rate": f"{data.samplerate:g} Hz",
        "ITD range": f"{summary['itd_range_ms'][0]:+.3f} to {summary['itd_range_ms'][1]:+.3f} ms "
        "(interaural cross-correlation below 1.5 kHz; positive: left ear leads)",
        "title": summary["title"] or "-",
        "database": summary["database"] or "-",
        "licence": summary["licence"] or "-",
        "diffuse field": f"{df['weighting']} weights ({df['capped_cells']} edge cells capped, "
        f"{df['covered_solid_angle_sr']:g} sr); usable band {lo:g} to {hi:g} Hz; the inverse "
        f"boosts up to {df['max_boost_db']:+.1f} dB and cuts up to {df['max_cut_db']:.1f} dB",
        "sha256": hset.sha256,
    }
    return summary
