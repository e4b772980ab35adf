"""Matter declared with ``[matter.model]``: its stress-energy, the field equations it makes, the conservation
law, and, for the two everyday shapes, the equations in their textbook form.

Conventions (recorded in every step that uses them):

* Perfect fluid T_ab = (rho + p) u_a u_b + p g_ab with g_ab u^a u^b = -1; by default the fluid is at rest along
  the time coordinate, u^a = delta^a_t / sqrt(-g_tt), so that u_a u_b = g_at g_bt / (-g_tt).  Dust: p = 0.
* Scalar field T_ab = d_a phi d_b phi - g_ab (1/2 g^cd d_c phi d_d phi + V(phi)).
* Electromagnetic field, geometric Gaussian units: F_ab = d_a A_b - d_b A_a,
  T_ab = (1/(4 pi)) (F_ac F_b^c - 1/4 g_ab F_cd F^cd).
* Field equations E_ab = G_ab + Lambda g_ab - kappa T_ab = 0, reduced, de-duplicated and sorted as
  stepper/ansatz.py does for an ansatz (the unknowns are every free function of the metric and the model).
* Conservation nabla_a T^a_b = d_a T^a_b + Gamma^a_ac T^c_b - Gamma^c_ab T^a_c = 0, component by component.
  The contracted Bianchi identity nabla^a (G_ab + Lambda g_ab) = 0 makes it a consequence of the field
  equations, nabla^a E_ab = -kappa nabla^a T_ab; so where a component of that identity contains an equation
  only undifferentiated, with a coefficient that is not zero, that equation follows from the others and
  the conservation law.
* Static star (diagonal, -g_tt and g_rr functions of r, angular part r^2 dOmega^2): the redshift function
  Phi(r) with -g_tt = e^{2 Phi} and the mass function m(r) with g_rr = (1 - 2m/r)^{-1} (2Gm/(c^2 r) in
  physical units) give dm/dr, dPhi/dr, dp/dr = -(rho + p) dPhi/dr and, combined, the
  Tolman-Oppenheimer-Volkoff equation.
* Homogeneous universe (g_tt = -1, spatial part a(t)^2 times a metric free of t): the Friedmann equation for
  (a'/a)^2, the acceleration equation for a''/a (with (a'/a)^2 put in) and the continuity equation for rho'.
"""

from __future__ import annotations

import sympy
from sympy.core.function import AppliedUndef

from .algebra import printer_stable
from .ansatz import _Ansatz
from .record import AnsatzRequest, MatterModel, MatterRequest

FORMULAS = {
    "perfect fluid": r"T_{ab} = ({\rho} + p)\, u_a u_b + p\, g_{ab},\qquad g_{ab} u^a u^b = -1",
    "dust": r"T_{ab} = {\rho}\, u_a u_b,\qquad g_{ab} u^a u^b = -1",
    "scalar field": (r"T_{ab} = \partial_a\phi\,\partial_b\phi - g_{ab}\left(\tfrac12\, g^{cd}\,\partial_c\phi\,"
                     r"\partial_d\phi + V(\phi)\right)"),
    "electromagnetic field": (r"T_{ab} = \frac{1}{4\pi}\left(F_{ac} F_b{}^c - \tfrac14\, g_{ab}\, F_{cd} F^{cd}\right),"
                              r"\qquad F_{ab} = \partial_a A_b - \partial_b A_a"),
    "equations": r"E_{ab} \equiv G_{ab} + \Lambda g_{ab} - \kappa T_{ab} = 0",
    "conservation": r"\nabla_a T^a{}_b = \partial_a T^a{}_b + \Gamma^a_{ac} T^c{}_b - \Gamma^c_{ab} T^a{}_c = 0",
    "static star": (r"-g_{tt} = e^{2\Phi},\quad g_{rr} = \Bigl(1 - \frac{2m}{r}\Bigr)^{-1}"),
    "homogeneous universe": r"g_{tt} = -1,\quad g_{ij} = a(t)^2\, h_{ij}(x)",
}

CONVENTIONS = {
    "perfect fluid": ("T_ab = (rho + p) u_a u_b + p g_ab, g_ab u^a u^b = -1; by default u^a = delta^a_t / sqrt(-g_tt), "
                      "the observer at rest along the time coordinate"),
    "dust": "T_ab = rho u_a u_b, g_ab u^a u^b = -1; by default u^a = delta^a_t / sqrt(-g_tt)",
    "scalar field": "T_ab = d_a phi d_b phi - g_ab (1/2 g^cd d_c phi d_d phi + V(phi))",
    "electromagnetic field": ("geometric Gaussian units: F_ab = d_a A_b - d_b A_a, "
                              "T_ab = (1/(4 pi)) (F_ac F_b^c - 1/4 g_ab F_cd F^cd)"),
}

