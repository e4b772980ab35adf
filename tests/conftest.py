"""Shared fixtures: each example derived once per test session (and audited, for claims files)."""

from __future__ import annotations

import functools
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"
EXAMPLE_STEMS = tuple(sorted(p.stem for p in EXAMPLES.glob("*.toml")))
CLAIM_STEMS = tuple(sorted(p.stem for p in (EXAMPLES / "claims").glob("*.toml")))

#: The examples whose derivations take seconds: their parametrized cases run in the full suite only
#: (``pytest -m "not slow"`` is the everyday subset).
LARGE_EXAMPLES = ("spinning_black_hole", "twisted_vacuum", "charged_rotating_black_hole")


def pytest_collection_modifyitems(config, items):
    for item in items:
        callspec = getattr(item, "callspec", None)
        if callspec and any(str(v) in LARGE_EXAMPLES for v in callspec.params.values()):
            item.add_marker(pytest.mark.slow)


@functools.lru_cache(maxsize=None)
def example_derivation(stem: str):
    """The derivation of examples/<stem>.toml, or of the claims file examples/claims/<stem>.toml with its audit."""
    from stepper import derive, load_metric
    if stem in CLAIM_STEMS:
        from stepper.audit import audit, record_audit
        from stepper.claims import load_claims
        metric, title, claims = load_claims(EXAMPLES / "claims" / f"{stem}.toml")
        derivation = derive(metric)
        verdicts, earliest = audit(derivation, claims)
        return record_audit(derivation, title, verdicts, earliest)
    return derive(load_metric(EXAMPLES / f"{stem}.toml"))


@functools.lru_cache(maxsize=None)
def example_trace(stem: str) -> str:
    from stepper.trace import trace_json
    return trace_json(example_derivation(stem))


@pytest.fixture(scope="session")
def derived():
    """``derived(stem)``: the (cached) derivation of an example or claims file."""
    return example_derivation


# Kerr-de Sitter in Boyer-Lindquist form (from memory), a workload for the tests of stopping and
# signals (tests/test_output_set.py, tests/test_partial.py): the first stages take well under a second, the
# Riemann stage seconds.
ROTATING_DE_SITTER = """title = "rotating hole in a de Sitter background"
coordinates = ["t", "r", "theta", "phi"]
line_element = "-(D_r/(Xi^2*Sig))*(dt - a*sin(theta)^2*dphi)^2 + (Sig/D_r)*dr^2 + (Sig/D_th)*dtheta^2 + (D_th*sin(theta)^2/(Xi^2*Sig))*(a*dt - (r^2 + a^2)*dphi)^2"
[symbols]
M = "positive"
a = "positive"
L = "positive"
[abbreviations]
Sig = "r^2 + a^2*cos(theta)^2"
D_r = "(r^2 + a^2)*(1 - L*r^2/3) - 2*M*r"
D_th = "1 + L*a^2*cos(theta)^2/3"
Xi = "1 + L*a^2/3"
"""
