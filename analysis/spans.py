"""Command-line value spans: ``START:STOP:POINTS`` (a count of points, both ends included),
``START:STOP/STEP`` (a step, both ends included, as in the simulator's ``{start, stop, step}``)
or a single value."""

from __future__ import annotations

import math

import numpy as np

from .errors import InputError


def _parse_step_span(s: str, text, name: str) -> np.ndarray:
    """``START:STOP/STEP`` -> START, START + STEP, ..., STOP (STOP - START a whole number of steps)."""
    head, _, step_text = s.partition("/")
    parts = head.split(":")
    if len(parts) != 2:
        raise InputError(f"{name}: expected START:STOP/STEP, got {text!r}")
    try:
        start, stop, step = (float(p) for p in (*parts, step_text))
    except ValueError:
        raise InputError(f"{name}: not a number in {text!r}") from None
    if not all(math.isfinite(v) for v in (start, stop, step)):
        raise InputError(f"{name}: values must be finite, got {text!r}")
    if step <= 0:
        raise InputError(f"{name}: STEP must be positive, got {text!r}")
    n = (stop - start) / step
    if n < 0 or abs(n - round(n)) > 1e-9 * max(1.0, abs(n)):
        raise InputError(f"{name}: STOP - START must be a whole, non-negative number of STEPs, got {text!r}")
    return start + step * np.arange(int(round(n)) + 1)


def parse_span(text, name: str) -> np.ndarray:
    """Parse ``START:STOP:POINTS`` into ``numpy.linspace(START, STOP, POINTS)`` (both ends
    included) or a single number into a one-element array.  ``name`` (e.g. ``--freq-ghz``)
    is quoted in the InputError raised for a malformed span, a non-finite value, a POINTS
    that is not a positive integer, or a one-point span whose START and STOP differ.
    ``START:STOP/STEP`` gives a step instead of a count (:func:`_parse_step_span`)."""
    s = str(text).strip()
    if "/" in s:
        return _parse_step_span(s, text, name)
    parts = s.split(":")
    if len(parts) not in (1, 3):
        raise InputError(f"{name}: expected START:STOP:POINTS (a count), START:STOP/STEP or a single value, "
                         f"got {text!r}")
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