STAGE = "model"


def record_model(chain, request: MatterRequest) -> None:
    """Record the model's stress-energy, its field equations, the conservation law and the solved forms."""
    if request.model is None:
        return
    previous = chain.stage
    chain.stage = STAGE
    try:
        _Model(chain, request).run()
    finally:
        chain.stage = previous


def _tidy(expr: sympy.Expr) -> sympy.Expr:
    return printer_stable(sympy.factor(sympy.cancel(sympy.together(expr))))


class _Model:
    def __init__(self, chain, request: MatterRequest):
        self.c = chain
        self.n = chain.n
        self.x = list(chain.x)
        self.request = request
        self.model: MatterModel = request.model
        self.lam = request.cosmological_constant
        self.kappa = request.kappa
        self.t = self.x.index(request.time)
        self.g = chain.metric.matrix
        n = self.n
        self.ginv = [[chain.expr(chain.ginv[i][j]) for j in range(n)] for i in range(n)]
        self.gamma = [[[chain.expr(chain.gamma[a][b][d]) for d in range(n)] for b in range(n)] for a in range(n)]
        model_functions = set()
        for e in (self.model.density, self.model.pressure, self.model.field, self.model.potential,
                  *self.model.velocity, *self.model.vector_potential):
            if e is not None:
                model_functions |= e.atoms(AppliedUndef)
        unknowns = tuple(dict.fromkeys(list(chain.metric.functions) + sorted(model_functions, key=str)))
        self.unknowns = unknowns
        self.helper = _Ansatz(chain, AnsatzRequest(unknowns=unknowns, cosmological_constant=self.lam))

    def key(self, i: int, j: int) -> str:
        return self.c.key(i, j)

    def run(self) -> None:
        self.stress_energy()
        self.c.check_time("the field equations of the matter model")
        self.equations()
        self.conservation()
        self.c.check_time("the solved form of the matter model's equations")
        self.solved_forms()

    # 1. T_ab of the model ------------------------------------------------------------
    def stress_energy(self) -> None:
        m, n, g, ginv = self.model, self.n, self.g, self.ginv
        x = self.x
        params: dict = {"model": m.kind, "convention": CONVENTIONS[m.kind]}
        if m.kind in ("perfect fluid", "dust"):
            rho = m.density
            p = m.pressure if m.kind == "perfect fluid" else sympy.Integer(0)
            if m.velocity:
                u_down = [sum(g[a, b] * m.velocity[b] for b in range(n)) for a in range(n)]
                uu = [[u_down[a] * u_down[b] for b in range(n)] for a in range(n)]
                norm = _tidy(sum(u_down[a] * m.velocity[a] for a in range(n)))
                params["velocity"] = {x[a].name: m.velocity[a] for a in range(n) if m.velocity[a] != 0}
                params["velocity_default"] = False
            else:
                t = self.t
                uu = [[g[a, t] * g[b, t] / (-g[t, t]) for b in range(n)] for a in range(n)]
                norm = sympy.Integer(-1)
                params["velocity"] = {x[t].name: printer_stable(sympy.powdenest(1 / sympy.sqrt(-g[t, t]), force=True))}
                params["velocity_default"] = True
            params["normalisation"] = norm
            self.normalisation = norm
            params["density"], params["pressure"] = rho, p
            T = [[(rho + p) * uu[a][b] + p * g[a, b] for b in range(n)] for a in range(n)]
        elif m.kind == "scalar field":
            phi, V = m.field, m.potential
            d = [sympy.diff(phi, xi) for xi in x]
            square = sum(ginv[a][b] * d[a] * d[b] for a in range(n) for b in range(n))
            T = [[d[a] * d[b] - g[a, b] * (square / 2 + V) for b in range(n)] for a in range(n)]
            params["field"], params["potential"] = phi, V
        else:
            A = m.vector_potential
            F = [[sympy.diff(A[b], x[a]) - sympy.diff(A[a], x[b]) for b in range(n)] for a in range(n)]
            F_mixed = [[sum(F[b][d] * ginv[d][c] for d in range(n)) for c in range(n)] for b in range(n)]  # F_b^c
            F_up = [[sum(ginv[a][c] * F_mixed[c][b] for c in range(n)) for b in range(n)] for a in range(n)]
            square = sum(F[a][b] * F_up[a][b] for a in range(n) for b in range(n))
            T = [[(sum(F[a][c] * F_mixed[b][c] for c in range(n)) - g[a, b] * square / 4) / (4 * sympy.pi)
                  for b in range(n)] for a in range(n)]
            params["vector_potential"] = {x[a].name: A[a] for a in range(n) if A[a] != 0}
            params["field_strength"] = {self.key(a, b): _tidy(F[a][b]) for a in range(n) for b in range(a + 1, n)
                                        if _tidy(F[a][b]) != 0}
            params["invariant"] = _tidy(square)
        self.T = [[_tidy(T[a][b]) for b in range(n)] for a in range(n)]
        result = {self.key(a, b): self.T[a][b] for a in range(n) for b in range(a, n) if self.T[a][b] != 0}
        self.c.results["model"] = {"kind": m.kind}
        self.c.results["model_stress_energy"] = {self.key(a, b): self.T[a][b] for a in range(n) for b in range(n)
                                                 if self.T[a][b] != 0}
        self.c.record(id="model/stress_energy", kind="model", quantity="model_stress_energy",
                      annotation=f"The stress-energy tensor T_ab of the declared {m.kind} ({CONVENTIONS[m.kind]}), "
                                 "components with a <= b; those not listed vanish.",
                      formula=FORMULAS[m.kind], uses=("metric", "inverse_metric"), result=result, params=params)

    # 2. the field equations ------------------------------------------------------------
    def equations(self) -> None:
        c, n, h = self.c, self.n, self.helper
        kappa, lam = self.kappa, self.lam
        self.E = {(i, j): sympy.together(c.expr(c.G[i][j]) + lam * self.g[i, j] - kappa * self.T[i][j])
                  for i in range(n) for j in range(i, n)}
        h.det_factors = det_factors = h.nonvanishing_unknowns()
        self.reduced, dropped, self.duplicates, zero = {}, {}, {}, []
        representatives: list[tuple[int, int]] = []
        for ij, value in self.E.items():
            if sympy.cancel(value) == 0:
                zero.append(self.key(*ij))
                continue
            reduced, removed = h.reduce(value, det_factors)
            for rep in representatives:
                if not h.has_unknowns(sympy.cancel(reduced / self.reduced[rep])):
                    self.duplicates[ij] = (rep, _tidy(value / self.E[rep]))
                    break
            else:
                representatives.append(ij)
                self.reduced[ij], dropped[ij] = reduced, removed
        representatives.sort(key=lambda ij: (h.order_of(self.reduced[ij]), ij))
        self.order = representatives
        eqs = {self.key(*ij): self.reduced[ij] for ij in representatives}
        self.c.results["model"]["equations"] = eqs
        params = {
            "model": self.model.kind,
            "unknowns": [printer_stable(f) for f in self.unknowns],
            "kappa": kappa,
            "cosmological_constant": lam,
            "dropped_factors": {self.key(*ij): dropped[ij] for ij in representatives if dropped[ij]},
            "duplicates": {self.key(*ij): {"of": self.key(*rep), "factor": q}
                           for ij, (rep, q) in self.duplicates.items()},
            "identically_zero": zero,
        }
        c.record(id="model/equations", kind="model", quantity="model_equation", component="equations",
                 annotation="Field equations E_ab = G_ab + Lambda g_ab - kappa T_ab = 0 with the model's T_ab: each "
                            "listed component's numerator with the factors that cannot vanish removed, sorted by the "
                            "order of their derivatives; duplicates and identically vanishing components are named.",
                 formula=FORMULAS["equations"], uses=("einstein", "field_equations", "model/stress_energy"),
                 result=eqs, params=params)

    # 3. the conservation law and the Bianchi identity's role ---------------------------
    def conservation(self) -> None:
        c, n, x, h = self.c, self.n, self.x, self.helper
        T, ginv, gamma = self.T, self.ginv, self.gamma
        mixed = [[sum(ginv[a][d] * T[d][b] for d in range(n)) for b in range(n)] for a in range(n)]
        divergence = {}
        for b in range(n):
            total = sum(sympy.diff(mixed[a][b], x[a]) for a in range(n))
            total += sum(gamma[a][a][d] * mixed[d][b] for a in range(n) for d in range(n))
            total -= sum(gamma[d][a][b] * mixed[a][d] for a in range(n) for d in range(n))
            divergence[b] = _tidy(total)
        self.divergence = divergence
        result = {x[b].name: divergence[b] for b in range(n) if divergence[b] != 0}
        reduced = {}
        for b in range(n):
            if divergence[b] != 0:
                reduced[x[b].name] = h.reduce(divergence[b], h.det_factors)[0]
        follows = self.dependence()
        independent = [self.key(*ij) for ij in self.order if self.key(*ij) not in follows]
        c.results["model_conservation"] = result
        c.results["model"]["independent"] = independent
        c.results["model"]["follows"] = follows
        words = "; ".join(f"E_{k} follows from {', '.join('E_' + o for o in v['from'])}, their derivatives and "
                          f"component {v['bianchi_component']} of the conservation law where {v['coefficient']} is "
                          "not zero" for k, v in follows.items())
        c.record(id="model/conservation", kind="model", quantity="model_conservation",
                 annotation="The conservation law nabla_a T^a_b = 0 for the model's T, component by component (those "
                            "not listed vanish identically). By the contracted Bianchi identity, nabla^a E_ab = "
                            "-kappa nabla_a T^a_b, so the field equations imply it. Independent field equations: "
                            + ", ".join("E_" + k for k in independent) + "." + (f" {words}." if words else ""),
                 formula=FORMULAS["conservation"], uses=("christoffel", "inverse_metric", "model/equations",
                                                         "verdict/bianchi"),
                 result=result, params={"reduced": reduced, "independent": independent, "follows": follows})

    def dependence(self) -> dict:
        """Which equations follow from the others and the conservation law: component b of
        nabla^a E_ab = g^ac (d_c E_ab - Gamma^e_ca E_eb - Gamma^e_cb E_ae) = -kappa nabla_a T^a_b, with each E
        written in terms of its representative."""
        n, x, ginv, gamma = self.n, self.x, self.ginv, self.gamma
        sym = lambda i, j: (min(i, j), max(i, j))
        kept = list(self.order)
        follows = {}
        for b in range(n):
            alg: dict = {}
            der: dict = {}
            for a in range(n):
                for cc in range(n):
                    if ginv[a][cc] == 0:
                        continue
                    der.setdefault(sym(a, b), {}).setdefault(cc, sympy.Integer(0))
                    der[sym(a, b)][cc] += ginv[a][cc]
                    for e in range(n):
                        if gamma[e][cc][a] != 0:
                            alg[sym(e, b)] = alg.get(sym(e, b), 0) - ginv[a][cc] * gamma[e][cc][a]
                        if gamma[e][cc][b] != 0:
                            alg[sym(a, e)] = alg.get(sym(a, e), 0) - ginv[a][cc] * gamma[e][cc][b]
            for ij, (rep, q) in self.duplicates.items():
                a_part = alg.pop(ij, 0)
                d_part = der.pop(ij, {})
                total = a_part * q
                for cc, coefficient in d_part.items():
                    total += coefficient * sympy.diff(q, x[cc])
                    der.setdefault(rep, {})
                    der[rep][cc] = der[rep].get(cc, 0) + coefficient * q
                alg[rep] = alg.get(rep, 0) + total
            alg = {k: _tidy(v) for k, v in alg.items()}
            der = {k: {cc: _tidy(v) for cc, v in d.items()} for k, d in der.items()}
            present = {ij for ij in self.reduced if alg.get(ij, 0) != 0 or any(v != 0 for v in der.get(ij, {}).values())}
            candidates = [ij for ij in kept if ij in present and all(v == 0 for v in der.get(ij, {}).values())]
            candidates.sort(key=lambda ij: (self.helper.order_of(self.reduced[ij]), self.order.index(ij)))
            for ij in reversed(candidates):
                others = present - {ij}
                if others and others <= set(kept) - {ij}:
                    kept.remove(ij)
                    follows[self.key(*ij)] = {
                        "from": sorted(self.key(*o) for o in others),
                        "bianchi_component": x[b].name,
                        "coefficient": alg[ij],
                        "never_vanishes": self.helper.never_vanishes(alg[ij]),
                    }
                    break
        return follows

    # 4. the textbook forms ---------------------------------------------------------------
    def solved_forms(self) -> None:
        m = self.model
        if m.kind not in ("perfect fluid", "dust") or self.n != 4:
            return
        if m.velocity and (any(v != 0 for i, v in enumerate(m.velocity) if i != self.t)
                           or sympy.simplify(self.normalisation + 1) != 0):
            return  # a moving fluid, or a four-velocity that is not normalised: no textbook form
        if any(self.g[i, j] != 0 for i in range(4) for j in range(4) if i != j):
            return
        for shape in (self.static_star, self.homogeneous_universe):
            found = shape()
            if found is not None:
                name, definitions, equations, uses = found
                self.record_solved(name, definitions, equations, uses)
                return

    def fresh(self, *names: str) -> str:
        taken = {s.name for s in self.c.metric.parameters} | {s.name for s in self.x} \
            | {f.func.__name__ for f in self.unknowns} | {name for name, _ in self.c.metric.abbreviations}
        taken |= {s.name for s in self.lam.free_symbols}
        return next(name for name in names if name not in taken)

    def only_function(self, expr: sympy.Expr) -> AppliedUndef | None:
        found = list(expr.atoms(AppliedUndef))
        return found[0] if len(found) == 1 else None

    def static_star(self):
        g, x, t, m = self.g, self.x, self.t, self.model
        rho, p = m.density, m.pressure
        coordinate_set = set(x)
        radial = [i for i in range(4) if i != t and (rho.free_symbols | p.free_symbols) & coordinate_set == {x[i]}]
        if len(radial) != 1 or rho.has(x[t]):
            return None
        r = radial[0]
        R = x[r]
        others = [i for i in range(4) if i not in (t, r)]
        first, second = others
        if sympy.simplify(g[first, first] - R**2) != 0:
            first, second = second, first
        if sympy.simplify(g[first, first] - R**2) != 0 or \
                sympy.simplify(g[second, second] - R**2 * sympy.sin(x[first])**2) != 0:
            return None
        f, h = self.only_function(g[t, t]), self.only_function(g[r, r])
        if f is None or h is None or f == h or f.args != (R,) or h.args != (R,):
            return None
        if (g[t, t].free_symbols | g[r, r].free_symbols) & coordinate_set - {R}:
            return None
        # the metric's own function when -g_tt = e^{2 f} already, else a new redshift function
        Phi = f if sympy.simplify(-g[t, t] - sympy.exp(2 * f)) == 0 else sympy.Function(self.fresh("Phi", "nu", "psi"))(R)
        mass = sympy.Function(self.fresh("m", "mu", "M_r"))(R)
        factor = sympy.Integer(2) if self.request.units == "geometric" else 2 * self.request.newton / self.request.light**2
        f_value = _real_root(-g[t, t] - sympy.exp(2 * Phi), f)
        h_value = _real_root(g[r, r] - 1 / (1 - factor * mass / R), h)
        if f_value is None or h_value is None:
            return None
        definitions = {f: f_value, h: h_value}
        key = self.key
        tt, rr = self.E[(min(t, t), t)], self.E[(r, r)]
        dm, dPhi, dp = sympy.Derivative(mass, R), sympy.Derivative(Phi, R), sympy.Derivative(p, R)
        m_rhs = _solve_linear(_put(tt, definitions), dm)
        Phi_rhs = _solve_linear(_put(rr, definitions), dPhi)
        p_rhs = _solve_linear(_put(self.divergence[r], definitions), dp)
        if None in (m_rhs, Phi_rhs, p_rhs) or p_rhs.has(sympy.Derivative(mass, R)):
            return None
        tov = _tidy(p_rhs.subs(dPhi, Phi_rhs))
        equations = [
            {"name": "mass", "lhs": dm, "rhs": m_rhs, "source": "field equation", "component": key(t, t), "replace": [[dm, m_rhs]]},
            {"name": "redshift", "lhs": dPhi, "rhs": Phi_rhs, "source": "field equation", "component": key(r, r), "replace": [[dPhi, Phi_rhs]]},
            {"name": "conservation", "lhs": dp, "rhs": p_rhs, "source": "conservation", "component": R.name,
             "replace": [[dp, p_rhs]]},
            {"name": "tov", "lhs": dp, "rhs": tov, "source": "conservation", "component": R.name,
             "replace": [[dp, tov], [dPhi, Phi_rhs]]},
        ]
        params = {"radial": R.name, "redshift_function": Phi, "mass_function": mass, "mass_factor": factor}
        return "static star", {"definitions": definitions, **params}, equations, ("model/conservation",)

    def homogeneous_universe(self):
        g, x, t, m = self.g, self.x, self.t, self.model
        T = x[t]
        rho, p = m.density, m.pressure
        if g[t, t] != -1 or ((rho.free_symbols | p.free_symbols) & set(x)) - {T}:
            return None
        spatial = [i for i in range(4) if i != t]
        a = self.only_function(sympy.Mul(*[g[i, i] for i in spatial]))
        if a is None or a.args != (T,):
            return None
        for i in spatial:
            rest = sympy.cancel(g[i, i] / a**2)
            if rest.has(T) or rest.atoms(AppliedUndef):
                return None
        key = self.key
        da, dda, drho = sympy.Derivative(a, T), sympy.Derivative(a, (T, 2)), sympy.Derivative(rho, T)
        # Friedmann: E_tt holds a' only squared; solve for (a'/a)^2
        X = sympy.Dummy("X")
        numerator = sympy.numer(sympy.together(self.E[(t, t)])).subs(da, X)
        if numerator.has(sympy.Derivative):
            return None
        poly = sympy.Poly(sympy.expand(numerator), X)
        if poly.degree() != 2 or poly.coeff_monomial(X) != 0:
            return None
        hubble = printer_stable(sympy.expand(_tidy(-poly.coeff_monomial(1) / poly.coeff_monomial(X**2) / a**2)))
        first = sympy.sqrt(hubble * a**2)
        i = spatial[0]
        acceleration = _solve_linear(self.E[(i, i)], dda)
        if acceleration is None:
            return None
        acceleration = printer_stable(sympy.expand(_tidy(acceleration.subs(da, first) / a)))
        continuity = _solve_linear(self.divergence[t], drho)
        if acceleration.has(sympy.Derivative) or continuity is None:
            return None
        equations = [
            {"name": "friedmann", "lhs": da**2 / a**2, "rhs": hubble, "source": "field equation", "component": key(t, t),
             "replace": [[da, first]]},
            {"name": "acceleration", "lhs": dda / a, "rhs": acceleration, "source": "field equation", "component": key(i, i),
             "replace": [[dda, a * acceleration], [da, first]]},
            {"name": "continuity", "lhs": drho, "rhs": continuity, "source": "conservation", "component": T.name,
             "replace": [[drho, continuity]]},
        ]
        return "homogeneous universe", {"definitions": {}, "scale_factor": a}, equations, ("model/conservation",)

    def record_solved(self, name: str, params: dict, equations: list, uses: tuple) -> None:
        for eq in equations:
            eq["rhs"] = printer_stable(eq["rhs"])
            eq["replace"] = [[printer_stable(old), printer_stable(new)] for old, new in eq["replace"]]
        result = {eq["name"]: {"lhs": eq["lhs"], "rhs": eq["rhs"]} for eq in equations}
        self.c.results["model"]["solved"] = {"shape": name, **result}
        params = {"shape": name, "equations": equations,
                  **{k: (printer_stable(v) if isinstance(v, sympy.Basic) else v) for k, v in params.items()
                     if k != "definitions"},
                  "definitions": [[printer_stable(old), printer_stable(new)]
                                  for old, new in params["definitions"].items()]}
        words = "; ".join(f"{eq['lhs']} = {eq['rhs']} (from the {eq['source']} {eq['component']})" for eq in equations)
        self.c.record(id="model/solved", kind="model", quantity="model_solution", component=name.replace(" ", "_"),
                      annotation=f"The equations of a {name} in their textbook form: {words}.",
                      formula=FORMULAS[name], uses=("model/equations",) + uses, result=result, params=params)


