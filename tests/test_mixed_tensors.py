"""The mixed tensors R^a_b and G^a_b, added through the registry, against published values."""

from __future__ import annotations

import pytest
import sympy as sp

from conftest import example_derivation
from stepper.audit import AGREES, DIFFERS, audit
from stepper.claims import read_claim
from stepper.quantities import QUANTITIES


def symbols(d) -> dict:
    out = {s.name: s for s in d.metric.coordinates + d.metric.parameters}
    out.update({f.func.__name__: f for f in d.metric.functions})
    return out


def mixed(d, quantity: str, key: str) -> sp.Expr:
    return d.results[quantity].get(key, sp.Integer(0))


def same(a, b) -> bool:
    return sp.simplify(sp.sympify(a) - sp.sympify(b)) == 0


def test_registry_declares_the_mixed_tensors_once():
    for name in ("ricci_mixed", "einstein_mixed"):
        q = QUANTITIES[name]
        assert q.positions == "ud" and q.claimable and q.rank == 2


def test_flat_expanding_universe_friedmann_form():
    # Flat FLRW, ds^2 = -dt^2 + a^2 dx^2: G^t_t = -3 (a'/a)^2 and G^x_x = -(2 a''/a + (a'/a)^2), so that
    # G^a_b = 8 pi T^a_b with T^t_t = -rho gives the Friedmann equations; R^t_t = 3 a''/a.
    # Source: Carroll, Spacetime and Geometry, sec. 8.3, eqs. 8.44-8.46 (from memory).
    d = example_derivation("expanding_dust_universe")
    t = symbols(d)["t"]
    a = symbols(d)["a"]
    H = a.diff(t) / a
    assert same(mixed(d, "einstein_mixed", "t,t"), -3 * H**2)
    for x in ("x", "y", "z"):
        assert same(mixed(d, "einstein_mixed", f"{x},{x}"), -(2 * a.diff(t, 2) / a + H**2))
    assert same(mixed(d, "ricci_mixed", "t,t"), 3 * a.diff(t, 2) / a)
    assert "t,x" not in d.results["einstein_mixed"]


def test_traversable_wormhole_einstein_components():
    # Morris-Thorne wormhole with zero redshift function and shape b(r) = b0^2/r:
    # G^t_t = -b'/r^2 = b0^2/r^4 and G^r_r = -b/r^3 = -b0^2/r^4, G^theta_theta = (b - b' r)/(2 r^3) = b0^2/r^4.
    # Source: Morris and Thorne, Am. J. Phys. 56, 395 (1988), eqs. (14) with Phi = 0 (from memory).
    d = example_derivation("wormhole_passage")
    b0, r = symbols(d)["b0"], symbols(d)["r"]
    assert same(mixed(d, "einstein_mixed", "t,t"), b0**2 / r**4)
    assert same(mixed(d, "einstein_mixed", "r,r"), -b0**2 / r**4)
    assert same(mixed(d, "einstein_mixed", "theta,theta"), b0**2 / r**4)
    # and G^a_b = 8 pi T^a_b, the stress-energy stage's own mixed table (common practice)
    for key, value in d.results["stress_energy_mixed"].items():
        assert same(mixed(d, "einstein_mixed", key), 8 * sp.pi * value), key


@pytest.mark.parametrize("stem", ["compact_star_exterior", "spinning_black_hole"])
def test_vacuum_has_vanishing_mixed_ricci(stem):
    # Schwarzschild and Kerr are vacuum solutions: R^a_b = 0 (common practice).
    d = example_derivation(stem)
    assert d.results["ricci_mixed"] == {} and d.results["einstein_mixed"] == {}, stem


def test_trace_of_mixed_ricci_is_the_scalar_curvature():
    # R = R^a_a (common practice), on a metric with off-diagonal terms (the twisted vacuum is not diagonal).
    for stem in ("round_sphere", "hyperbolic_plane", "expanding_dust_universe", "closed_static_universe"):
        d = example_derivation(stem)
        trace = sum((mixed(d, "ricci_mixed", f"{x},{x}") for x in d.metric.names), sp.Integer(0))
        assert same(trace, d.results["scalar"]), stem


def test_claims_of_mixed_components_are_audited():
    d = example_derivation("wormhole_passage")
    right = read_claim(1, {"quantity": "einstein_mixed", "component": "r,r", "value": "-b0^2/r^4"}, d.metric)
    wrong = read_claim(2, {"quantity": "ricci_mixed", "component": "r,r", "value": "2*b0^2/r^4"}, d.metric)
    verdicts, _ = audit(d, [right, wrong])
    assert [v.outcome for v in verdicts] == [AGREES, DIFFERS]
    assert verdicts[0].checked_against == "einstein_mixed"
