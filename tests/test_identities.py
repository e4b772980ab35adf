"""The stronger zero test of stepper/identities.py: each rewrite proves identities from the handbooks, a
non-identity is never called zero, what no rewrite settles stays "cannot be decided" with its numeric
evidence, and how a zero was proven is recorded as data."""

from __future__ import annotations

import pytest
import sympy as sp

from conftest import example_derivation
from stepper.audit import AGREES, DIFFERS, UNDECIDED, Auditor, audit
from stepper.claims import Claim, metric_vocabulary
from stepper.identities import MAX_MULTIPLE, REWRITE_KEYS, prove_zero
from stepper.latex_input import parse_latex
from stepper.record import FunctionSign

x = sp.Symbol("x", real=True)
theta = sp.Symbol("theta", real=True)
r = sp.Symbol("r", positive=True)
M = sp.Symbol("M", positive=True)
a, b = sp.symbols("a b", real=True)


def proven_by(expr, signs=()):
    test = prove_zero(expr, signs)
    assert test.vanishes is True, f"not proven: {expr}"
    return test.decisive


# Each identity: (what it is, left - right, the rewrite that must settle it).  Sources are named per line;
# the section numbers of Abramowitz & Stegun (A&S), Handbook of Mathematical Functions, and of the NIST
# Digital Library of Mathematical Functions (DLMF) are from memory.
IDENTITIES = [
    # A&S 4.3.10 / DLMF 4.14: tan = sin/cos, sec = 1/cos, so sec^2 x = 1 + tan^2 x.
    ("sec^2 = 1 + tan^2", sp.sec(x) ** 2 - 1 - sp.tan(x) ** 2, "reciprocal functions"),
    # A&S 4.3 / DLMF 4.14: cot = cos/sin, csc = 1/sin, so csc^2 x = 1 + cot^2 x.
    ("csc^2 = 1 + cot^2", sp.csc(x) ** 2 - 1 - sp.cot(x) ** 2, "reciprocal functions"),
    # A&S 4.5 / DLMF 4.28: tanh = sinh/cosh, sech = 1/cosh, so sech^2 x = 1 - tanh^2 x.
    ("sech^2 = 1 - tanh^2", sp.sech(x) ** 2 - 1 + sp.tanh(x) ** 2, "reciprocal functions"),
    # DLMF 4.21 (half angles, from memory): tan(x/2) = sin x/(1 + cos x) = (1 - cos x)/sin x.
    ("tan half angle", sp.tan(x / 2) - sp.sin(x) / (1 + sp.cos(x)), "common angles"),
    ("tan half angle, other form", sp.tan(x / 2) - (1 - sp.cos(x)) / sp.sin(x), "common angles"),
    # DLMF 4.21 (half angles): cos^2(x/2) = (1 + cos x)/2.
    ("cos^2 half angle", sp.cos(x / 2) ** 2 - (1 + sp.cos(x)) / 2, "common angles"),
    # A&S 4.3 (multiple angles, from memory): cos 3x = 4 cos^3 x - 3 cos x, sin 2x = 2 sin x cos x.
    ("cos triple angle", sp.cos(3 * x) - 4 * sp.cos(x) ** 3 + 3 * sp.cos(x), "common angles"),
    ("sin of a third", sp.sin(x) - 3 * sp.sin(x / 3) + 4 * sp.sin(x / 3) ** 3, "common angles"),
    # A&S 4.3 (addition formulas): sin(a + b) = sin a cos b + cos a sin b, with a = x/2 and b = x/3.
    ("addition of halves and thirds", sp.sin(x / 2 + x / 3) - sp.sin(x / 2) * sp.cos(x / 3)
     - sp.cos(x / 2) * sp.sin(x / 3), "common angles"),
    # DLMF 4.35 (hyperbolic identities, from memory): cosh 2x = 1 + 2 sinh^2 x, tanh(x/2) = sinh x/(1 + cosh x).
    ("cosh double argument", sp.cosh(2 * x) - 1 - 2 * sp.sinh(x) ** 2, "common angles"),
    ("tanh half argument", sp.tanh(x / 2) - sp.sinh(x) / (1 + sp.cosh(x)), "common angles"),
    # A&S 4.5.1-4.5.2 / DLMF 4.28 (from memory): sinh x = (e^x - e^-x)/2, cosh x = (e^x + e^-x)/2.
    ("sinh through exp", sp.sinh(x) - (sp.exp(x) - sp.exp(-x)) / 2, "exponentials"),
    ("cosh + sinh = exp", sp.cosh(x) + sp.sinh(x) - sp.exp(x), "exponentials"),
    # A&S 4.2 / DLMF 4.5 (from memory): e^(a + b) = e^a e^b, here with halves: e^(x/2) e^(x/2) = e^x.
    ("exp of a sum", sp.exp(x + a) - sp.exp(a) * sp.sinh(x / 2) * 2 * sp.exp(x / 2) - sp.exp(a),
     "exponentials"),
    # DLMF 4.8 (from memory): ln(z1 z2) = ln z1 + ln z2 and ln(z^n) = n ln z for positive z1, z2, z.
    ("log of a product", sp.log(M * r ** 2) - sp.log(M) - 2 * sp.log(r), "logarithms"),
    ("log of a quotient", sp.log(r / (2 * M)) - sp.log(r) + sp.log(2) + sp.log(M), "logarithms"),
]


