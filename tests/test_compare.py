"""stepper compare: two batch folders compared as mathematics, never by text alone.

The batches here are made in-process (derivations written as traces beside an index, as `stepper batch`
writes them): identical runs, a run whose results are written differently but are the same mathematics,
a run with the opposite Riemann sign convention, a changed metric, members that appear, vanish or change
status, and bad input.
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import pytest
import sympy

from stepper import derive, load_metric
from stepper.batch import Options, write_index
from stepper.cli import main
from stepper.compare import compare_batches, differences, same_value
from stepper.errors import InputError
from stepper.outputs import replace_output_set
from stepper.trace import trace_json

ROOT = Path(__file__).resolve().parent.parent


def _batch(folder: Path, members: dict) -> Path:
    """A batch output folder: each member a derivation (status ok) or a status word (nothing written)."""
    entries = []
    for name, value in members.items():
        if isinstance(value, str):
            entries.append({"name": name, "status": value, "exit_status": 2, "seconds": 0.0})
            continue
        replace_output_set(folder / name, {"trace.json": trace_json(value)})
        entries.append({"name": name, "status": "ok", "exit_status": 0, "seconds": 0.0})
    write_index(folder, entries, Options(), "test")
    return folder


def _map_expressions(value, change):
    if isinstance(value, sympy.Basic):
        return change(value)
    if isinstance(value, dict):
        return {k: _map_expressions(v, change) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return type(value)(_map_expressions(v, change) for v in value)
    return value


def _rewritten(derivation, change, quantities, convention_data=None):
    """The derivation with ``change`` applied to the results of ``quantities`` and to their steps."""
    results = {k: (_map_expressions(v, change) if k in quantities else v) for k, v in derivation.results.items()}
    steps = tuple(dataclasses.replace(s, result=_map_expressions(s.result, change)) if s.quantity in quantities
                  else s for s in derivation.steps)
    return dataclasses.replace(derivation, results=results, steps=steps,
                               convention_data=convention_data or derivation.convention_data)


def test_the_zero_test_is_mathematics_not_text():
    x, y = sympy.symbols("x y", positive=True)
    assert same_value((x + 1) ** 2, x**2 + 2 * x + 1)                     # cancellation
    assert same_value(sympy.sin(x) ** 2, 1 - sympy.cos(x) ** 2)             # an identity simplify() knows
    assert same_value(x / (x * y + x), 1 / (y + 1))
    assert not same_value(2 / x**2, 1 / x**2)
    assert not same_value(sympy.sin(x), sympy.cos(x))
    # A symbol whose declared assumption changed is still the same quantity.
    assert same_value(sympy.Symbol("r", real=True) ** 2, sympy.Symbol("r", positive=True) ** 2)
    assert differences({"a": x, "b": {"c": y}}, {"a": x, "b": {"c": 2 * y}, "d": 1}) == ["b/c", "d (new)"]


@pytest.fixture(scope="module")
def sphere(derived):
    return derived("round_sphere")  # derived once per session (conftest.py)


@pytest.fixture(scope="module")
def star(derived):
    return derived("compact_star_exterior")


def test_identical_runs_compare_equal(tmp_path, sphere, star, capsys):
    old = _batch(tmp_path / "old", {"sphere": sphere, "star": star, "broken": "bad input"})
    new = _batch(tmp_path / "new", {"sphere": sphere, "star": star, "broken": "bad input"})
    assert all(not c.changed for c in compare_batches(old, new))
    assert main(["compare", str(old), str(new)]) == 0
    assert "3 members, 0 changed" in capsys.readouterr().out


def test_results_written_differently_are_the_same_mathematics(tmp_path, sphere, star):
    theta = next(s for s in sphere.results["scalar"].free_symbols | {sympy.Symbol("theta", positive=True)}
                 if s.name == "theta")
    one = sympy.Add(sympy.sin(theta) ** 2, sympy.cos(theta) ** 2, evaluate=False)
    # Every curvature result multiplied out, and the sphere's scalar times sin^2 + cos^2.
    star_again = _rewritten(star, sympy.expand, {"christoffel", "riemann", "riemann_lowered", "kretschmann"})
    sphere_again = _rewritten(sphere, lambda e: e if e == 0 else sympy.Mul(e, one), {"scalar"})
    old = _batch(tmp_path / "old", {"sphere": sphere, "star": star})
    new = _batch(tmp_path / "new", {"sphere": sphere_again, "star": star_again})
    for name in ("sphere", "star"):  # the traces differ as text...
        assert (old / name / "trace.json").read_bytes() != (new / name / "trace.json").read_bytes()
    changes = {c.name: c for c in compare_batches(old, new)}
    assert changes["sphere"].kind == "equal" and changes["star"].kind == "equal", [c.line() for c in changes.values()]
    assert main(["compare", str(old), str(new)]) == 0  # ...and nothing changed


def test_a_changed_riemann_sign_convention_is_found(tmp_path, star):
    """The opposite Riemann sign (common practice: some books define R^a_bcd with the other sign, and then
    Ricci, the scalar and the Einstein tensor flip too)."""
    flipped = {"riemann", "riemann_lowered", "ricci", "ricci_mixed", "scalar", "einstein", "einstein_mixed"}
    data = dict(star.convention_data)
    data["riemann"] = {**data["riemann"], "sign": "a round sphere has R < 0"}
    other = _rewritten(star, lambda e: -e, flipped, convention_data=data)
    old = _batch(tmp_path / "old", {"star": star})
    new = _batch(tmp_path / "new", {"star": other})
    change = compare_batches(old, new)[0]
    assert change.changed and change.conventions == ["riemann/sign"]
    assert any(path.startswith("riemann/") for path in change.results)
    assert "riemann/t,r,t,r" in change.steps_changed
    assert not any(path.startswith("christoffel") for path in change.results)  # the connection is the same
    assert main(["compare", str(old), str(new)]) == 1


def test_a_changed_metric_and_changed_membership_are_found(tmp_path, sphere, star, capsys):
    text = (ROOT / "examples" / "round_sphere.toml").read_text().replace(
        'line_element = "rho^2*dtheta^2', 'line_element = "4*rho^2*dtheta^2').replace(
        "+ rho^2*sin(theta)^2", "+ 4*rho^2*sin(theta)^2")
    (tmp_path / "bigger.toml").write_text(text)
    bigger = derive(load_metric(tmp_path / "bigger.toml"))
    # Radius 2 rho: R = 2/(2 rho)^2 = 1/(2 rho^2) (from memory: R = 2/a^2 on a round 2-sphere of radius a).
    rho = sympy.Symbol("rho", positive=True)
    assert sympy.simplify(bigger.results["scalar"] - 1 / (2 * rho**2)) == 0
    old = _batch(tmp_path / "old", {"sphere": sphere, "star": star, "gone": sphere, "flaky": "timed out"})
    new = _batch(tmp_path / "new", {"sphere": bigger, "star": star, "fresh": star, "flaky": star})
    changes = {c.name: c for c in compare_batches(old, new)}
    assert changes["sphere"].changed and "scalar" in changes["sphere"].results
    assert not changes["star"].changed
    assert changes["gone"].kind == "vanished" and changes["fresh"].kind == "appeared"
    assert changes["flaky"].kind == "status" and changes["flaky"].new_status == "ok"
    assert main(["compare", str(old), str(new), "--json", str(tmp_path / "c.json")]) == 1
    out = capsys.readouterr().out
    assert "sphere: CHANGED" in out and "gone: vanished" in out and "fresh: appeared" in out
    assert {row["name"] for row in json.loads((tmp_path / "c.json").read_text()) if row["kind"] != "unchanged"} == \
        {"sphere", "gone", "fresh", "flaky"}


def test_bad_input_is_one_line_and_status_2(tmp_path, sphere, capsys):
    good = _batch(tmp_path / "good", {"sphere": sphere})
    (tmp_path / "plain").mkdir()
    (tmp_path / "fake").mkdir()
    (tmp_path / "fake" / "index.json").write_text('{"format": "something else"}')
    broken = _batch(tmp_path / "broken", {"sphere": sphere})
    (broken / "sphere" / "trace.json").write_text('{"format": "stepper trace", "version": 2, "steps": "no"}')
    for other in ("plain", "fake", "missing", "broken"):
        assert main(["compare", str(good), str(tmp_path / other)]) == 2
        err = capsys.readouterr().err
        assert len(err.strip().splitlines()) == 1 and "Traceback" not in err, err
    with pytest.raises(InputError):
        compare_batches(good, tmp_path / "plain")
