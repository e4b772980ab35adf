"""The plain-sympy baseline for the work beyond curvature.

What a careful user would write by hand after the curvature: the Einstein
tensor from the baseline's Ricci tensor and scalar, the mixed stress-energy
tensor T^i_j = g^ik (G_kj + Lambda g_kj) / kappa with simplify() on every
component, and, for a metric file with an [ansatz] table, the vacuum
equations solved one unknown at a time with dsolve and substituted back.
The metric is read with stepper's loader (input only).

    python bench/baseline_beyond.py examples/wormhole_passage.toml
prints one line: seconds and the number of non-zero T^i_j components.
"""

from __future__ import annotations

import sys
import time

import sympy as sp

from baseline import baseline
from stepper import load_metric


def beyond(metric):
    x = list(metric.coordinates)
    g = sp.Matrix(metric.matrix)
    n = len(x)
    _, ricci, scalar = baseline(x, g)
    einstein = sp.simplify(ricci - scalar * g / 2)
    ginv = sp.simplify(g.inv())
    lam = metric.matter.cosmological_constant if metric.matter else sp.Integer(0)
    kappa = metric.matter.kappa if metric.matter else 8 * sp.pi
    mixed = sp.simplify(ginv * (einstein + lam * g) / kappa)
    solution = {}
    if metric.ansatz:
        equations = [f for e in einstein if e != 0
                     for f, _ in sp.factor_list(sp.numer(sp.together(e)))[1] if f.has(sp.Derivative)]
        for _ in metric.ansatz.unknowns:
            for eq in equations:
                eq = sp.factor(sp.numer(sp.together(eq.subs(solution).doit())))
                left = [f for f in metric.ansatz.unknowns if f not in solution and eq.has(f)]
                if len(left) == 1:
                    solution[left[0]] = sp.dsolve(eq, left[0]).rhs
                    break
        check = [sp.simplify(e.subs(solution).doit()) for e in einstein]
        assert all(c == 0 for c in check), check
    return mixed, solution


def main(path: str) -> None:
    metric = load_metric(path)
    start = time.perf_counter()
    mixed, _ = beyond(metric)
    seconds = time.perf_counter() - start
    print(f"{seconds:.3f} {sum(1 for v in mixed if v != 0)}")


if __name__ == "__main__":
    main(sys.argv[1])
