"""Checks of plain values (numbers read from JSON, options given by users) for every layer.

``bool`` is an ``int`` in Python and JSON ``true`` would pass a plain ``isinstance`` test; these
checks refuse it. Nothing of ethoscribe is imported but its errors: the lowest layers use them.
"""

from __future__ import annotations

import numpy as np

from ethoscribe.errors import InputError


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


def seed_from(random_state: object, name: str = "random_state") -> int | None:
    """The integer seed a fit uses: an int as given, None as None, or one draw from a generator.

    A ``numpy.random.Generator`` (or legacy ``RandomState``) gives a new seed at each call, so
    refits with the same generator differ, as scikit-learn does; the drawn seed is what a
    fitted model records.

    Examples
    --------
    >>> seed_from(3), seed_from(None), seed_from(np.random.default_rng(0)) >= 0
    (3, None, True)
    """
    if random_state is None:
        return None
    if isinstance(random_state, np.random.Generator):
        return int(random_state.integers(2**63 - 1))
    if isinstance(random_state, np.random.RandomState):
        return int(random_state.randint(2**31 - 1))
    if is_int(random_state) and random_state >= 0:  # type: ignore[operator]
        return int(random_state)  # type: ignore[call-overload]
    msg = (
        f"{name} must be an integer >= 0, None or a numpy.random.Generator; "
        f"got {random_state!r:.60}"
    )
    raise InputError(msg)


def name_key(name: str) -> str:
    """A name as people read it: case and runs of spaces do not tell two names apart (motif
    names, an expert's behaviour names).

    Examples
    --------
    >>> name_key("  Rearing   up ") == name_key("rearing up")
    True
    """
    return " ".join(name.split()).casefold()