@pytest.mark.parametrize("name,difference,rewrite", IDENTITIES, ids=[i[0] for i in IDENTITIES])
def test_each_rewrite_proves_its_identities(name, difference, rewrite):
    assert proven_by(difference) == rewrite


def test_the_rewrites_are_those_documented():
    assert REWRITE_KEYS == ("as written", "reciprocal functions", "common angles", "exponentials", "logarithms")


def test_a_compound_angle_is_read_as_an_independent_angle():
    # sin^2 u + cos^2 u = 1 for every u, here u = H t (A&S 4.3.10, from memory).
    H, t = sp.Symbol("H", positive=True), sp.Symbol("t", real=True)
    assert proven_by(sp.sin(H * t) ** 2 + sp.cos(H * t) ** 2 - 1) == "as written"


NON_IDENTITIES = [
    # The half-angle form of the seminar notes with the sign of tan(theta/2) slipped:
    # (1/2)(cot(x/2) + tan(x/2)) = 1/sin x (DLMF 4.21, from memory), not cot x.
    ("sign slip in the half-angle form", ((1 + sp.cos(x)) / sp.sin(x) + sp.tan(x / 2)) / 2 - sp.cot(x)),
    # ln(ab) = ln a + ln b fails for a = b = -1 (the principal logarithm: ln 1 = 0, 2 ln(-1) = 2 pi i;
    # DLMF 4.8, from memory): a and b have no declared sign, so the logarithm must not be split.
    ("log of a product of reals of unknown sign", sp.log(a * b) - sp.log(a) - sp.log(b)),
    # |sin x| = sin x only for 0 <= x <= pi (common practice): not an identity on the real line.
    ("a root of a square", sp.sqrt(1 - sp.cos(x) ** 2) - sp.sin(x)),
    # cosh x - sinh x = e^-x, not e^x (A&S 4.5, from memory).
    ("cosh - sinh is not exp", sp.cosh(x) - sp.sinh(x) - sp.exp(x)),
]


@pytest.mark.parametrize("name,difference", NON_IDENTITIES, ids=[i[0] for i in NON_IDENTITIES])
def test_a_non_identity_is_never_proven_zero(name, difference):
    test = prove_zero(difference)
    assert test.vanishes is None and test.decisive == ""


def test_the_bounds_stop_the_work_and_say_so():
    # sin((k+1) x) = sin(kx) cos x + cos(kx) sin x (A&S 4.3, addition formula) is an identity, but a multiple
    # above the bound is not expanded: the test stops, says which bound, and decides nothing.
    k = MAX_MULTIPLE + 1
    test = prove_zero(sp.sin((k + 1) * x) - sp.sin(k * x) * sp.cos(x) - sp.cos(k * x) * sp.sin(x))
    assert test.vanishes is None and str(MAX_MULTIPLE) in test.stopped
    assert "bound" in test.sentence()


def test_same_input_same_answer():
    difference = sp.tan(x / 2) - sp.sin(x) / (1 + sp.cos(x))
    assert prove_zero(difference) == prove_zero(difference)
    assert prove_zero(difference).as_data() == {"vanishes": True, "rewrites": ["reciprocal functions", "common angles"],
                                                "decisive": "common angles"}


def test_declared_signs_of_free_functions_split_logarithms_and_roots():
    # DLMF 4.8 (from memory): ln(A^2 r) = 2 ln A + ln r for A, r > 0; sqrt(A^2) = A for A > 0 (common practice).
    A = sp.Function("A")(r)
    positive = (FunctionSign("A", "positive"),)
    test = prove_zero(sp.log(A ** 2 * r) - 2 * sp.log(A) - sp.log(r), positive)
    assert test.vanishes is True and test.decisive == "logarithms" and test.signs == positive
    assert prove_zero(sp.sqrt(A ** 2) - A, positive).vanishes is True
    # Without the declaration A may be negative, and neither is an identity.
    assert prove_zero(sp.log(A ** 2 * r) - 2 * sp.log(A) - sp.log(r)).vanishes is None
    assert prove_zero(sp.sqrt(A ** 2) - A).vanishes is None
    # A declared sign of the derivative reaches the derivative: sqrt(A'^2) = A' for A' > 0.
    dA = sp.Derivative(A, r)
    assert prove_zero(sp.sqrt(dA ** 2) - dA, (FunctionSign("A", "positive", "r"),)).vanishes is True
    assert prove_zero(sp.sqrt(dA ** 2) - dA, positive).vanishes is None


# The audit ------------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def exterior():
    return example_derivation("compact_star_exterior")


def check(derivation, quantity, component, latex):
    vocabulary = metric_vocabulary(derivation.metric)
    claim = Claim(1, "", quantity, component, latex, "latex", parse_latex(latex, vocabulary, "test"))
    auditor = Auditor(derivation)
    return auditor.check(claim), auditor


