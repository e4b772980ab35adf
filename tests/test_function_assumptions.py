"""Declared signs of free functions: the [functions] forms, bad forms as one-line errors, the trace, and
the decisions they settle (energy conditions, the frame, the audit's zero tests)."""

from __future__ import annotations

import json

import pytest
import sympy as sp

from conftest import example_derivation, example_trace
from stepper import derive
from stepper.audit import AGREES, UNDECIDED, Auditor
from stepper.claims import Claim, metric_vocabulary
from stepper.errors import InputError
from stepper.exporters import ReportExporter
from stepper.metricfile import metric_from_data
from stepper.parse import parse_expression
from stepper.record import Decision, FunctionSign, Method
from stepper.trace import TraceFormatError, load_trace, trace_json

SPHERE = " + r^2*dtheta^2 + r^2*sin(theta)^2*dphi^2"


def metric(line_element: str, functions: dict, symbols=None, matter: bool = True):
    data = {"coordinates": ["t", "r", "theta", "phi"], "line_element": line_element + SPHERE,
            "symbols": symbols or {"r": "positive"}, "functions": functions}
    if matter:
        data["matter"] = {"units": "geometric"}
    return metric_from_data(data)


# The TOML forms -------------------------------------------------------------------------------------

def test_the_list_form_declares_a_function_without_signs():
    m = metric("-dt^2 + A*dr^2", {"A": ["r"]}, matter=False)
    assert [str(f) for f in m.functions] == ["A(r)"] and m.function_signs == ()


def test_the_table_forms():
    m = metric("-dt^2 + A*dr^2 + m*dt^2", {
        "A": {"of": ["r"], "sign": "positive"},
        "m": {"of": ["t"], "sign": "nonnegative", "derivative_sign": "nonnegative"},
    }, matter=False)
    assert m.function_signs == (FunctionSign("A", "positive"), FunctionSign("m", "nonnegative"),
                                FunctionSign("m", "nonnegative", "t"))
    m = metric("-dt^2 + u*dr^2", {"u": {"of": ["t", "r"], "derivative_sign": {"t": "negative", "r": "nonzero"}}},
               matter=False)
    assert m.function_signs == (FunctionSign("u", "negative", "t"), FunctionSign("u", "nonzero", "r"))
    assert [s.words() for s in m.function_signs] == ["du/dt < 0", "du/dr != 0"]


BAD = [
    ({"A": {"sign": "positive"}}, "function 'A' needs 'of'"),
    ({"A": {"of": ["r"], "signs": "positive"}}, "function 'A': unknown key 'signs' (known keys: of, sign, derivative_sign)"),
    ({"A": {"of": ["r"], "sign": "posative"}}, "function 'A': sign: unknown sign 'posative' (use one of positive,"),
    ({"A": {"of": ["r"], "sign": "real"}}, "unknown sign 'real'"),
    ({"A": {"of": ["r"], "sign": 1}}, "unknown sign 1"),
    ({"A": {"of": [], "sign": "positive"}}, "function 'A' needs a non-empty list of coordinate names"),
    ({"A": {"of": ["s"], "sign": "positive"}}, "function 'A' depends on 's', which is not a coordinate"),
    ({"A": {"of": ["t", "r"], "derivative_sign": "positive"}},
     "function 'A' depends on t, r: give one derivative sign per coordinate, e.g. derivative_sign = { t = \"positive\" }"),
    ({"A": {"of": ["r"], "derivative_sign": {"t": "positive"}}},
     "function 'A': derivative_sign names 't', which is not one of its arguments (r)"),
    ({"A": {"of": ["r"], "derivative_sign": ["positive"]}}, "function 'A': derivative_sign must be a sign word"),
    ({"A": {"of": ["r"], "derivative_sign": {"r": "up"}}}, "function 'A': derivative_sign.r: unknown sign 'up'"),
    ({"A": "r"}, "function 'A' needs a non-empty list of coordinate names, e.g. A = [\"t\"] or A = { of ="),
]


@pytest.mark.parametrize("functions,needle", BAD, ids=[str(b[0]) for b in BAD])
def test_bad_forms_are_one_line_errors(functions, needle):
    with pytest.raises(InputError) as caught:
        metric("-dt^2 + A*dr^2", functions, matter=False)
    message = str(caught.value)
    assert needle in message and "\n" not in message


