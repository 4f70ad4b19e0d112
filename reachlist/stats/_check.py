"""Input checks shared by the statistics modules: one place for the wording of bad-value errors."""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from reachlist.errors import InputError

Floats = npt.NDArray[np.float64]


def values(name: str, data: npt.ArrayLike, *, allow_empty: bool = False) -> Floats:
    """``data`` as a 1-D float array of finite numbers, or an InputError naming ``name``."""
    try:
        arr = np.asarray(data, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name}: expected numbers, got {data!r} ({exc}).") from None
    if arr.ndim == 0:
        arr = arr.reshape(1)
    if arr.ndim != 1:
        raise InputError(f"{name}: expected a flat list of numbers, got shape {arr.shape}.")
    if arr.size == 0 and not allow_empty:
        raise InputError(f"{name}: expected at least one value, got none.")
    if not np.all(np.isfinite(arr)):
        raise InputError(
            f"{name}: expected finite numbers, got NaN or infinity.",
            hint="drop or fill the missing values before calling.",
        )
    return arr


def counts(name: str, data: npt.ArrayLike, *, allow_empty: bool = False) -> Floats:
    """Like :func:`values`, and every value must be zero or more."""
    arr = values(name, data, allow_empty=allow_empty)
    if np.any(arr < 0):
        raise InputError(f"{name}: expected counts of zero or more, got {arr.min():g}.")
    return arr


def same_length(**arrays: Floats) -> None:
    sizes = {name: a.size for name, a in arrays.items()}
    if len(set(sizes.values())) > 1:
        shown = ", ".join(f"{name} has {size}" for name, size in sizes.items())
        raise InputError(
            f"expected one value per row in each input, got different lengths: {shown}."
        )


def level(value: float) -> float:
    """A confidence level strictly between 0 and 1."""
    if not 0.0 < value < 1.0:
        raise InputError(
            f"level: expected a confidence level between 0 and 1, got {value!r}.",
            hint="write 0.95 for a 95% interval.",
        )
    return float(value)


def probability(name: str, value: float, *, open_low: bool = True, open_high: bool = True) -> float:
    low_ok = value > 0.0 if open_low else value >= 0.0
    high_ok = value < 1.0 if open_high else value <= 1.0
    if not (low_ok and high_ok and np.isfinite(value)):
        lo = "(0" if open_low else "[0"
        hi = "1)" if open_high else "1]"
        raise InputError(f"{name}: expected a share in {lo}, {hi}, got {value!r}.")
    return float(value)