def _put(expr: sympy.Expr, definitions: dict) -> sympy.Expr:
    return sympy.together(expr.subs(definitions).doit())


def _solve_linear(expr: sympy.Expr, unknown: sympy.Expr) -> sympy.Expr | None:
    """expr = 0 solved for unknown when expr is linear in it (after clearing denominators); else None."""
    X = sympy.Dummy("X")
    numerator = sympy.expand(sympy.numer(sympy.together(expr)).subs(unknown, X))
    if not numerator.has(X):
        return None
    poly = sympy.Poly(numerator, X)
    if poly.degree() != 1:
        return None
    return _tidy(-poly.coeff_monomial(1) / poly.coeff_monomial(X))


def _real_root(expr: sympy.Expr, f: sympy.Expr) -> sympy.Expr | None:
    """The first solution of expr = 0 for the function f free of the imaginary unit, or None."""
    if sympy.simplify(expr) == 0:
        return f  # the metric already uses the function itself
    try:
        roots = sympy.solve(expr, f)
    except (NotImplementedError, ValueError, TypeError):
        return None
    roots = [root for root in roots if not root.has(sympy.I) and not root.has(f)]
    if not roots:
        return None
    return printer_stable(sympy.expand_log(roots[0], force=True) if roots[0].has(sympy.log) else roots[0])
