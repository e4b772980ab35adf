"""The plain-sympy baseline: what a careful user would write by hand.

Christoffel symbols, the Riemann tensor contracted to Ricci, and the scalar
curvature, with simplify() on every component, straight from sympy
expressions.  The metric is read with stepper's loader (input only); nothing
else of stepper is used.

    python bench/baseline.py examples/compact_star_exterior.toml
prints one line: seconds and the number of Ricci components simplify() left non-zero.
"""

from __future__ import annotations

import sys
import time

import sympy as sp

from stepper import load_metric


def baseline(coordinates, g):
    n = len(coordinates)
    ginv = sp.simplify(g.inv())
    gamma = [[[sp.simplify(sum(ginv[a, d] * (sp.diff(g[d, b], coordinates[c]) + sp.diff(g[d, c], coordinates[b])
                                             - sp.diff(g[b, c], coordinates[d])) for d in range(n)) / 2)
               for c in range(n)] for b in range(n)] for a in range(n)]
    ricci = sp.zeros(n, n)
    for b in range(n):
        for d in range(n):
            total = 0
            for a in range(n):
                total += sp.diff(gamma[a][d][b], coordinates[a]) - sp.diff(gamma[a][a][b], coordinates[d])
                for e in range(n):
                    total += gamma[a][a][e] * gamma[e][d][b] - gamma[a][d][e] * gamma[e][a][b]
            ricci[b, d] = sp.simplify(total)
    scalar = sp.simplify(sum(ginv[i, j] * ricci[i, j] for i in range(n) for j in range(n)))
    return gamma, ricci, scalar


def main(path: str) -> None:
    metric = load_metric(path)
    start = time.perf_counter()
    _, ricci, scalar = baseline(list(metric.coordinates), sp.Matrix(metric.matrix))
    seconds = time.perf_counter() - start
    nonzero = sum(1 for v in ricci if v != 0)
    print(f"{seconds:.3f} {nonzero}")


if __name__ == "__main__":
    main(sys.argv[1])
