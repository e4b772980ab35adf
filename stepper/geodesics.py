"""Geodesic equations from the Christoffel symbols, as a first-order system.

With u^a = dx^a/dtau (proper time for a timelike geodesic, an affine
parameter for a null one)::

    dx^a/dtau = u^a,    du^a/dtau = -Gamma^a_bc u^b u^c.

The velocity components are the symbols ``u_<coordinate>`` (``u_r`` for
dr/dtau).  The orbit request, when given, is recorded with the equations;
the notebook integrates it with scipy and checks that g_ab u^a u^b stays
constant along it.
"""

from __future__ import annotations

import sympy

from .algebra import printer_stable
from .metric import OrbitRequest

FORMULA = (r"\frac{dx^a}{d\tau} = u^a,\qquad \frac{du^a}{d\tau} = -\Gamma^a_{bc}\, u^b u^c")


def velocity_symbols(coordinates) -> list[sympy.Symbol]:
    """The symbols u_x standing for dx/dtau."""
    return [sympy.Symbol(f"u_{x.name}", real=True) for x in coordinates]


def record_geodesics(chain, orbit: OrbitRequest | None) -> None:
    """Record the geodesic equations (and the orbit to integrate, if one was asked for)."""
    n, x = chain.n, chain.x
    u = velocity_symbols(x)
    taken = {s.name for s in chain.metric.parameters} | {c.name for c in x}
    clash = [s.name for s in u if s.name in taken]
    if clash:
        note = f"; the name {clash[0]} is also a declared symbol, so read it here as the velocity component"
    else:
        note = ""
    acceleration = {}
    for a in range(n):
        total = sympy.Integer(0)
        for b in range(n):
            for c in range(b, n):
                gamma = chain.gamma[a][b][c]
                if chain.is_zero(gamma):
                    continue
                weight = 1 if b == c else 2
                total += -weight * chain.expr(gamma) * u[b] * u[c]
        acceleration[x[a].name] = printer_stable(total)
    result = {"position": {x[a].name: u[a] for a in range(n)}, "velocity": acceleration}
    params = {"velocity_symbols": {x[a].name: u[a].name for a in range(n)}}
    if orbit is not None:
        params["orbit"] = orbit_params(orbit)
    chain.results["geodesic_equations"] = acceleration
    chain.record(id="geodesic_equations", kind="geodesic",
                 annotation="Geodesic equations as a first-order system in x^a and u^a = dx^a/dtau: the "
                            "accelerations du^a/dtau = -Gamma^a_bc u^b u^c, summed over all b and c (the "
                            "cross terms b != c appear twice)" + note + "."
                            + (" An orbit to integrate numerically is given with them." if orbit else ""),
                 formula=FORMULA, uses=("christoffel",), result=result, params=params)


def orbit_params(orbit: OrbitRequest) -> dict:
    return {"kind": orbit.kind, "time": orbit.time.name,
            "values": {s.name: v for s, v in orbit.values},
            "start": {s.name: v for s, v in orbit.start},
            "velocity": {s.name: v for s, v in orbit.velocity},
            "span": orbit.span}
