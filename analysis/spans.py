"""Command-line value spans: ``START:STOP:POINTS`` (both ends included) or a single value."""

from __future__ import annotations

import math

import numpy as np

from .errors import InputError


def parse_span(text, name: str) -> np.ndarray:
    """Parse ``START:STOP:POINTS`` into ``numpy.linspace(START, STOP, POINTS)`` (both ends
    included) or a single number into a one-element array.  ``name`` (e.g. ``--freq-ghz``)
    is quoted in the InputError raised for a malformed span, a non-finite value, a POINTS
    that is not a positive integer, or a one-point span whose START and STOP differ."""
    s = str(text).strip()
    parts = s.split(":")
    if len(parts) not in (1, 3):
        raise InputError(f"{name}: expected START:STOP:POINTS or a single value, got {text!r}")
    try:
        values = [float(p) for p in parts[:2]]
    except ValueError:
        raise InputError(f"{name}: not a number in {text!r}") from None
    if not all(math.isfinite(v) for v in values):
        raise InputError(f"{name}: values must be finite, got {text!r}")
    if len(parts) == 1:
        return np.array(values[:1])
    start, stop = values
    try:
        points = int(parts[2])
    except ValueError:
        raise InputError(f"{name}: POINTS must be a whole number, got {parts[2]!r}") from None
    if points < 1:
        raise InputError(f"{name}: POINTS must be at least 1, got {points}")
    if points == 1 and start != stop:
        raise InputError(f"{name}: a one-point span needs START == STOP, got {text!r}")
    if points > 1 and start == stop:
        raise InputError(f"{name}: START equals STOP with {points} points, got {text!r}")
    return np.linspace(start, stop, points)
