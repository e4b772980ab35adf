"""Auditing hand calculations: published values as the 'hand calculation', once right, once with a slip."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from conftest import example_derivation
from stepper import derive, load_metric
from stepper.audit import AGREES, DIFFERS, UNDECIDED, UNREADABLE, audit, record_audit
from stepper.claims import Claim, load_claims, metric_vocabulary
from stepper.latex_input import parse_latex
from stepper.parse import parse_expression
from stepper.trace import trace_json

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"

# Exterior Schwarzschild, G = c = 1.  Source: Carroll, Spacetime and Geometry, sec. 5.2,
# eqs. (5.53) and (5.55) (from memory); the same values appear in tests/test_published_values.py.
SCHWARZSCHILD_TEXTBOOK = [
    ("christoffel", "t,t,r", "latex", r"\frac{M}{r(r-2M)}"),
    ("christoffel", "r,t,t", "latex", r"\frac{M(r-2M)}{r^{3}}"),
    ("christoffel", "r,r,r", "latex", r"-\frac{M}{r(r-2M)}"),
    ("christoffel", "r,theta,theta", "plain", "-(r - 2*M)"),
    ("christoffel", "r,phi,phi", "latex", r"-(r-2M)\sin^2\theta"),
    ("christoffel", "theta,phi,phi", "latex", r"-\sin\theta\cos\theta"),
    ("christoffel", "phi,theta,phi", "latex", r"\cot\theta"),
    ("riemann", "t,r,t,r", "latex", r"\frac{2M}{r^2(r-2M)}"),
    ("riemann", "theta,phi,theta,phi", "latex", r"\frac{2M\sin^2\theta}{r}"),
    ("ricci", "t,t", "plain", "0"),
    ("scalar", "", "plain", "0"),
    ("kretschmann", "", "latex", r"\frac{48M^2}{r^6}"),
]


@pytest.fixture(scope="module")
def schwarzschild():
    return example_derivation("compact_star_exterior")


def make_claims(derivation, rows) -> list[Claim]:
    vocabulary = metric_vocabulary(derivation.metric)
    claims = []
    for number, (quantity, component, syntax, text) in enumerate(rows, start=1):
        reader = parse_latex if syntax == "latex" else parse_expression
        claims.append(Claim(number, "", quantity, component, text, syntax, reader(text, vocabulary, "test")))
    return claims


def outcomes(derivation, rows):
    verdicts, earliest = audit(derivation, make_claims(derivation, rows))
    return verdicts, earliest


def test_textbook_values_copied_correctly_all_agree(schwarzschild):
    verdicts, earliest = outcomes(schwarzschild, SCHWARZSCHILD_TEXTBOOK)
    assert [v.outcome for v in verdicts] == [AGREES] * len(SCHWARZSCHILD_TEXTBOOK)
    assert earliest == []


def replaced(rows, index, text, syntax=None):
    quantity, component, old_syntax, _ = rows[index]
    out = list(rows)
    out[index] = (quantity, component, syntax or old_syntax, text)
    return out


def test_sign_flip_is_named(schwarzschild):
    rows = replaced(SCHWARZSCHILD_TEXTBOOK, 2, r"\frac{M}{r(r-2M)}")  # Gamma^r_rr with its sign lost
    verdicts, earliest = outcomes(schwarzschild, rows)
    wrong = [v for v in verdicts if v.outcome == DIFFERS]
    assert [v.claim.number for v in wrong] == [3]
    assert "sign flip" in wrong[0].diagnosis
    assert earliest == [3]


def test_missing_factor_of_two_is_named(schwarzschild):
    rows = replaced(SCHWARZSCHILD_TEXTBOOK, 7, r"\frac{M}{r^2(r-2M)}")
    verdicts, _ = outcomes(schwarzschild, rows)
    assert verdicts[7].outcome == DIFFERS and "missing factor of 2" in verdicts[7].diagnosis


def test_extra_factor_of_two_is_named(schwarzschild):
    rows = replaced(SCHWARZSCHILD_TEXTBOOK, 11, r"\frac{96M^2}{r^6}")
    verdicts, _ = outcomes(schwarzschild, rows)
    assert verdicts[11].outcome == DIFFERS and "extra factor of 2" in verdicts[11].diagnosis


def test_swapped_indices_are_named(schwarzschild):
    # Gamma^theta_rtheta claimed with the value of Gamma^r_thetatheta.
    rows = SCHWARZSCHILD_TEXTBOOK + [("christoffel", "theta,r,theta", "plain", "2*M - r")]
    verdicts, _ = outcomes(schwarzschild, rows)
    assert verdicts[-1].outcome == DIFFERS
    assert "swapped indices" in verdicts[-1].diagnosis and "r,theta,theta" in verdicts[-1].diagnosis


def test_opposite_riemann_convention_is_named(schwarzschild):
    # Every Riemann component with the opposite overall sign: another sign convention.
    rows = [("riemann", "t,r,t,r", "latex", r"-\frac{2M}{r^2(r-2M)}"),
            ("riemann", "theta,phi,theta,phi", "latex", r"-\frac{2M\sin^2\theta}{r}")]
    verdicts, _ = outcomes(schwarzschild, rows)
    for v in verdicts:
        assert v.outcome == DIFFERS and "sign convention for the Riemann tensor" in v.diagnosis


def test_ricci_contracted_on_the_other_index_is_named():
    # Flat expanding universe: R_tt = -3 a''/a (Carroll, sec. 8.3, from memory); contracting R^a_bda instead
    # of R^a_bad gives +3 a''/a.
    d = example_derivation("expanding_dust_universe")
    verdicts, _ = outcomes(d, [("ricci", "t,t", "latex", r"\frac{3\ddot a}{a}")])
    assert verdicts[0].outcome == DIFFERS
    assert "last index" in verdicts[0].diagnosis


def test_earliest_wrong_claim_along_the_chain(schwarzschild):
    # A wrong Christoffel symbol and a wrong Riemann component that is built from it:
    # the Christoffel symbol is where the calculation first went wrong.
    rows = replaced(SCHWARZSCHILD_TEXTBOOK, 0, r"\frac{2M}{r(r-2M)}")        # Gamma^t_tr doubled
    rows = replaced(rows, 7, r"\frac{M}{r^2(r-2M)}")                           # R^t_rtr off as a consequence
    verdicts, earliest = outcomes(schwarzschild, rows)
    assert {v.claim.number for v in verdicts if v.outcome == DIFFERS} == {1, 8}
    assert earliest == [1]


@pytest.mark.slow
def test_claims_of_the_rotating_black_hole(tmp_path):
    # Kerr: Ricci-flat (Kerr 1963), Gamma^r_tt = M Delta (r^2 - a^2 cos^2 theta) / Sigma^3
    # (Chandrasekhar, The Mathematical Theory of Black Holes, ch. 6, from memory).
    d = example_derivation("spinning_black_hole")
    rows = [("christoffel", "r,t,t", "latex", r"\frac{M\Delta(r^2-\alpha^2\cos^2\theta)}{\Sigma^3}"),
            ("scalar", "", "plain", "0"),
            ("ricci", "phi,phi", "plain", "0")]
    verdicts, _ = outcomes(d, rows)
    assert [v.outcome for v in verdicts] == [AGREES] * 3


def test_undecided_claims_say_why(monkeypatch):
    # When neither simplify() nor the identity rewrites show a difference is zero, the verdict is "cannot be
    # decided" with numeric evidence.  sqrt(1 + 2H + 2 sqrt(2H)) = 1 + sqrt(2H) for H > 0 (common practice:
    # square the right-hand side), a nested root no rewrite of stepper's denests.
    import sympy
    d = example_derivation("inflating_universe")
    monkeypatch.setattr(sympy, "simplify", lambda expr, *a, **k: expr)
    rows = [("scalar", "", "plain", "12*H^2 + sqrt(1 + 2*H + 2*sqrt(2*H)) - sqrt(2*H) - 1")]
    verdicts, _ = outcomes(d, rows)
    assert verdicts[0].outcome == UNDECIDED
    assert "not proven symbolically" in verdicts[0].evidence
    assert "identity rewrites" in verdicts[0].evidence


def test_compound_angles_settle_without_simplify(monkeypatch):
    # sin^2 x + cos^2 x = 1 for any x, here x = H t (Abramowitz & Stegun 4.3.10, from memory): once
    # "cannot be decided" when simplify() did not find it, now proven by the identity rewrites.
    import sympy
    d = example_derivation("inflating_universe")
    monkeypatch.setattr(sympy, "simplify", lambda expr, *a, **k: expr)
    rows = [("scalar", "", "plain", "12*H^2 + sin(H*t)^2 + cos(H*t)^2 - 1")]
    verdicts, _ = outcomes(d, rows)
    assert verdicts[0].outcome == AGREES


def test_example_claims_file_shows_every_verdict_kind_and_is_recorded():
    metric, title, claims = load_claims(EXAMPLES / "claims" / "seminar_notes.toml")
    d = derive(metric)
    verdicts, earliest = audit(d, claims)
    d = record_audit(d, title, verdicts, earliest)
    seen = {v.outcome for v in verdicts}
    assert {AGREES, DIFFERS, UNDECIDED, UNREADABLE} <= seen
    by_label = {v.claim.label: v.outcome for v in verdicts}
    # cot(theta) = (1/2)(cot(theta/2) - tan(theta/2)) (Abramowitz & Stegun 4.3.20 and 4.3.24, from memory);
    # Gamma^phi_theta phi = cot(theta) (Carroll, Spacetime and Geometry, sec. 5.2, from memory).
    assert by_label["notes p. 7, a half-angle form from an old table"] == AGREES
    assert by_label["notes p. 8, a nested root copied from a table"] == UNDECIDED
    data = json.loads(trace_json(d))
    assert data["results"]["audit"]["all_agree"] is False
    assert data["results"]["audit"]["earliest_wrong"] == earliest
    assert any(s["kind"] == "claim" for s in data["steps"])
    unreadable = [v for v in verdicts if v.outcome == UNREADABLE][0]
    assert "column" in unreadable.evidence and "\n" not in unreadable.evidence


def run(args, cwd):
    return subprocess.run([sys.executable, "-m", "stepper", *args], cwd=cwd, capture_output=True, text=True,
                          timeout=600)


@pytest.mark.slow
def test_audit_command_exit_status_and_outputs(tmp_path):
    proc = run(["audit", str(EXAMPLES / "claims" / "seminar_notes.toml"), "-o", str(tmp_path / "a"),
                "--formats", "trace,tex,notebook"], tmp_path)
    assert proc.returncode == 1, proc.stderr  # some claims differ
    assert "earliest wrong claim" in proc.stdout and "sign flip" in proc.stdout
    tex = (tmp_path / "a" / "report.tex").read_text()
    assert r"\section{Audit:" in tex and r"\hyperlink{step" in tex.split(r"\section{Audit:")[1]
    notebook = (tmp_path / "a" / "derivation.ipynb").read_text()
    assert "claim_agrees = vanishes(claimed - derived)" in notebook

    good = tmp_path / "good.toml"
    good.write_text(f'metric = "{EXAMPLES / "compact_star_exterior.toml"}"\n'
                    '[[claim]]\nquantity = "christoffel"\ncomponent = "r,t,t"\nlatex = \'\\frac{M(r-2M)}{r^3}\'\n')
    ok = run(["audit", str(good), "-o", str(tmp_path / "b"), "--formats", "trace"], tmp_path)
    assert ok.returncode == 0, ok.stderr
    assert "1 of 1 claims agree" in ok.stdout


@pytest.mark.parametrize("text, needle", [
    ('metric = "nowhere.toml"\n[[claim]]\nquantity = "scalar"\nvalue = "0"\n', "no such file"),
    ('[[claim]]\nquantity = "scalar"\nvalue = "0"\n', "must name its metric file"),
    ('metric = "M.toml"\n[[claim]]\nquantity = "torsion"\nvalue = "0"\n', "quantity must be one of"),
    ('metric = "M.toml"\n[[claim]]\nquantity = "ricci"\ncomponent = "t"\nvalue = "0"\n', "needs 2 coordinate"),
    ('metric = "M.toml"\n[[claim]]\nquantity = "ricci"\ncomponent = "t,q"\nvalue = "0"\n', "not a coordinate"),
    ('metric = "M.toml"\n[[claim]]\nquantity = "scalar"\nvalue = "0"\nlatex = "0"\n', "exactly one of"),
    ('metric = "M.toml"\n', "has no claims"),
    ('metric = "M.toml"\n[[claim]\n', "not valid TOML"),
])
@pytest.mark.slow
def test_bad_claims_files_are_one_line_errors(tmp_path, text, needle):
    (tmp_path / "M.toml").write_text((EXAMPLES / "compact_star_exterior.toml").read_text())
    (tmp_path / "claims.toml").write_text(text)
    proc = run(["audit", "claims.toml", "-o", "out"], tmp_path)
    assert proc.returncode == 2
    assert proc.stderr.startswith("stepper: error:") and proc.stderr.count("\n") == 1
    assert needle in proc.stderr and "Traceback" not in proc.stderr
    assert not (tmp_path / "out").exists()


@pytest.mark.slow
def test_hostile_claims_run_nothing(tmp_path):
    (tmp_path / "M.toml").write_text((EXAMPLES / "compact_star_exterior.toml").read_text())
    (tmp_path / "claims.toml").write_text(
        'metric = "M.toml"\ntitle = "\\\\input{/etc/passwd}"\n'
        '[[claim]]\nquantity = "scalar"\nvalue = "__import__(\'os\').system(\'touch pwned\')"\n'
        '[[claim]]\nquantity = "scalar"\nlatex = \'\\write18{touch pwned2}\'\nlabel = "\\\\write18{x}"\n')
    proc = run(["audit", "claims.toml", "-o", "out", "--formats", "trace,tex"], tmp_path)
    assert proc.returncode == 1
    assert not (tmp_path / "pwned").exists() and not (tmp_path / "pwned2").exists()
    assert proc.stdout.count("unreadable") == 2
    tex = (tmp_path / "out" / "report.tex").read_text()
    assert r"\input{/etc/passwd}" not in tex and r"\write18{" not in tex


def test_claims_about_quantities_not_computed_cannot_be_decided():
    # Found in review: with --skip-invariants a Kretschmann claim must not be judged against 0.
    # Source: Carroll, Spacetime and Geometry, sec. 5.7 (from memory): K = 48 M^2 / r^6.
    d = derive(load_metric(EXAMPLES / "compact_star_exterior.toml"), curvature_invariants=False)
    verdicts, _ = outcomes(d, [("kretschmann", "", "latex", r"\frac{48M^2}{r^6}"),
                               ("weyl", "t,r,t,r", "plain", "0")])
    assert [v.outcome for v in verdicts] == [UNDECIDED, UNDECIDED]
    assert all("did not compute" in v.evidence for v in verdicts)


def test_field_representation_is_canonical_after_trigonometric_rewriting():
    # (cos/(1 - sin)) (cos/(1 + sin)) = cos^2/(1 - sin^2) = 1 (common practice).
    import sympy as sp
    from stepper.algebra import FieldArithmetic
    theta = sp.Symbol("theta", real=True)
    field = FieldArithmetic([theta], [sp.sin(theta)])
    c, s = field.from_expr(sp.cos(theta)), field.from_expr(sp.sin(theta))
    assert (c / (1 - s)) * (c / (1 + s)) == field.one


def test_nonpositive_symbols_are_sampled_with_their_sign():
    import random
    import sympy as sp
    from stepper.algebra import _sample_value
    q = sp.Symbol("q", real=True, nonpositive=True)
    rng = random.Random(3)
    assert all(_sample_value(q, rng) < 0 for _ in range(50))
