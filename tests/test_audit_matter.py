"""Auditing claims about the matter, the geodesic equations and the solution of an ansatz.

Published values serve as the 'hand calculation', once copied right and once with a typical slip.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from conftest import example_derivation
from stepper import derive, load_metric
from stepper.audit import AGREES, DIFFERS, UNDECIDED, UNREADABLE, audit, record_audit
from stepper.claims import claim_vocabulary, load_claims, read_claim
from stepper.errors import InputError
from stepper.trace import trace_json

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"
HAVE_TEX = shutil.which("pdflatex") is not None


@pytest.fixture(scope="module")
def wormhole():
    return example_derivation("wormhole_passage")


@pytest.fixture(scope="module")
def static_universe():
    return example_derivation("closed_static_universe")


@pytest.fixture(scope="module")
def schwarzschild():
    return example_derivation("compact_star_exterior")


@pytest.fixture(scope="module")
def ansatz():
    return example_derivation("exterior_from_ansatz")


def check(derivation, rows, constants=()):
    """Audit rows of (quantity, component, syntax, text); returns the verdicts and the earliest wrong claims."""
    claims = []
    for number, (quantity, component, syntax, text) in enumerate(rows, start=1):
        entry = {"quantity": quantity, ("value" if syntax == "plain" else "latex"): text}
        if component:
            entry["component"] = component
        claims.append(read_claim(number, entry, derivation.metric, None, tuple(constants)))
    return audit(derivation, claims)


# Morris & Thorne, Am. J. Phys. 56, 395 (1988), eq. (14) (from memory): with no redshift (Phi = 0)
# rho = b'/(8 pi r^2), tension tau = b/(8 pi r^3) (radial pressure -tau), lateral pressure
# p = (r/2)(-tau') - tau; for the shape function b = b0^2/r of examples/wormhole_passage.toml:
WORMHOLE_MORRIS_THORNE = [
    ("energy_density", "", "latex", r"-\frac{b_0^2}{8\pi r^4}"),
    ("pressure", "r", "plain", "-b0^2/(8*pi*r^4)"),
    ("pressure", "theta", "latex", r"\frac{b_0^2}{8\pi r^4}"),
    ("pressure", "phi", "plain", "b0^2/(8*pi*r^4)"),
]


def test_wormhole_density_and_pressures_of_morris_and_thorne_agree(wormhole):
    verdicts, earliest = check(wormhole, WORMHOLE_MORRIS_THORNE)
    assert [v.outcome for v in verdicts] == [AGREES] * 4
    assert earliest == []
    assert all(v.checked_against == "density_and_pressures" for v in verdicts)


def test_stress_energy_in_every_index_position_agrees(wormhole):
    # T_tt = rho for static observers with g_tt = -1; T^t_t = -rho; T^rr = (g^rr)^2 T_rr and
    # T_(r)(r) = p_r (common practice, from the values of Morris & Thorne above).
    rows = [("stress_energy", "t,t", "plain", "-b0^2/(8*pi*r^4)"),
            ("stress_energy_mixed", "t,t", "plain", "b0^2/(8*pi*r^4)"),
            ("stress_energy_mixed", "r,r", "plain", "-b0^2/(8*pi*r^4)"),
            ("stress_energy_up", "r,r", "plain", "-b0^2*(1 - b0^2/r^2)/(8*pi*r^4)"),
            ("frame_stress_energy", "r,r", "plain", "-b0^2/(8*pi*r^4)"),
            ("stress_energy", "t,r", "plain", "0")]
    verdicts, _ = check(wormhole, rows)
    assert [v.outcome for v in verdicts] == [AGREES] * len(rows)
    assert verdicts[0].checked_against == "stress_energy/t,t"
    assert verdicts[1].checked_against == "stress_energy_mixed"


def test_stress_energy_equal_to_the_einstein_tensor_is_named_as_a_missing_8_pi(wormhole):
    # Forgetting kappa = 8 pi: the claim is G_tt = -b0^2/r^4 (the value of Morris & Thorne times 8 pi).
    verdicts, _ = check(wormhole, [("stress_energy", "t,t", "latex", r"-\frac{b_0^2}{r^4}"),
                                   ("energy_density", "", "plain", "-b0^2/r^4")])
    for v in verdicts:
        assert v.outcome == DIFFERS
        assert "missing 1/(8 pi)" in v.diagnosis and "Einstein tensor component" in v.diagnosis


def test_pressure_sign_flip_and_factor_two_are_named(wormhole):
    # Morris & Thorne's radial tension tau = b0^2/(8 pi r^4) written as the radial pressure: a sign flip.
    verdicts, _ = check(wormhole, [("pressure", "r", "plain", "b0^2/(8*pi*r^4)"),
                                   ("pressure", "theta", "plain", "b0^2/(4*pi*r^4)"),
                                   ("energy_density", "", "plain", "b0^2/(8*pi*r^4)")])
    assert "sign flip" in verdicts[0].diagnosis and "tension" in verdicts[0].diagnosis
    assert "extra factor of 2" in verdicts[1].diagnosis
    assert "T^t_t" in verdicts[2].diagnosis  # rho read off T^t_t = -rho


def test_pressure_of_another_direction_is_named(wormhole):
    verdicts, _ = check(wormhole, [("pressure", "theta", "plain", "-b0^2/(8*pi*r^4)")])
    # -b0^2/(8 pi r^4) is the radial pressure (and minus the lateral one): the sign flip is found first.
    assert verdicts[0].outcome == DIFFERS and "sign flip" in verdicts[0].diagnosis


def test_einstein_static_universe_density_pressure_and_lambda_slips(static_universe):
    # Einstein's static universe (Carroll, Spacetime and Geometry, sec. 8.3, from memory): with
    # G + Lambda g = 8 pi T and a closed 3-sphere of radius a, 8 pi rho = 3/a^2 - Lambda and
    # 8 pi p = Lambda - 1/a^2.
    rows = [("energy_density", "", "plain", "(3/a^2 - Lambda)/(8*pi)"),
            ("pressure", "chi", "latex", r"\frac{\Lambda - 1/a^2}{8\pi}"),
            ("stress_energy", "t,t", "plain", "3/a^2"),                  # G_tt: 1/(8 pi) and Lambda lost
            ("stress_energy", "t,t", "plain", "3/(8*pi*a^2)"),           # the Lambda term lost
            ("pressure", "theta", "plain", "Lambda - 1/a^2"),            # 8 pi p: 1/(8 pi) lost
            ("stress_energy_mixed", "t,t", "plain", "(3/a^2 - Lambda)/(8*pi)")]  # T^t_t = -rho: sign
    verdicts, _ = check(static_universe, rows)
    assert [v.outcome for v in verdicts] == [AGREES, AGREES, DIFFERS, DIFFERS, DIFFERS, DIFFERS]
    assert "Einstein tensor component" in verdicts[2].diagnosis and "Lambda" in verdicts[2].diagnosis
    assert "cosmological-constant term is missing" in verdicts[3].diagnosis
    assert "missing 1/(8 pi)" in verdicts[4].diagnosis
    assert "sign flip" in verdicts[5].diagnosis


def test_frame_ricci_of_the_wormhole(wormhole):
    # R_(r)(r) = -2 b0^2/r^4: from R_rr = -2 b0^2/(r^2 (r^2 - b0^2)) (the Ricci-flat verdict of this
    # derivation) and g_rr = r^2/(r^2 - b0^2) (common practice: divide by g_rr).
    verdicts, _ = check(wormhole, [("frame_ricci", "r,r", "plain", "-2*b0^2/r^4"),
                                   ("frame_ricci", "t,t", "plain", "0"),
                                   ("frame_ricci", "r,r", "plain", "2*b0^2/r^4")])
    assert [v.outcome for v in verdicts] == [AGREES, AGREES, DIFFERS]
    assert "sign flip" in verdicts[2].diagnosis


def test_geodesic_accelerations_of_schwarzschild(schwarzschild):
    # du^t/dtau = -2 Gamma^t_tr u^t u^r with Gamma^t_tr = M/(r(r - 2M)) (Carroll, sec. 5.4, from memory);
    # du^theta/dtau = sin cos u_phi^2 - (2/r) u_r u_theta (flat-space spherical coordinates, common practice).
    rows = [("geodesic_acceleration", "t", "plain", "-2*M*u_t*u_r/(r*(r - 2*M))"),
            ("geodesic_acceleration", "theta", "latex", r"\sin\theta\cos\theta\, u_\phi^2 - \frac{2}{r}u_r u_\theta"),
            ("geodesic_acceleration", "t", "plain", "-M*u_t*u_r/(r*(r - 2*M))"),   # cross term counted once
            ("geodesic_acceleration", "t", "plain", "2*M*u_t*u_r/(r*(r - 2*M))")]  # the minus sign lost
    verdicts, _ = check(schwarzschild, rows)
    assert [v.outcome for v in verdicts] == [AGREES, AGREES, DIFFERS, DIFFERS]
    assert "counted once" in verdicts[2].diagnosis
    assert "sign flip" in verdicts[3].diagnosis and "minus sign" in verdicts[3].diagnosis
    assert all(v.checked_against == "geodesic_equations" for v in verdicts)


def test_velocity_symbols_belong_to_geodesic_claims_only(schwarzschild):
    m = schwarzschild.metric
    assert "u_r" in claim_vocabulary(m, "geodesic_acceleration").symbols
    assert "u_r" not in claim_vocabulary(m, "christoffel").symbols
    claim = read_claim(1, {"quantity": "christoffel", "component": "r,t,t", "value": "u_r"}, m)
    assert claim.expr is None and "u_r" in claim.problem


def test_ansatz_solution_agrees_for_some_constants_the_same_for_every_claim(ansatz):
    # Schwarzschild exterior (Birkhoff; Carroll, sec. 5.2, from memory): A = 1 - 2M/r, B = 1/(1 - 2M/r).
    # stepper's general solution B = r/(C1 + r), A = C2 (1 + C1/r) gives it with C1 = -2M, C2 = 1.
    rows = [("ansatz_solution", "B", "plain", "1/(1 - 2*M/r)"),
            ("ansatz_solution", "A", "latex", r"1-\frac{2M}{r}")]
    verdicts, earliest = check(ansatz, rows, constants=["M"])
    assert [v.outcome for v in verdicts] == [AGREES, AGREES]
    assert "C1 = -2*M" in verdicts[0].evidence and "C2 = 1" in verdicts[1].evidence
    assert verdicts[0].checked_against.startswith("ansatz/solve/")
    # The same constants for both claims: A = 1 + 2M/r would need C1 = 2M, against claim 1.
    rows[1] = ("ansatz_solution", "A", "plain", "1 + 2*M/r")
    verdicts, earliest = check(ansatz, rows, constants=["M"])
    assert [v.outcome for v in verdicts] == [AGREES, DIFFERS]
    assert "contradict an earlier claim" in verdicts[1].diagnosis
    assert earliest == [2]


def test_ansatz_solution_in_stepper_constants_and_a_wrong_one(ansatz):
    rows = [("ansatz_solution", "B", "plain", "r/(r + C1)"),
            ("ansatz_solution", "A", "plain", "C2*(r - C1)/r")]   # the sign of C1 slipped
    verdicts, _ = check(ansatz, rows)
    assert [v.outcome for v in verdicts] == [AGREES, DIFFERS]
    assert "does not solve the equation" in verdicts[1].diagnosis


def test_claims_about_quantities_not_computed_say_why(tmp_path):
    # A metric file without [matter] or [ansatz]: nothing to check matter or solutions against.
    text = (EXAMPLES / "expanding_dust_universe.toml").read_text().split("[matter]")[0]
    (tmp_path / "flat.toml").write_text(text)
    d = derive(load_metric(tmp_path / "flat.toml"))
    verdicts, earliest = check(d, [("energy_density", "", "plain", "0"),
                                   ("stress_energy", "t,t", "plain", "0"),
                                   ("ansatz_solution", "a", "plain", "t^(2/3)")])
    assert [v.outcome for v in verdicts] == [UNDECIDED] * 3
    assert "[matter]" in verdicts[0].evidence and "[matter]" in verdicts[1].evidence
    assert "[ansatz]" in verdicts[2].evidence
    assert earliest == []


def test_claims_about_a_frame_that_was_not_built_say_why(tmp_path):
    # Null coordinates u, v: the hypersurfaces u = const are null, so there are no observers at rest on them
    # (common practice).  The wave is a pp-wave ds^2 = -H du^2 - 2 du dv + dx^2 + dy^2 with H = -x^2, whose
    # only curvature is R_uu = (1/2)(d_x^2 + d_y^2) H = -1, so T_uu = -1/(8 pi) (from memory).
    (tmp_path / "wave.toml").write_text('title = "wave"\ncoordinates = ["u", "v", "x", "y"]\n'
                                        'line_element = "-2*du*dv + x^2*du^2 + dx^2 + dy^2"\n'
                                        '[matter]\ntime = "u"\n')
    d = derive(load_metric(tmp_path / "wave.toml"))
    verdicts, _ = check(d, [("energy_density", "", "plain", "0"), ("frame_stress_energy", "v,v", "plain", "0"),
                            ("stress_energy", "u,u", "plain", "-1/(8*pi)")])
    assert [v.outcome for v in verdicts] == [UNDECIDED, UNDECIDED, AGREES]
    assert "null" in verdicts[0].evidence


def test_earliest_wrong_claim_follows_the_components_the_matter_is_built_from(wormhole):
    # G_rr wrong (sign), then T^rr built from it: G_rr is where it went wrong.  A wrong lateral
    # pressure and a wrong T_tt depend on neither (they are built from G_thetatheta and G_tt).
    rows = [("einstein", "r,r", "plain", "b0^2/(r^2*(r^2 - b0^2))"),
            ("stress_energy_up", "r,r", "plain", "b0^2*(r^2 - b0^2)/(8*pi*r^6)"),
            ("pressure", "theta", "plain", "-b0^2/(8*pi*r^4)"),
            ("stress_energy", "t,t", "plain", "-b0^2/r^4"),
            ("energy_density", "", "plain", "-b0^2/r^4"),
            ("geodesic_acceleration", "phi", "plain", "-u_phi*u_theta*cos(theta)/sin(theta) - u_r*u_phi/r")]
    verdicts, earliest = check(wormhole, rows)
    assert [v.outcome for v in verdicts] == [DIFFERS] * 6
    assert earliest == [1, 3, 4, 6]  # claim 2 follows from claim 1, claim 5 (rho = T_tt here) from claim 4


def test_a_wrong_christoffel_symbol_comes_before_the_geodesic_equation_it_enters(schwarzschild):
    rows = [("christoffel", "t,t,r", "plain", "2*M/(r*(r - 2*M))"),
            ("geodesic_acceleration", "t", "plain", "-4*M*u_t*u_r/(r*(r - 2*M))"),
            ("geodesic_acceleration", "theta", "plain", "0")]
    verdicts, earliest = check(schwarzschild, rows)
    assert [v.outcome for v in verdicts] == [DIFFERS] * 3
    assert earliest == [1, 3]  # du^theta/dtau does not use Gamma^t_tr


@pytest.mark.parametrize("entry, needle", [
    ({"quantity": "pressure", "component": "t", "value": "0"}, "spatial frame direction"),
    ({"quantity": "ansatz_solution", "component": "r", "value": "0"}, "not a declared function"),
    ({"quantity": "frame_stress_energy", "component": "t", "value": "0"}, "needs 2 coordinate"),
])
def test_claims_of_the_new_quantities_check_their_components(wormhole, entry, needle):
    with pytest.raises(InputError) as info:
        read_claim(1, entry, wormhole.metric)
    assert needle in info.value.message


def test_constants_key_of_a_claims_file(tmp_path):
    (tmp_path / "m.toml").write_text((EXAMPLES / "exterior_from_ansatz.toml").read_text())
    (tmp_path / "c.toml").write_text('metric = "m.toml"\nconstants = ["M"]\n[[claim]]\nquantity = "ansatz_solution"\n'
                                     'component = "B"\nvalue = "1/(1 - 2*M/r)"\n')
    metric, _, claims = load_claims(tmp_path / "c.toml")
    assert claims[0].expr is not None
    (tmp_path / "d.toml").write_text('metric = "m.toml"\nconstants = ["r"]\n[[claim]]\nquantity = "scalar"\nvalue = "0"\n')
    with pytest.raises(InputError) as info:
        load_claims(tmp_path / "d.toml")
    assert "already declared" in info.value.message


def test_example_homework_file_has_right_and_wrong_claims_of_the_new_kinds():
    metric, title, claims = load_claims(EXAMPLES / "claims" / "wormhole_homework.toml")
    d = derive(metric)
    verdicts, earliest = audit(d, claims)
    d = record_audit(d, title, verdicts, earliest)
    outcome = {v.claim.quantity: set() for v in verdicts}
    for v in verdicts:
        outcome[v.claim.quantity].add(v.outcome)
    new_kinds = {"energy_density", "pressure", "stress_energy", "frame_stress_energy", "stress_energy_mixed",
                 "stress_energy_up", "frame_ricci", "geodesic_acceleration"}
    assert new_kinds <= set(outcome)
    assert any(AGREES in outcome[k] for k in new_kinds) and any(DIFFERS in outcome[k] for k in new_kinds)
    assert UNREADABLE not in {v.outcome for v in verdicts}
    data = json.loads(trace_json(d))
    assert data["results"]["audit"]["earliest_wrong"] == earliest and earliest


@pytest.mark.slow  # builds the whole report
@pytest.mark.skipif(not HAVE_TEX, reason="pdflatex is not installed")
def test_audit_section_typesets_the_new_quantities():
    import re
    from stepper.exporters import PdfExporter, ReportExporter
    metric, title, claims = load_claims(EXAMPLES / "claims" / "wormhole_homework.toml")
    d = derive(metric)
    verdicts, earliest = audit(d, claims)
    d = record_audit(d, title, verdicts, earliest)
    tex = ReportExporter().export(d)
    section = tex.split(r"\section{Audit:")[1].split(r"\section{Checks")[0]
    for symbol in (r"\(\rho\)", r"\(p_{(\theta)}\)", r"\(T_{{t}{t}}\)", r"\(\frac{du^{\phi}}{d\tau}\)",
                   r"\(T^{{r}}{}_{{r}}\)", r"\(R_{{(r)}{(r)}}\)"):
        assert symbol in section, symbol
    assert r"a missing \(1/(8\pi)\)" in section  # the slip typeset from its data (tests/test_audit_typeset.py)
    exporter = PdfExporter()
    assert exporter.export(d).startswith(b"%PDF-")
    assert [w for w in re.findall(r"Overfull \\hbox \(([0-9.]+)pt too wide\)", exporter.log) if float(w) > 1] == []
