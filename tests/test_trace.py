"""The trace: structure, exact round trip through sympy, determinism."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
import sympy as sp

from conftest import example_derivation
from stepper import derive, load_metric
from stepper.trace import trace_data, trace_json, write_atomically

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
SMALL = ["round_sphere", "hyperbolic_plane", "compact_star_exterior", "expanding_dust_universe",
         "inflating_universe", "five_dimensional_black_hole", "twisted_vacuum", "spinning_black_hole"]


def derived(name: str):
    """The shared, once-per-session derivation of an example (tests/conftest.py)."""
    return example_derivation(name)


def reader_namespace(data: dict) -> dict:
    """What sympify needs to read the trace's expressions back, independently of stepper's own loader:
    the declared symbols with their assumptions and the free functions (common practice for sympy
    round trips).  Only our own freshly written trace is read this way, in a test."""
    words = {"positive": {"positive": True}, "negative": {"negative": True}, "nonnegative": {"nonnegative": True},
             "nonpositive": {"nonpositive": True}, "nonzero": {"nonzero": True}, "real": {}, "complex": None}
    space = {name: sp.Symbol(name, real=True, **words[word]) if words[word] is not None else sp.Symbol(name)
             for name, word in data["declarations"]["symbols"].items()}
    space.update({name: sp.Function(name) for name in data["declarations"]["functions"]})
    return space


def read(tagged: dict, space: dict):
    assert set(tagged) == {"expr"}, tagged
    return sp.sympify(tagged["expr"], locals=space)


def expressions_in(value, path=""):
    if isinstance(value, dict):
        for key, inner in value.items():
            yield from expressions_in(inner, f"{path}/{key}")
    elif isinstance(value, dict) and set(value) == {"expr"}:
        yield path, value["expr"]


@pytest.mark.parametrize("name", SMALL)
def test_results_round_trip_through_sympify(name):
    d = derived(name)
    data = json.loads(trace_json(d))
    space = reader_namespace(data)
    for quantity in ("inverse_metric", "christoffel", "riemann", "ricci", "einstein", "weyl"):
        for key, text in data["results"].get(quantity, {}).items():
            back = read(text, space)
            assert back == d.results[quantity][key], (quantity, key)
    for quantity in ("scalar", "kretschmann", "determinant"):
        assert read(data["results"][quantity], space) == d.results[quantity]
    for key, text in data["metric"]["components"].items():
        i, j = (d.metric.names.index(part) for part in key.split(","))
        assert read(text, space) == d.metric.matrix[i, j], key


def test_step_results_and_simplifications_round_trip():
    d = derived("compact_star_exterior")
    data = json.loads(trace_json(d))
    space = reader_namespace(data)
    for step, record in zip(d.steps, data["steps"]):
        if step.kind == "component":
            assert read(record["result"], space) == step.result, step.id
        for simp, simp_record in zip(step.simplifications, record["simplifications"]):
            assert read(simp_record["after"], space) == simp.after
            if simp.before is not None:
                assert read(simp_record["before"], space) == simp.before


@pytest.mark.parametrize("name", ["compact_star_exterior", "expanding_dust_universe"])
def test_simplification_before_and_after_are_equal(name):
    # Every recorded rewrite keeps the value: before - after simplifies to zero with plain sympy.
    d = derived(name)
    checked = 0
    for step in d.steps:
        for simp in step.simplifications:
            if simp.before is None:
                continue
            assert sp.simplify(simp.before.doit() - simp.after) == 0, step.id
            checked += 1
    assert checked > 10


@pytest.mark.parametrize("name", SMALL)
def test_trace_structure(name):
    d = derived(name)
    data = trace_data(d)
    ids = [s["id"] for s in data["steps"]]
    assert len(ids) == len(set(ids))
    seen = set()
    for record in data["steps"]:
        for used in record["uses"]:
            assert used in seen, (record["id"], used)
        seen.add(record["id"])
        assert record["annotation"] and record["formula"]
    coordinates = set(data["metric"]["coordinates"])
    for quantity, arity in (("christoffel", 3), ("riemann", 4), ("ricci", 2), ("einstein", 2),
                            ("inverse_metric", 2), ("weyl", 4)):
        for key in data["results"].get(quantity, {}):
            parts = key.split(",")
            assert len(parts) == arity and set(parts) <= coordinates, (quantity, key)
    for verdict in data["results"]["verdicts"].values():
        assert verdict["holds"] in (True, False, None) and verdict["evidence"]


def test_every_nonzero_christoffel_component_has_its_own_step_with_formula_and_substitution():
    d = derived("compact_star_exterior")
    for key in d.results["christoffel"]:
        a, b, c = key.split(",")
        order = d.metric.names
        if order.index(b) > order.index(c):
            b, c = c, b
        step = d.step(f"christoffel/{a},{b},{c}")
        assert step.kind == "component"
        assert step.substituted.startswith(r"\Gamma^")
        assert step.simplifications and step.simplifications[0].rewrite


@pytest.mark.slow
def test_same_input_gives_identical_bytes(tmp_path):
    first = trace_json(derive(load_metric(EXAMPLES / "twisted_vacuum.toml")))
    second = trace_json(derive(load_metric(EXAMPLES / "twisted_vacuum.toml")))
    assert first == second


def test_write_atomically_replaces_and_leaves_no_temporaries(tmp_path):
    target = tmp_path / "trace.json"
    write_atomically(target, "one\n")
    write_atomically(target, "two\n")
    assert target.read_text() == "two\n"
    assert [p.name for p in tmp_path.iterdir()] == ["trace.json"]


def test_interrupted_write_keeps_the_old_file(tmp_path, monkeypatch):
    target = tmp_path / "trace.json"
    write_atomically(target, "good\n")

    def power_cut(fd):
        raise OSError("disk went away")
    monkeypatch.setattr("stepper.trace.os.fsync", power_cut)
    with pytest.raises(OSError):
        write_atomically(target, "half of a new trace")
    assert target.read_text() == "good\n"
    assert [p.name for p in tmp_path.iterdir()] == ["trace.json"]


@pytest.mark.slow
def test_printer_stable_forms_survive_printing_and_reading():
    # Random products of sums with rational coefficients: the kind sympify rewrites on reading (common practice).
    import random
    from stepper.algebra import printer_stable
    M, r, a, s = sp.symbols("M r a s")
    atoms = [M, r, a, sp.sin(s), sp.cos(s)]
    rng = random.Random(7)

    def build(depth):
        if depth == 0:
            return rng.choice(atoms + [sp.Integer(rng.randint(-3, 3)), sp.Rational(rng.randint(-5, 5), rng.randint(1, 4))])
        op = rng.choice("+*^/")
        left, right = build(depth - 1), build(depth - 1)
        if op == "+":
            return left + right
        if op == "*":
            return left * right
        if op == "^":
            return left ** rng.randint(1, 3)
        return left / right if right != 0 else left
    checked = 0
    for _ in range(1500):
        expr = build(4)
        if expr.has(sp.zoo, sp.nan):
            continue
        stable = printer_stable(expr)
        assert sp.simplify(stable - expr) == 0 if checked < 50 else True
        assert sp.sympify(sp.sstr(stable, order="lex")) == stable, expr
        checked += 1
    assert checked > 1000
