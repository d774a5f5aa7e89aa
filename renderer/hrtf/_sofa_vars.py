"""Reading SOFA variables: attribute values as text, numeric values checked for fill
values, and axes put into SOFA's order whatever the file's dimension names."""

from __future__ import annotations

import itertools
from collections.abc import Mapping

import numpy as np

from ..errors import SofaError
from ._sofa_data import MAX_AUX_VALUES, NC_ERRORS, NcVariable, cause

__all__ = ["arrange", "check_values", "dtype_name", "numeric", "text_value", "var_attributes"]


def dtype_name(dtype: object) -> str:
    """A variable's type for a message: ``'|S1'``, ``'str'`` (netCDF gives a numpy dtype,
    or the ``str`` type for variable-length strings)."""
    if isinstance(dtype, np.dtype):
        return repr(dtype.str)
    return repr(getattr(dtype, "__name__", str(dtype)))


#: Values beyond this magnitude are netCDF fill values (9.97e36 by default, i.e. data that
#: were never written) or garbage; no impulse response, position or delay comes near it.
_FILL_LIMIT = 1e30


def text_value(value: object) -> str:
    """An attribute value as a string (netCDF gives str, bytes, numbers or arrays)."""
    if isinstance(value, str):
        return value
    if isinstance(value, bytes):
        return value.decode("utf-8", errors="replace")
    if isinstance(value, np.ndarray):
        if value.size == 1:
            return text_value(value.reshape(-1)[0])
        return " ".join(text_value(v) for v in value.reshape(-1))
    if isinstance(value, np.generic):
        return text_value(value.item())
    if isinstance(value, (list, tuple)):
        return " ".join(text_value(v) for v in value)
    return str(value)


def var_attributes(var: NcVariable, label: str, name: str) -> dict[str, str]:
    """A variable's attributes with lower-case names (``Type``, ``Units`` ...)."""
    try:
        return {str(k).lower(): text_value(var.getncattr(k)) for k in var.ncattrs()}
    except NC_ERRORS as exc:
        raise SofaError(f"{label}: attributes of {name} cannot be read ({cause(exc)})") from exc


def check_values(arr: np.ndarray, label: str, name: str) -> None:
    # Boolean temporaries only (an np.abs copy of a large Data.IR would double its memory).
    bad = ~np.isfinite(arr)
    bad |= arr > _FILL_LIMIT
    bad |= arr < -_FILL_LIMIT
    if np.any(bad):
        where = tuple(int(i) for i in np.argwhere(bad)[0])
        raise SofaError(
            f"{label}: {name} has {int(bad.sum())} value(s) that are NaN, infinite or netCDF "
            f"fill values (never written), the first at index {where!r}"
        )


def numeric(var: NcVariable, label: str, name: str) -> np.ndarray:
    """A (small) numeric variable as a plain float64 array, checked for NaN and fill values."""
    kind = np.dtype(var.dtype).kind if isinstance(var.dtype, np.dtype) else "?"
    if kind not in "fiu":
        raise SofaError(f"{label}: {name} is stored as {dtype_name(var.dtype)}; numbers are needed")
    declared = 1
    for size in var.shape:  # Python integers: a forged shape cannot overflow the product
        declared *= int(size)
    if declared > MAX_AUX_VALUES:
        raise SofaError(
            f"{label}: {name} declares {' x '.join(str(int(s)) for s in var.shape)} = "
            f"{declared} values; refusing to read more than {MAX_AUX_VALUES} (2**22) for it"
        )
    var.set_auto_mask(False)
    arr = np.array(var[...], dtype=np.float64)
    check_values(arr, label, name)
    return arr


def arrange(
    arr: np.ndarray,
    dims: tuple[str, ...],
    order: tuple[str, ...],
    sizes: Mapping[str, int],
    label: str,
    name: str,
) -> np.ndarray:
    """Put ``arr`` into the axis order ``order``, each axis of full size or 1 (to broadcast).

    The dimension names of the file say which axis is which (``I`` counts as a measurement
    axis of size 1); where they are not SOFA's letters, the axes are matched by size in
    SOFA's order. Axes the variable lacks are added with size 1.
    """
    names = ["M" if str(d) == "I" else str(d) for d in dims]

    def fits(axis_names: tuple[str, ...] | list[str]) -> bool:
        return all(s == sizes[n] or s == 1 for n, s in zip(axis_names, arr.shape))

    if len(set(names)) == len(names) and set(names) <= set(order):
        if not fits(names):
            bad = [(n, s) for n, s in zip(names, arr.shape) if s not in (1, sizes[n])]
            n, s = bad[0]
            what = {"M": "measurements", "R": "receivers", "E": "emitters", "C": "coordinates"}[n]
            raise SofaError(
                f"{label}: {name} has {s} {what} (dimension {n}) but Data.IR has {sizes[n]}"
            )
        axis_names = names
    else:
        found = next((c for c in itertools.combinations(order, arr.ndim) if fits(c)), None)
        if found is None:
            full = ", ".join(f"{o}={sizes[o]}" for o in order)
            raise SofaError(
                f"{label}: {name} has shape {arr.shape!r}, which does not fit Data.IR; "
                f"expected dimensions ({full}), each of that size or 1"
            )
        axis_names = list(found)
    for o in order:
        if o not in axis_names:
            arr = arr[..., np.newaxis]
            axis_names = axis_names + [o]
    return np.transpose(arr, [axis_names.index(o) for o in order])