# The trace ------------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def ball():
    return example_derivation("anisotropic_ball")


def test_the_trace_records_the_signs_and_reads_them_back(ball):
    text = example_trace("anisotropic_ball")
    data = json.loads(text)
    assert data["metric"]["function_signs"] == [
        {"function": "q", "derivative": None, "sign": "nonnegative"},
        {"function": "q", "derivative": "r", "sign": "nonnegative"}]
    loaded = load_trace(text)  # validated against trace.schema.json
    assert loaded.metric.function_signs == ball.metric.function_signs
    assert trace_json(loaded) == text


def test_traces_without_signs_are_unchanged_and_old_traces_load(ball):
    # A metric without declared signs writes no function_signs key (its trace is as before); a trace
    # written before the key existed loads with no signs.
    assert "function_signs" not in json.loads(example_trace("expanding_dust_universe"))["metric"]
    data = json.loads(example_trace("anisotropic_ball"))
    del data["metric"]["function_signs"]
    assert load_trace(json.dumps(data)).metric.function_signs == ()


@pytest.mark.parametrize("entry,needle", [
    ({"function": "w", "derivative": None, "sign": "positive"}, "'w' is not a function of the metric"),
    ({"function": "q", "derivative": "t", "sign": "positive"}, "q does not depend on 't'"),
    ({"function": "q", "derivative": None, "sign": "big"}, "does not follow stepper's trace schema"),
])
def test_a_tampered_sign_is_refused(entry, needle):
    data = json.loads(example_trace("anisotropic_ball"))
    data["metric"]["function_signs"] = [entry]
    with pytest.raises(TraceFormatError) as caught:
        load_trace(json.dumps(data))
    assert needle in str(caught.value) and "\n" not in str(caught.value)


# Energy conditions ----------------------------------------------------------------------------------
# Morris & Thorne, Am. J. Phys. 56, 395 (1988), eqs. for rho, tau and p of ds^2 = -e^(2 Phi) dt^2
# + dr^2/(1 - b/r) + r^2 dOmega^2 (from memory): with Phi = 0, rho = b'/(8 pi r^2), p_r = -tau = -b/(8 pi r^3),
# p_t = (b - b' r)/(16 pi r^3).  The ball writes b = r q(r).

def test_the_ball_has_the_published_density_and_pressures(ball):
    r = sp.Symbol("r", positive=True)
    q = sp.Function("q")(r)
    b = r * q
    db = sp.diff(b, r)
    expected = {"rho": db / (8 * sp.pi * r**2), "r": -b / (8 * sp.pi * r**3), "theta": (b - db * r) / (16 * sp.pi * r**3)}
    results = ball.results
    assert sp.simplify(results["energy_density"] - expected["rho"]) == 0
    assert sp.simplify(results["pressures"]["r"] - expected["r"]) == 0
    assert sp.simplify(results["pressures"]["theta"] - expected["theta"]) == 0


def test_every_energy_condition_of_the_ball_holds_because_of_the_declared_signs(ball):
    # From the values above: rho + p_r = q'/(8 pi r), rho + p_t = (2q + r q')/(16 pi r^2), rho + sum p = 0,
    # rho - p_r = (2q + r q')/(8 pi r^2), rho - p_t = (2q + 3 r q')/(16 pi r^2): all >= 0 when q >= 0 and
    # q' >= 0, and none is fixed in sign without them (common practice).
    conditions = ball.results["energy_conditions"]
    assert {k: v["holds"] for k, v in conditions.items()} == {"null": True, "weak": True, "strong": True,
                                                             "dominant": True}
    decision = Decision.from_data(conditions["null"]["inequalities"]["rho + p_(r)"]["decision"])
    assert decision.method is Method.DECLARED_SIGNS and decision.holds is True
    assert decision.function_signs == (FunctionSign("q", "nonnegative", "r"),)  # q' >= 0 alone decides it
    decision = Decision.from_data(conditions["weak"]["inequalities"]["rho"]["decision"])
    assert decision.function_signs == (FunctionSign("q", "nonnegative"), FunctionSign("q", "nonnegative", "r"))
    assert "q >= 0, dq/dr >= 0 as declared" in conditions["weak"]["inequalities"]["rho"]["evidence"]


