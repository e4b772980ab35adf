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
