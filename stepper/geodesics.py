"""Geodesic equations from the Christoffel symbols, as a first-order system.

With u^a = dx^a/dtau (proper time for a timelike geodesic, an affine
parameter for a null one)::

    dx^a/dtau = u^a,    du^a/dtau = -Gamma^a_bc u^b u^c.

The velocity components are the symbols ``u_<coordinate>`` (``u_r`` for
dr/dtau; ``uu_r`` if the metric already uses the name ``u_r``).  The orbit request, when given, is recorded with the equations;
the notebook integrates it with scipy and checks that g_ab u^a u^b stays
constant along it.
"""

from __future__ import annotations

import sympy

from .algebra import printer_stable
from .record import OrbitRequest

FORMULA = (r"\frac{dx^a}{d\tau} = u^a,\qquad \frac{du^a}{d\tau} = -\Gamma^a_{bc}\, u^b u^c")


def velocity_symbols(metric) -> list[sympy.Symbol]:
    """The symbols u_x standing for dx/dtau, one per coordinate; a name the metric already uses
    gets more u's in front (uu_x) so that the two never mix."""
    used = {s.name for s in metric.coordinates} | {s.name for s in metric.parameters} \
        | {s.name for s in metric.extra_symbols} | {f.func.__name__ for f in metric.functions} \
        | {name for name, _ in metric.abbreviations}
    out = []
    for x in metric.coordinates:
        name = f"u_{x.name}"
        while name in used:
            name = "u" + name
        used.add(name)
        out.append(sympy.Symbol(name, real=True))
    return out


def record_geodesics(chain, orbit: OrbitRequest | None) -> None:
    """Record the geodesic equations (and the orbit to integrate, if one was asked for)."""
    n, x = chain.n, chain.x
    u = velocity_symbols(chain.metric)
    renamed = [f"{s.name} for d{c.name}/dtau" for s, c in zip(u, x) if s.name != f"u_{c.name}"]
    note = f" (the metric already uses a name u_x, so the velocity is written {', '.join(renamed)})" if renamed else ""
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
