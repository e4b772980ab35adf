"""Benchmark: reading a metric expression is linear in its length.

    python3 bench/reading.py

Times stepper's guarded reader (stepper.parse.parse_expression, with every
limit check) on sums of 1,000 to 8,000 terms (about 10 to 87 kB of text), and
in the same run a plain-sympy baseline that builds the same sum from the same
numbers without reading any text (sympy.Add of the terms).  Prints seconds,
microseconds per character, and the ratio stepper / baseline.  A reader that
is linear shows a flat microseconds-per-character column; these machines are
noisy, so read the shape and the ratios, not the absolute times.
"""

from __future__ import annotations

import statistics
import time

import sympy
from sympy.core.cache import clear_cache

from stepper.parse import Vocabulary, parse_expression


def best_of(function, repeats: int = 3) -> float:
    times = []
    for _ in range(repeats):
        clear_cache()  # sympy would otherwise hand back the sum it built last time
        started = time.perf_counter()
        function()
        times.append(time.perf_counter() - started)
    return min(times)


def main() -> None:
    x = sympy.Symbol("x")
    vocabulary = Vocabulary(symbols={"x": x})
    print(f"{'terms':>6} {'chars':>7} {'stepper s':>10} {'us/char':>8} {'baseline s':>11} {'ratio':>6}")
    per_char = []
    for terms in (1000, 2000, 4000, 8000):
        pieces = [(i, i % 7) for i in range(1, terms)]
        text = " + ".join(f"{c}*x^{p}" for c, p in pieces)
        reading = best_of(lambda: parse_expression(text, vocabulary, "bench"))
        baseline = best_of(lambda: sympy.Add(*[sympy.Integer(c) * x**p for c, p in pieces]))
        per_char.append(reading / len(text) * 1e6)
        print(f"{terms:>6} {len(text):>7} {reading:>10.3f} {per_char[-1]:>8.2f} {baseline:>11.3f} "
              f"{reading / baseline:>6.1f}")
    print(f"microseconds per character, largest / smallest input: {per_char[-1] / per_char[0]:.2f} "
          f"(1.0 is perfectly linear; median {statistics.median(per_char):.2f} us/char)")


if __name__ == "__main__":
    main()