def test_the_half_angle_claim_of_the_seminar_notes_agrees_and_says_how():
    # Gamma^phi_theta phi = cot(theta) (Carroll, Spacetime and Geometry, sec. 5.2, from memory) and
    # cot x = (cot(x/2) - tan(x/2))/2 with cot(x/2) = (1 + cos x)/sin x (DLMF 4.21, from memory).
    d = example_derivation("seminar_notes")
    rows = {row["label"]: row for row in d.results["audit"]["claims"]}
    row = rows["notes p. 7, a half-angle form from an old table"]
    assert row["outcome"] == AGREES
    assert "half and double angles" in row["evidence"]


def test_the_auditor_keeps_how_a_zero_was_proven_as_data(exterior):
    verdict, auditor = check(exterior, "christoffel", "phi,theta,phi",
                             r"\frac{1}{2}\left(\frac{1+\cos\theta}{\sin\theta} - \tan\frac{\theta}{2}\right)")
    assert verdict.outcome == AGREES
    found = [t.as_data() for t in auditor.identity_tests.values() if t.vanishes]
    assert found == [{"vanishes": True, "rewrites": ["reciprocal functions", "common angles"],
                      "decisive": "common angles"}]


def test_a_sign_slip_in_the_half_angle_form_still_differs(exterior):
    # (1/2)(cot(x/2) + tan(x/2)) = csc x (DLMF 4.21, from memory): not Gamma^phi_theta phi = cot(theta).
    verdict, _ = check(exterior, "christoffel", "phi,theta,phi",
                       r"\frac{1}{2}\left(\frac{1+\cos\theta}{\sin\theta} + \tan\frac{\theta}{2}\right)")
    assert verdict.outcome == DIFFERS


def test_a_nested_root_stays_undecided_with_numeric_evidence(exterior):
    # sqrt(1 + 2y + 2 sqrt(2y)) = 1 + sqrt(2y) for y = M/r > 0 (common practice: square the right side), so
    # the claim is Gamma^t_tr = M/(r(r - 2M)) (Carroll, sec. 5.2, from memory); no rewrite denests the root.
    verdict, _ = check(exterior, "christoffel", "t,t,r",
                       r"\frac{M}{r^2(1-2M/r)}\left(\sqrt{1+\frac{2M}{r}+2\sqrt{\frac{2M}{r}}}"
                       r"-\sqrt{\frac{2M}{r}}\right)")
    assert verdict.outcome == UNDECIDED
    assert "random points" in verdict.evidence and "identity rewrites" in verdict.evidence


def test_the_seminar_notes_keep_every_other_outcome():
    # The outcomes before the stronger zero test, except claim 11 (once "cannot be decided"); claim 12 is the
    # nested root above.  Sources of the values: Carroll, Spacetime and Geometry, sec. 5.2 (from memory).
    d = example_derivation("seminar_notes")
    outcomes = [row["outcome"] for row in d.results["audit"]["claims"]]
    assert outcomes == [AGREES, AGREES, AGREES, DIFFERS, DIFFERS, AGREES, DIFFERS, DIFFERS, AGREES, "unreadable",
                        AGREES, UNDECIDED]
    assert d.results["audit"]["earliest_wrong"] == [4, 7]


def test_hyperbolic_claims_of_the_inflating_universe(monkeypatch):
    # de Sitter with a(t) = exp(H t) has R = 12 H^2 (Carroll, sec. 8.3, from memory); 12 H^2 written as
    # 12 H^2 (cosh^2(Ht) - sinh^2(Ht)) (DLMF 4.33, from memory) or with exponentials.  simplify() is turned
    # off so that the rewrites alone must settle it.
    d = example_derivation("inflating_universe")
    monkeypatch.setattr(sp, "simplify", lambda expr, *args, **kwargs: expr)
    vocabulary = metric_vocabulary(d.metric)
    from stepper.parse import parse_expression
    rows = ["12*H^2*(cosh(H*t)^2 - sinh(H*t)^2)", "12*H^2*exp(H*t)*(cosh(H*t) - sinh(H*t))",
            "12*H^2*(cosh(H*t) + sinh(H*t))"]
    claims = [Claim(k, "", "scalar", "", text, "plain", parse_expression(text, vocabulary, "test"))
              for k, text in enumerate(rows, start=1)]
    verdicts, _ = audit(d, claims)
    assert [v.outcome for v in verdicts] == [AGREES, AGREES, DIFFERS]


def test_the_audit_records_how_a_claim_was_proven_as_data():
    # The half-angle claim of the seminar notes: cot(theta/2)-type forms meet cot(theta) once every angle is
    # a multiple of one base angle (Abramowitz & Stegun 4.3.20-4.3.21, from memory).
    import sys
    from pathlib import Path
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from conftest import example_derivation
    step = example_derivation("seminar_notes").step("claim/11")
    assert step.params["outcome"] == "agrees"
    assert step.params["zero_test"]["vanishes"] is True
    assert step.params["zero_test"]["decisive"] == "common angles"
