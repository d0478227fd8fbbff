"""Checks of plain values (numbers read from JSON, options given by users) for every layer.

``bool`` is an ``int`` in Python and JSON ``true`` would pass a plain ``isinstance`` test; these
checks refuse it. Kept free of any other ethoscribe import so the lowest layers can use them.
"""

from __future__ import annotations

import numpy as np


def is_int(v: object) -> bool:
    """An integer, not a bool (JSON ``true`` is not a count)."""
    return isinstance(v, int | np.integer) and not isinstance(v, bool | np.bool_)


def int_between(v: object, low: int, high: int) -> bool:
    """An integer (see :func:`is_int`) with ``low <= v <= high``."""
    return is_int(v) and low <= v <= high  # type: ignore[operator]


def is_real(v: object) -> bool:
    """A finite real number, not a bool; a JSON integer too large for a float is not one.

    Examples
    --------
    >>> is_real(1.5), is_real(True), is_real(float("nan")), is_real(10**400)
    (True, False, False, False)
    """
    if not isinstance(v, int | float | np.integer | np.floating) or isinstance(v, bool | np.bool_):
        return False
    try:
        return bool(np.isfinite(float(v)))
    except OverflowError:
        return False