@pytest.mark.slow
def test_without_the_signs_the_ball_is_undecided():
    m = metric("-dt^2 + dr^2/(1 - q)", {"q": ["r"]})
    conditions = derive(m).results["energy_conditions"]
    assert {k: v["holds"] for k, v in conditions.items()} == {"null": None, "weak": None, "strong": None,
                                                             "dominant": None}
    decision = Decision.from_data(conditions["null"]["inequalities"]["rho + p_(r)"]["decision"])
    assert decision.method is Method.FREE_FUNCTIONS


@pytest.mark.slow
def test_a_wormhole_with_a_falling_shape_function_violates_the_null_condition():
    # Morris & Thorne 1988 (from memory): rho + p_r = (b' r - b)/(8 pi r^3) < 0 wherever b > 0 and b' <= 0,
    # the exotic matter a flaring throat needs; b0^2/r of examples/wormhole_passage.toml is such a b.
    m = metric("-dt^2 + dr^2/(1 - b/r)", {"b": {"of": ["r"], "sign": "positive", "derivative_sign": "nonpositive"}})
    conditions = derive(m).results["energy_conditions"]
    assert conditions["null"]["holds"] is False
    row = conditions["null"]["inequalities"]["rho + p_(r)"]
    decision = Decision.from_data(row["decision"])
    assert decision.method is Method.DECLARED_SIGNS and decision.holds is False
    assert set(decision.function_signs) == {FunctionSign("b", "positive"), FunctionSign("b", "nonpositive", "r")}


@pytest.mark.slow
def test_a_positive_lapse_makes_the_frame_exist_everywhere():
    # -g^tt = 1/A and g^rr = 1/B are positive when A, B > 0 (common practice), so the squared norms of the
    # static observers' e_(t) and of e_(r) are positive; without the signs they are not fixed.  (That of
    # e_(phi), 1/(r^2 sin^2 theta), is undefined on the axis sin(theta) = 0, so it stays open either way.)
    line = "-A*dt^2 + B*dr^2"
    signed = derive(metric(line, {"A": {"of": ["r"], "sign": "positive"}, "B": {"of": ["r"], "sign": "positive"}}))
    plain = derive(metric(line, {"A": ["r"], "B": ["r"]}))
    assert signed.results["frame"]["where"].startswith("the declared signs do not fix the sign of N for phi:")
    assert plain.results["frame"]["where"].startswith("the declared signs do not fix the sign of N for t, r, phi:")


# The audit ------------------------------------------------------------------------------------------

@pytest.mark.slow
def test_the_audit_uses_the_declared_sign_of_a_function():
    # g^tt = -1/A (common practice), written -1/sqrt(A^2): equal when A > 0, not when A < 0.
    def outcome(functions):
        d = derive(metric("-A*dt^2 + dr^2", functions, matter=False))
        vocabulary = metric_vocabulary(d.metric)
        claim = Claim(1, "", "inverse_metric", "t,t", "-1/sqrt(A^2)", "plain",
                      parse_expression("-1/sqrt(A^2)", vocabulary, "test"))
        return Auditor(d).check(claim)
    signed = outcome({"A": {"of": ["r"], "sign": "positive"}})
    assert signed.outcome == AGREES and "A > 0" in signed.evidence
    assert outcome({"A": ["r"]}).outcome == UNDECIDED


# The notebook's re-check and the report --------------------------------------------------------------

def test_the_notebook_recheck_uses_the_declared_signs():
    from stepper.runtime import matter as runtime
    r = sp.Symbol("r", positive=True)
    q = sp.Function("q")(r)
    value = sp.Derivative(q, r) / (8 * sp.pi * r)  # rho + p_r of the ball (Morris & Thorne 1988, from memory)
    assert runtime.sign_decides(value, True, {sp.Derivative(q, r): "nonnegative"})
    assert not runtime.sign_decides(value, True)
    assert runtime.sign_decides(-value, False, {sp.Derivative(q, r): "positive"})


def test_the_report_shows_the_signs(ball):
    tex = ReportExporter().export(ball)
    assert r"Declared signs of free functions" in tex and r"\(q \ge 0\); \(q' \ge 0\)" in tex
    assert r"with \(q' \ge 0\) as declared" in tex
