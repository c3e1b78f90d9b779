"""Argument validators shared across the package; each names the offending parameter."""

from __future__ import annotations

import numpy as np

from .errors import InputError


def check_positive_sizes(sizes: np.ndarray, name: str) -> None:
    """Raise `InputError` unless every cell size in `sizes` is finite and > 0."""
    if sizes.size == 0 or not np.all(np.isfinite(sizes)) or np.any(sizes <= 0):
        raise InputError(f"{name}: cell sizes must be finite and positive (m), got {sizes[:5]}")


def check_fraction(value: float, name: str) -> float:
    """Return `value` if it lies in [0, 1], else raise `InputError`."""
    if not 0.0 <= value <= 1.0:
        raise InputError(f"{name} must be a fraction in [0, 1], got {value}")
    return float(value)
