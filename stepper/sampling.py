"""Random sample values that respect a symbol's declared sign.

The symbolic zero test (:mod:`stepper.algebra`) and the numeric verification
(:mod:`stepper.verify`) both evaluate expressions at random points.  A point
must lie where the symbols' assumptions hold -- a positive mass must not be
sampled negative -- or the evidence would be about a different expression
(``sqrt(M**2)`` is ``M`` only for positive ``M``).  Each caller keeps its own
range and seed, so its sequence of random draws is its own.
"""

from __future__ import annotations

import random

import sympy

__all__ = ["signed_sample"]


def signed_sample(
    symbol: sympy.Symbol,
    rng: random.Random,
    low: int,
    high: int,
    positive_share: float,
    negative_divisor: int = 1,
) -> sympy.Rational:
    """A random rational between ``low/1000`` and ``high/1000`` in size, of an allowed sign.

    A symbol declared negative or nonpositive gets a negative value, one
    declared positive or nonnegative a positive value; both draw one integer
    from ``rng``.  A symbol of unknown sign draws once more and is positive
    with probability ``positive_share``, otherwise negative with its size
    divided by ``negative_divisor``.
    """
    value = sympy.Rational(rng.randint(low, high), 1000)
    if symbol.is_negative or symbol.is_nonpositive:
        return -value
    if symbol.is_positive or symbol.is_nonnegative:
        return value
    return value if rng.random() < positive_share else -value / negative_divisor
