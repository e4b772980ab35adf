"""Riemann components too long to reproduce before simplification are recorded group by group: each
derivative term d_c Gamma^a_db, and each sum of Christoffel products over the repeated index, with its
simplified value.  The groups are checked here against the recorded Christoffel symbols with plain sympy
(the general formula R^a_bcd = d_c Gamma^a_db - d_d Gamma^a_cb + Gamma^a_ce Gamma^e_db - Gamma^a_de Gamma^e_cb,
common practice), and the notebook must stop at a component whose recorded group is wrong."""

from __future__ import annotations

import dataclasses

import nbformat
import pytest
import sympy as sp

from conftest import example_derivation

from stepper.notebook import notebook_text
from stepper.record import as_expression

from test_notebook import run_in_process

pytestmark = pytest.mark.slow  # the rotating black hole is the example whose components are long


def christoffel(d, a, b, c):
    table = d.results["christoffel"]
    return as_expression(table.get(f"{a},{b},{c}", sp.Integer(0)))


def group_value(d, group):
    """A group recomputed from the recorded Christoffel symbols."""
    coordinates = {x.name: x for x in d.metric.coordinates}
    if group["kind"] == "derivative":
        return sp.diff(christoffel(d, *group["christoffel"].split(",")), coordinates[group["by"]])
    return sum((christoffel(d, *first.split(",")) * christoffel(d, *second.split(","))
                for first, second in group["pairs"]), sp.Integer(0))


def vanishes(expr) -> bool:
    """Exact zero test through the rational parametrisation sin x = 2u/(1 + u^2), cos x = (1 - u^2)/(1 + u^2)
    of every angle (common practice), then sympy's cancel."""
    expr = sp.sympify(expr)
    for x in {f.args[0] for f in expr.atoms(sp.sin, sp.cos)}:
        u = sp.Dummy("u")
        expr = expr.subs({sp.sin(x): 2 * u / (1 + u**2), sp.cos(x): (1 - u**2) / (1 + u**2)})
    return sp.cancel(sp.together(expr)) == 0


def grouped_steps(d):
    return [s for s in d.steps if s.params.get("groups")]


def test_long_components_are_grouped_and_each_group_is_right():
    d = example_derivation("spinning_black_hole")
    steps = grouped_steps(d)
    assert len(steps) >= 20  # most of the rotating black hole's components are too long to reproduce
    for step in steps[:6]:  # a sample keeps the test short; the notebook checks every one
        total = sp.Integer(0)
        for group in step.params["groups"]:
            assert vanishes(group_value(d, group) - group["value"]), (step.id, group["kind"])
            total += group["sign"] * group["value"]
        assert vanishes(total - step.result), step.id


def test_the_groups_follow_the_general_formula():
    # two derivative terms at most (d_c Gamma^a_db with +, d_d Gamma^a_cb with -), then the + products over e
    # and the - products over e; the derivative is by the third or the fourth index of the component
    d = example_derivation("spinning_black_hole")
    for step in grouped_steps(d):
        a, b, c, e = step.component.split(",")
        derivatives = [g for g in step.params["groups"] if g["kind"] == "derivative"]
        for g in derivatives:
            assert (g["sign"], g["by"], g["christoffel"]) in ((1, c, f"{a},{e},{b}"), (-1, e, f"{a},{c},{b}")), g
        for g in step.params["groups"]:
            if g["kind"] == "products":
                for first, second in g["pairs"]:
                    assert first.split(",")[0] == a and second.split(",")[2] == b
                    assert first.split(",")[1] == (c if g["sign"] > 0 else e)


def test_the_notebook_stops_at_a_wrong_group():
    d = example_derivation("spinning_black_hole")
    target = grouped_steps(d)[0]
    groups = [dict(g) for g in target.params["groups"]]
    groups[0]["value"] = groups[0]["value"] + 1
    steps = tuple(dataclasses.replace(s, params={**s.params, "groups": groups}) if s.id == target.id else s
                  for s in d.steps)
    wrong = dataclasses.replace(d, steps=steps)
    assert run_in_process(nbformat.reads(notebook_text(wrong), as_version=4)) == target.id
