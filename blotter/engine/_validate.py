"""Checks of engine inputs at the boundary, and their broadcasting to one flat shape."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


def omega(is_call: np.ndarray) -> np.ndarray:
    """+1.0 for calls and −1.0 for puts (bool input), or the input when already ±1 floats."""
    if is_call.dtype == np.bool_:
        return np.where(is_call, 1.0, -1.0)
    return is_call


def quick_ok(arr: np.ndarray, rule: str) -> bool:
    """True when every element passes ``rule``, by two reductions (NaN makes min and max NaN)."""
    lo = float(arr.min())
    hi = float(arr.max())
    if not hi < np.inf:
        return False
    if rule == "positive":
        return lo > 0.0
    if rule == "nonnegative":
        return lo >= 0.0
    return lo > -np.inf


def as_float_array(name: str, value: object, rule: str) -> np.ndarray:
    """``value`` as a float64 array, after checking ``rule`` ("positive", "nonnegative", "finite").

    Raises ``ValueError`` naming the field and its first bad index, e.g.
    ``strike must be > 0: strike[17] = -5.0``. NaN and infinities fail every rule.
    """
    try:
        arr = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name} must be numeric: {exc}") from None
    if arr.size and quick_ok(arr, rule):
        return arr
    if rule == "positive":
        ok = arr > 0.0
        need = "must be > 0"
        ok &= np.isfinite(arr)
    elif rule == "nonnegative":
        ok = arr >= 0.0
        need = "must be >= 0"
        ok &= np.isfinite(arr)
    else:
        ok = np.isfinite(arr)
        need = "must be finite"
    if not ok.all():
        if arr.ndim == 0:
            raise ValueError(f"{name} {need}: {name} = {float(arr)!r}")
        bad = ~ok
        flat = int(np.flatnonzero(bad.ravel())[0])
        idx = np.unravel_index(flat, arr.shape)
        inner = ", ".join(str(int(i)) for i in idx)
        raise ValueError(f"{name} {need}: {name}[{inner}] = {float(arr[idx])!r}")
    return arr


def as_bool_array(name: str, value: object) -> np.ndarray:
    """``value`` as a bool array; numbers other than 0 and 1 are refused."""
    arr = np.asarray(value)
    if arr.dtype == np.bool_:
        return arr
    if arr.dtype.kind in "iuf":
        ok = (arr == 0) | (arr == 1)
        if not ok.all():
            if arr.ndim == 0:
                raise ValueError(f"{name} must be True or False: {name} = {arr.item()!r}")
            flat = int(np.flatnonzero((~ok).ravel())[0])
            idx = np.unravel_index(flat, arr.shape)
            inner = ", ".join(str(int(i)) for i in idx)
            raise ValueError(f"{name} must be True or False: {name}[{inner}] = {arr[idx].item()!r}")
        return arr.astype(np.bool_)
    raise ValueError(f"{name} must be a bool or an array of bools, not {arr.dtype}")


@dataclass(frozen=True)
class Flat:
    """Inputs broadcast to ``shape``: each a length-``size`` float64 view/array or a 0-d scalar."""

    shape: tuple[int, ...]
    size: int
    columns: tuple[np.ndarray, ...]


def broadcast_flat(names: tuple[str, ...], arrays: tuple[np.ndarray, ...]) -> Flat:
    """Broadcast ``arrays`` together and give each as flat (size,) or as a 0-d scalar.

    Size-1 inputs stay scalars (no copy); inputs already of the full shape are raveled (a view
    when contiguous); inputs broadcast along some axes are materialised once.
    """
    try:
        shape = np.broadcast_shapes(*(a.shape for a in arrays))
    except ValueError:
        shapes = ", ".join(f"{n}{a.shape}" for n, a in zip(names, arrays, strict=True))
        raise ValueError(f"inputs do not broadcast together: {shapes}") from None
    size = int(np.prod(shape, dtype=np.int64))
    cols: list[np.ndarray] = []
    for a in arrays:
        if a.size == 1:
            cols.append(a.reshape(()))
        elif a.shape == shape:
            cols.append(a.reshape(-1))
        else:
            cols.append(np.ascontiguousarray(np.broadcast_to(a, shape)).reshape(-1))
    return Flat(shape=shape, size=size, columns=tuple(cols))
