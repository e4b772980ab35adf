"""The matter a metric needs: field equations, stress-energy, an orthonormal
frame, energy conditions and the perfect-fluid and trace-free tests.

Conventions (stated in every trace that asks for them):

* Field equations G_ij + Lambda g_ij = kappa T_ij with kappa = 8 pi G / c^4
  (8 pi in geometric units G = c = 1); solved for T_ij.
* Frame: the observers normal to the hypersurfaces time = const, with
  e_(0)^i = -g^(t i) / sqrt(-g^tt) (future-pointing when t grows to the
  future), and the spatial vectors by Gram-Schmidt from the coordinate
  directions d_x (x != t) in coordinate order.  Frame indices are named after
  the coordinate each frame vector starts from; the frame metric is
  diag(-1, 1, ..., 1).  The frame exists where -g^tt > 0 and every spatial
  norm is positive.
* Energy density rho = T_(0)(0), principal pressures p_k = T_(k)(k) when the
  frame components are diagonal (Hawking-Ellis type I in this frame).
* Energy conditions (Hawking & Ellis 1973, sec. 4.3; n dimensions):
  null rho + p_k >= 0; weak also rho >= 0; strong rho + p_k >= 0 and
  (n - 3) rho + sum p_k >= 0; dominant rho >= |p_k|.
* A frame of the metric file's own (``[frame]``, kind "orthonormal", checked in stepper/frames.py)
  replaces the observers' frame: e_(a) = w_(a) / sqrt(N_(a)) with w_(a) rational and N_(a) = 1/R_(a)^2
  for the square-root factor R_(a) of its components.
* Where no frame gives rho and p_k (null slices, or T not diagonal), the conditions are read along null
  vectors (stepper/frames.py: the given l and n, d_v with g_vv = 0, du with g^uu = 0).  When
  T_ab = f k_a k_b with k null (null dust, a recorded check), T_ab l^a l^b = f (k.l)^2 for every null l
  and T_ab t^a t^b = f (k.t)^2 with k.t != 0 for every timelike t, T = 0, and -T^a_b t^b = -f (k.t) k^a:
  all four conditions hold exactly when f >= 0, decided like any inequality.  Otherwise only the null
  condition is tried, T_ab k^a k^b along each known null vector: a negative value disproves it, while
  non-negative values along a few null vectors leave it undecided (it asks for every null vector).

Every quantity is computed as kappa times itself inside the chain's exact
arithmetic (kappa holds pi, which the field does not) and divided by kappa
for display; kappa > 0, so signs are unchanged.
"""

from __future__ import annotations

import itertools
import random
from collections import Counter

import mpmath
import sympy

from .algebra import printer_stable
from .frames import FORMULAS as FRAME_FORMULAS, contraction, given_frame, null_directions, null_dust
from .identities import signed_stand_ins
from .models import record_model
from .quantities import formula
from .record import MatterRequest
from .record import Decision, Method, Verdict

FORMULAS = {
    "field_equations": r"G_{ij} + \Lambda g_{ij} = \kappa T_{ij},\qquad \kappa = \frac{8\pi G}{c^4}",
    "frame": (r"e_{(0)}{}^i = \frac{-g^{ti}}{\sqrt{-g^{tt}}},\quad e_{(k)} = \frac{w_{(k)}}{\sqrt{g(w_{(k)}, w_{(k)})}},"
              r"\quad w_{(k)} = \partial_k - \sum_{m<k} \frac{g(\partial_k, w_{(m)})}{g(w_{(m)}, w_{(m)})} w_{(m)}"),
    "frame_check": r"g_{ij}\, e_{(a)}{}^i e_{(b)}{}^j = \eta_{(a)(b)} = \operatorname{diag}(-1, 1, \dots, 1)",
    "density_and_pressures": r"\rho = T_{(0)(0)},\qquad p_{(k)} = T_{(k)(k)}",
    "null": r"\rho + p_{(k)} \ge 0",
    "weak": r"\rho \ge 0,\quad \rho + p_{(k)} \ge 0",
    "strong": r"\rho + p_{(k)} \ge 0,\quad (n-3)\rho + \textstyle\sum_k p_{(k)} \ge 0",
    "dominant": r"\rho \ge |p_{(k)}|",
}

CONVENTIONS = {
    "field_equations": "G_ij + Lambda g_ij = kappa T_ij, kappa = 8 pi G / c^4 (8 pi when G = c = 1)",
    "frame": ("observers normal to time = const: e_(0)^i = -g^(t i)/sqrt(-g^tt); spatial vectors by Gram-Schmidt "
              "from the coordinate directions in coordinate order; frame metric diag(-1, 1, ..., 1)"),
    "energy_conditions": ("type I in the frame: rho = T_(0)(0), p_k = T_(k)(k); null rho + p_k >= 0; weak also rho >= 0; "
                          "strong rho + p_k >= 0 and (n-3) rho + sum p_k >= 0; dominant rho >= |p_k|"),
}

CONVENTIONS_LATEX = {
    "Field equations": (r"$G_{ij} + \Lambda g_{ij} = \kappa T_{ij}$ with $\kappa = 8\pi G/c^4$ "
                        r"($\kappa = 8\pi$ in geometric units $G = c = 1$)."),
    "Orthonormal frame": (r"observers normal to $t = \text{const}$, $e_{(0)}{}^i = -g^{ti}/\sqrt{-g^{tt}}$; spatial "
                          r"vectors by Gram--Schmidt from the coordinate directions; frame metric "
                          r"$\operatorname{diag}(-1, 1, \dots, 1)$; frame indices named after coordinates."),
    "Energy conditions": (r"with $\rho = T_{(0)(0)}$ and $p_{(k)} = T_{(k)(k)}$ (type I): null $\rho + p_{(k)} \ge 0$; "
                          r"weak also $\rho \ge 0$; strong $\rho + p_{(k)} \ge 0$ and $(n-3)\rho + \sum_k p_{(k)} \ge 0$; "
                          r"dominant $\rho \ge |p_{(k)}|$."),
}

#: Points drawn from the region when the algebra cannot decide an inequality.
SAMPLE_POINTS = 200
SAMPLE_SEED = 20261202
SAMPLE_DIGITS = 30


def record_matter(chain, request: MatterRequest) -> None:
    """Run every matter stage on a chain that has computed the Einstein tensor."""
    _Matter(chain, request).run()


class _Matter:
    def __init__(self, chain, request: MatterRequest):
        self.c = chain
        self.request = request
        self.A = chain.A
        self.n = chain.n
        self.kappa = request.kappa
        self.lam = request.cosmological_constant
        self.t = chain.x.index(request.time)
        self.v, self.N, self.frame_names = [], [], []
        self.frame_built = False

    def run(self) -> None:
        self.field_equations()
        self.stress_energy()
        self.raised_stress_energy()
        self.trace_free()
        if self.frame():
            self.frame_stress_energy()
            self.frame_curvature()
            self.density_and_pressures()
        self.perfect_fluid()
        self.c.stage = "energy conditions"
        self.energy_conditions()
        record_model(self.c, self.request)  # [matter.model]: stepper/models.py

    # helpers ------------------------------------------------------------
    def physical(self, element) -> sympy.Expr:
        """A kappa-scaled element divided by kappa, for display."""
        return printer_stable(self.c.expr(element) / self.kappa)

    def name(self, i: int) -> str:
        return self.c.x[i].name

    # field equations and T ----------------------------------------------
    def field_equations(self) -> None:
        r = self.request
        units = ("geometric units, G = c = 1, so kappa = 8 pi" if r.units == "geometric"
                 else "physical units: G and c kept as symbols, kappa = 8 pi G / c^4")
        if self.n == 2:
            units += ("; in two dimensions G_ij vanishes identically, so every metric requires "
                      "T_ij = Lambda g_ij / kappa")
        result = {"kappa": self.kappa, "cosmological_constant": self.lam}
        self.c.results["field_equations"] = {**result, "units": r.units}
        self.c.record(id="field_equations", kind="field equations",
                      annotation=f"Einstein's field equations with cosmological constant Lambda = {self.lam}, in {units}; "
                                 "they are solved for the stress-energy tensor T_ij that the metric requires.",
                      formula=FORMULAS["field_equations"], uses=("einstein", "metric"), result=result,
                      params={"units": r.units, "convention": CONVENTIONS["field_equations"]})

    def stress_energy(self) -> None:
        c, n, A = self.c, self.n, self.A
        lam = A.from_expr(self.lam) if self.lam != 0 else A.zero
        self.S = [[c.G[i][j] + lam * c.g[i][j] for j in range(n)] for i in range(n)]
        components = {}
        t = c.tex
        kappa_tex = sympy.latex(self.kappa)
        for i in range(n):
            for j in range(i, n):
                if c.is_zero(self.S[i][j]):
                    continue
                key = c.key(i, j)
                uses = ["field_equations", "metric"] + ([f"einstein/{key}"] if f"einstein/{key}" in c.tracer else [])
                value = self.physical(self.S[i][j])
                lam_tex = "" if self.lam == 0 else f" + {sympy.latex(self.lam)}\\, g_{{{t[i]}{t[j]}}}"
                c.record(id=f"stress_energy/{key}", kind="component",
                         annotation=f"Stress-energy component T_({self.name(i)} {self.name(j)}) required by the metric",
                         formula=formula("stress_energy"), uses=tuple(uses), result=value,
                         quantity="stress_energy", component=key,
                         substituted=f"T_{{{t[i]}{t[j]}}} = \\frac{{1}}{{{kappa_tex}}}\\left(G_{{{t[i]}{t[j]}}}{lam_tex}\\right)")
                components[key] = value
                if i != j:
                    components[c.key(j, i)] = value
        c.results["stress_energy"] = dict(sorted(components.items(), key=lambda kv: c._order(kv[0])))
        c.record(id="stress_energy", kind="summary", quantity="stress_energy",
                 annotation="Stress-energy tensor with indices down (components not listed vanish).",
                 formula=formula("stress_energy"),
                 uses=tuple(s.id for s in c.tracer.steps if s.id.startswith("stress_energy/")) or ("field_equations",),
                 result=c.results["stress_energy"])

    def raised_stress_energy(self) -> None:
        c, n, A, ginv = self.c, self.n, self.A, self.c.ginv
        S = self.S
        mixed = [[sum((ginv[i][k] * S[k][j] for k in range(n) if not c.is_zero(ginv[i][k])), A.zero)
                  for j in range(n)] for i in range(n)]
        up = [[sum((mixed[i][k] * ginv[k][j] for k in range(n) if not c.is_zero(ginv[k][j])), A.zero)
               for j in range(n)] for i in range(n)]
        self.mixed = mixed
        for name, table, general, what in (
                ("stress_energy_mixed", mixed, formula("stress_energy_mixed"),
                 "Stress-energy tensor with the first index raised, T^i_j = g^ik T_kj, keyed 'i,j'"),
                ("stress_energy_up", up, formula("stress_energy_up"),
                 "Stress-energy tensor with both indices raised, T^ij = g^ik g^jl T_kl")):
            comps = {c.key(i, j): self.physical(table[i][j]) for i in range(n) for j in range(n)
                     if not c.is_zero(table[i][j])}
            c.results[name] = comps
            c.record(id=name, kind="raising", quantity=name, annotation=what + " (components not listed vanish).",
                     formula=general, uses=("stress_energy", "inverse_metric"), result=comps)

    def trace_free(self) -> None:
        c, n = self.c, self.n
        trace = sum((self.mixed[i][i] for i in range(n)), self.A.zero)
        c.results["stress_energy_trace"] = self.physical(trace)
        test = self.A.zero_test(trace)
        if test.vanishes is False:
            verdict = Verdict("", False, f"the trace T^i_i = {self.physical(trace)} is not zero")
        elif test.vanishes:
            verdict = Verdict("", True, f"the trace T^i_i vanishes ({test.evidence})")
        else:
            verdict = Verdict("", None, f"the trace T^i_i = {self.physical(trace)} is not proven zero: {test.evidence}")
        statement = "Trace-free stress-energy (as for an electromagnetic field in four dimensions): T^i_i = 0."
        verdict = Verdict(statement, verdict.holds, verdict.evidence)
        c.results.setdefault("verdicts", {})["trace_free"] = {"holds": verdict.holds, "evidence": verdict.evidence}
        c.record(id="verdict/trace_free", kind="verdict", quantity="trace_free", annotation=statement, formula=formula("trace_free"),
                 uses=("stress_energy_mixed",), result=verdict,
                 params={"trace": self.physical(trace), "test": test.as_data()})

    # the frame ------------------------------------------------------------
    def inner(self, u: list, v: list):
        """g(u, v) for two vectors given by contravariant components (None = 0)."""
        c, g, A = self.c, self.c.g, self.A
        total = A.zero
        for i, ui in enumerate(u):
            if ui is None or c.is_zero(ui):
                continue
            for j, vj in enumerate(v):
                if vj is None or c.is_zero(vj) or c.is_zero(g[i][j]):
                    continue
                total = total + ui * g[i][j] * vj
        return total

    def frame(self) -> bool:
        """Build the frame (unnormalised vectors v and squared norms N); False when none can be built."""
        c, n, A, t = self.c, self.n, self.A, self.t
        given = given_frame(c)
        if given is not None and given.kind == "orthonormal":
            return self.given_frame(given)
        time_name = self.name(t)
        v0 = [-c.ginv[t][i] for i in range(n)]
        N0 = -c.ginv[t][t]
        reason = ""
        self.why = {}
        if c.is_zero(N0):
            self.why = {"kind": "null slices", "time": time_name}
            reason = (f"no frame is built: g^{time_name}{time_name} vanishes identically, so the hypersurfaces "
                      f"{time_name} = const are null and have no normal observers")
        vectors, norms, labels = [v0], [N0], [t]
        for k in range(n):
            if reason or k == t:
                continue
            w = [A.one if i == k else A.zero for i in range(n)]
            for m in range(1, len(vectors)):
                coefficient = self.inner([A.one if i == k else A.zero for i in range(n)], vectors[m]) / norms[m]
                if not c.is_zero(coefficient):
                    w = [wi - coefficient * vm for wi, vm in zip(w, vectors[m])]
            norm = self.inner(w, w)
            if c.is_zero(norm):
                self.why = {"kind": "null direction", "time": time_name, "direction": self.name(k)}
                reason = (f"no frame is built: the direction {self.name(k)} has zero norm after Gram-Schmidt "
                          f"(it is null within {time_name} = const)")
                break
            vectors.append(w)
            norms.append(norm)
            labels.append(k)
        if not reason:
            reason, self.norm_signs = self.norm_signs_or_reason(norms, labels)
        self.frame_built = not reason
        c.results["frame"] = {"built": not reason}
        if reason:
            c.results["frame"]["reason"] = reason
            c.results["frame"]["why"] = self.why
            c.record(id="frame", kind="frame", annotation=reason[0].upper() + reason[1:] + ".",
                     formula=FORMULAS["frame"], uses=("inverse_metric", "metric"), result=Verdict(
                         "An orthonormal frame is built from the metric.", False, reason), params={"why": self.why})
            return False
        self.v, self.N, self.labels = vectors, norms, labels
        self.frame_names = [self.name(k) for k in labels]
        frame_result = {}
        for a, (vec, norm) in enumerate(zip(vectors, norms)):
            inverse_root = _inverse_square_root(c.expr(norm))
            frame_result[self.name(labels[a])] = {self.name(i): _tidy(c.expr(vi) * inverse_root)
                                                 for i, vi in enumerate(vec) if not c.is_zero(vi)}
        norms_result = {self.name(labels[a]): c.expr(norm) for a, norm in enumerate(norms)}
        c.results["frame"].update({"vectors": frame_result, "squared_norms": norms_result,
                                   "time": time_name})
        diagonal = all(len(b) == 1 for b in c.blocks)
        how = ("the metric is diagonal, so each frame vector is a coordinate direction divided by its length"
               if diagonal else "Gram-Schmidt within the blocks of the metric")
        undecided = [x for x, word in self.norm_signs.items() if word != "positive"]
        where = ("every squared norm N is positive for all values the declared signs allow"
                 if not undecided else
                 f"the declared signs do not fix the sign of N for {', '.join(undecided)}: the frame exists "
                 "where every N > 0, and every statement below holds there")
        c.results["frame"]["where"] = where
        c.record(id="frame", kind="frame",
                 annotation=f"Orthonormal frame of the observers normal to {time_name} = const ({how}). "
                            f"Frame vector e_(x) starts from the coordinate direction x; "
                            f"its squared norm N is listed; {where}.",
                 formula=FORMULAS["frame"], uses=("inverse_metric", "metric"),
                 result={"vectors": frame_result, "squared_norms": norms_result},
                 params={"time": time_name, "order": [self.name(k) for k in labels],
                         "convention": CONVENTIONS["frame"]})
        residues = []
        for a in range(n):
            for b in range(a, n):
                value = self.inner(vectors[a], vectors[b])
                if a == b:
                    value = value - (-norms[a] if a == 0 else norms[a])
                residues.append(value)
        frame_verdict, frame_check = c.identity_verdict(
            "g(e_a, e_b) = eta_ab", residues, "g(w_a, w_b) - eta_ab N_a for the unnormalised vectors")
        c.record(id="frame/check", kind="check", quantity="", component="frame",
                 annotation="The frame is orthonormal: g(e_(a), e_(b)) = diag(-1, 1, ..., 1).",
                 formula=FORMULAS["frame_check"], uses=("frame",),
                 result=frame_verdict, params={"residues": "unnormalised frame", **frame_check})
        return True

    def given_frame(self, given) -> bool:
        """Use the metric file's orthonormal frame (checked in stepper.frames): e_(a) = w_(a) / sqrt(N_(a))
        with N_(a) = 1/R_(a)^2 for the square-root factor R_(a) of its components."""
        c = self.c
        if given.holds is False:
            reason = ("no frame is used: the orthonormal frame given in the metric file is not orthonormal "
                      "(step frame/given/check)")
            why = {"kind": "given frame not orthonormal"}
            c.results["frame"] = {"built": False, "reason": reason, "given": True, "why": why}
            c.record(id="frame", kind="frame", annotation=reason[0].upper() + reason[1:] + ".",
                     formula=FRAME_FORMULAS["orthonormal"], uses=("frame/given/check",), result=Verdict(
                         "The given frame is orthonormal.", False, reason), params={"why": why})
            return False
        names = given.labels
        self.frame_names = list(names)
        self.labels = [c.x.index(next(x for x in c.x if x.name == label)) for label in names]
        self.v = [given.real[label].w for label in names]
        self.N = [self.A.one / given.real[label].q for label in names]
        self.norm_signs = {label: "positive" for label in names}
        self.frame_built = True
        vectors = {label: {x.name: value for x, value in zip(c.x, given.vectors[label]) if value != 0}
                   for label in names}
        norms = {label: c.expr(N) for label, N in zip(names, self.N)}
        unnormalised = {label: {x.name: c.expr(w) for x, w in zip(c.x, self.v[a]) if not c.is_zero(w)}
                        for a, label in enumerate(names)}
        where = ("the frame of the metric file; e_(x) = w_(x) / sqrt(N_(x)) with w_(x) rational, and it is "
                 "orthonormal where its components are real")
        c.results["frame"] = {"built": True, "given": True, "vectors": vectors, "squared_norms": norms,
                              "time": names[0], "where": where}
        c.record(id="frame", kind="frame",
                 annotation=(f"The orthonormal frame given in the metric file (checked in step frame/given/check), "
                             f"with e_({names[0]}) timelike; each vector is w / sqrt(N) with w rational, w and N "
                             "listed."),
                 formula=FRAME_FORMULAS["orthonormal"], uses=("frame/given/check",),
                 result={"vectors": vectors, "squared_norms": norms},
                 params={"given": True, "time": names[0], "order": list(names), "unnormalised": unnormalised,
                         "convention": "the metric file's orthonormal frame, its first vector timelike"})
        return True

    def norm_signs_or_reason(self, norms: list, labels: list) -> tuple[str, dict]:
        """The sign of each squared norm from the declared signs; a reason when one is never positive."""
        signs = {}
        time_name = self.name(self.t)
        for norm, k in zip(norms, labels):
            expr = sympy.factor(self.c.expr(norm))
            numerator, denominator = sympy.fraction(expr)
            # free functions as real symbols with their declared signs (real when none was declared)
            product, _ = signed_stand_ins(numerator * denominator, self.c.metric.function_signs)
            if product.is_positive:
                signs[self.name(k)] = "positive"
            elif product.is_nonpositive:
                self.why = {"kind": "not positive", "time": time_name, "direction": self.name(k), "norm": expr}
                what = (f"-g^{time_name}{time_name} = {expr}" if k == self.t
                        else f"the squared norm {expr} of the direction {self.name(k)}")
                consequence = (f"{time_name} = const is not a spacelike hypersurface" if k == self.t
                               else f"the direction {self.name(k)} is not spacelike within {time_name} = const")
                return (f"no frame is built: {what} is never positive for the declared signs, so {consequence} "
                        "(stepper's frame needs the signature (-, +, ..., +) with the time coordinate timelike; "
                        "set [matter] time, or write the metric with that signature)"), {}
            else:
                signs[self.name(k)] = "undecided"
        return "", signs

    def frame_value(self, numerator, frame_indices: tuple[int, ...]) -> tuple[object, sympy.Expr]:
        """(rational part, odd product of norms): the frame component is rational / sqrt(odd)."""
        counts = Counter(frame_indices)
        value = numerator
        odd = self.A.one
        for a, k in counts.items():
            if k // 2:
                value = value / self.N[a] ** (k // 2)
            if k % 2:
                odd = odd * self.N[a]
        return value, odd

    def frame_expr(self, numerator, frame_indices: tuple[int, ...], scale: sympy.Expr = sympy.Integer(1)) -> sympy.Expr:
        rational, odd = self.frame_value(numerator, frame_indices)
        if self.c.is_zero(rational):
            return sympy.Integer(0)
        value = self.c.expr(rational) / scale
        if odd != self.A.one and not (odd == 1):
            value = _tidy(value * _inverse_square_root(self.c.expr(odd)))
        return _stable(value)

    def contract(self, tensor, frame_indices: tuple[int, ...]):
        """tensor(v_a, v_b, ...) over the non-zero components of the vectors."""
        c, A = self.c, self.A
        supports = [[(i, vi) for i, vi in enumerate(self.v[a]) if not c.is_zero(vi)] for a in frame_indices]
        total = A.zero
        for choice in itertools.product(*supports):
            component = tensor(*(i for i, _ in choice))
            if c.is_zero(component):
                continue
            term = component
            for _, vi in choice:
                term = term * vi
            total = total + term
        return total

    def symmetric_frame_components(self, tensor, scale: sympy.Expr = sympy.Integer(1)) -> tuple[dict, dict]:
        """X_(a)(b) = e_(a)^i e_(b)^j X_ij for a symmetric tensor: the unnormalised contractions by (a, b),
        and the non-zero components for display (divided by ``scale``) keyed by frame index names."""
        n = self.n
        contractions, shown = {}, {}
        for a in range(n):
            for b in range(a, n):
                value = self.contract(tensor, (a, b))
                contractions[a, b] = contractions[b, a] = value
                display = self.frame_expr(value, (a, b), scale)
                if display != 0:
                    shown[self.frame_key(a, b)] = shown[self.frame_key(b, a)] = display
        return contractions, shown

    def frame_stress_energy(self) -> None:
        c = self.c
        self.F, comps = self.symmetric_frame_components(lambda i, j: self.S[i][j], self.kappa)
        c.results["frame_stress_energy"] = comps
        c.record(id="frame_stress_energy", kind="frame components", quantity="frame_stress_energy",
                 annotation="Stress-energy tensor in the orthonormal frame (components not listed vanish).",
                 formula=formula("frame_stress_energy"), uses=("frame", "stress_energy"), result=comps)

    def frame_key(self, *frame_indices: int) -> str:
        return ",".join(self.frame_names[a] for a in frame_indices)

    def frame_curvature(self) -> None:
        c, n = self.c, self.n
        _, ricci = self.symmetric_frame_components(lambda i, j: c.ric[i][j])
        c.results["frame_ricci"] = ricci
        c.record(id="frame_ricci", kind="frame components", quantity="frame_ricci",
                 annotation="Ricci tensor in the orthonormal frame (components not listed vanish).",
                 formula=formula("frame_ricci"), uses=("frame", "ricci"), result=ricci)
        riemann = {}
        pairs = [(a, b) for a in range(n) for b in range(a + 1, n)]
        for p, (a, b) in enumerate(pairs):
            for cc, d in pairs[p:]:
                c.progress(f"frame riemann {self.frame_key(a, b, cc, d)}", 0, 1)
                shown = self.frame_expr(self.contract(c.full_lowered, (a, b, cc, d)), (a, b, cc, d))
                if shown != 0:
                    riemann[self.frame_key(a, b, cc, d)] = shown
        c.results["frame_riemann"] = riemann
        c.record(id="frame_riemann", kind="frame components", quantity="frame_riemann",
                 annotation="Riemann tensor in the orthonormal frame, for a < b, c < d, (a,b) <= (c,d) in frame order; "
                            "the others follow from the symmetries of R_abcd (components not listed vanish).",
                 formula=formula("frame_riemann"), uses=("frame", "riemann_lowered"), result=riemann)

    def density_and_pressures(self) -> None:
        c, n = self.c, self.n
        off = [(a, b) for a in range(n) for b in range(a + 1, n) if not c.is_zero(self.F[a, b])]
        self.rho = self.F[0, 0] / self.N[0]
        self.p = [self.F[k, k] / self.N[k] for k in range(1, n)]
        self.type_one = not off
        result = {"energy_density": self.physical(self.rho),
                  "pressures": {self.frame_names[k]: self.physical(self.p[k - 1]) for k in range(1, n)}}
        if off:
            a, b = off[0]
            result["diagonal"] = False
            note = (f"The frame components are not diagonal (T_({self.frame_key(a)})({self.frame_key(b)}) is not zero), "
                    "so the diagonal entries are listed but are not the principal pressures; stepper does not "
                    "diagonalise T, and the energy conditions are not decided from them.")
        else:
            result["diagonal"] = True
            note = ("The frame components are diagonal, so rho and the p_(k) are the energy density and the "
                    "principal pressures measured by the frame's observers.")
        c.results["energy_density"] = result["energy_density"]
        c.results["pressures"] = result["pressures"]
        c.results["frame_diagonal"] = result["diagonal"]
        c.record(id="density_and_pressures", kind="matter", annotation=note,
                 formula=FORMULAS["density_and_pressures"], uses=("frame_stress_energy",), result=result)

    # tests on the matter ----------------------------------------------------
    def perfect_fluid(self) -> None:
        c, n = self.c, self.n
        statement = ("Perfect fluid at rest in the frame: T_ij = (rho + p) u_i u_j + p g_ij with u the "
                     "frame's 4-velocity e_(0).")
        params: dict = {}
        if not self.frame_built:
            verdict = Verdict(statement, None, c.results["frame"]["reason"])
        else:
            residues = {("off-diagonal", self.frame_key(a), self.frame_key(b)): self.F[a, b]
                        for a in range(n) for b in range(a + 1, n)}
            residues.update({("pressure difference", self.frame_key(k), self.frame_key(1)): self.p[k - 1] - self.p[0]
                             for k in range(2, n)})
            verdict, residue, test = self.residue_verdict(statement, residues)
            params["checked"] = len(residues)
            if residue is not None:
                params["residue"] = {"kind": residue[0], "frame_indices": list(residue[1:])}
            if test:
                params["test"] = test
            if verdict.holds:
                u = c.results["frame"]["vectors"][self.frame_names[0]]
                vacuum = all(c.is_zero(self.S[i][j]) for i in range(n) for j in range(n))
                params["vacuum"] = vacuum
                if vacuum:
                    verdict = Verdict(statement, True, "trivially: T_ij vanishes (vacuum), a perfect fluid with "
                                                       "rho = p = 0")
                c.results["perfect_fluid"] = {"density": self.physical(self.rho), "pressure": self.physical(self.p[0]),
                                              "velocity": u}
                params["fluid"] = c.results["perfect_fluid"]
            elif verdict.holds is False:
                verdict = Verdict(statement, False, verdict.evidence +
                                  "; a fluid moving relative to these observers is not tested")
        c.results.setdefault("verdicts", {})["perfect_fluid"] = {"holds": verdict.holds, "evidence": verdict.evidence}
        c.record(id="verdict/perfect_fluid", kind="verdict", quantity="perfect_fluid", annotation=statement, formula=formula("perfect_fluid"),
                 uses=("density_and_pressures",) if self.frame_built else ("frame",), result=verdict, params=params)

    def residue_verdict(self, statement: str, residues: dict) -> tuple[Verdict, tuple | None, dict]:
        """(verdict, the residue that decided it or None, how that residue was tested as data).

        Residues are keyed (kind, frame index, frame index): "off-diagonal" T_(a)(b) or "pressure difference"
        p_(a) - p_(b)."""
        undecided = None
        for key, element in residues.items():
            test = self.A.zero_test(element)
            if test.vanishes is False:
                return Verdict(statement, False, f"{residue_label(key)} is not zero"), key, test.as_data()
            if test.vanishes is None and undecided is None:
                undecided = (key, test)
        if undecided is not None:
            key, test = undecided
            return Verdict(statement, None, f"{residue_label(key)}: {test.evidence}"), key, test.as_data()
        return Verdict(statement, True, f"each of the {len(residues)} conditions checked vanishes exactly"), None, {}

    def energy_conditions(self) -> None:
        c, n = self.c, self.n
        names = {"null": "Null energy condition", "weak": "Weak energy condition",
                 "strong": "Strong energy condition", "dominant": "Dominant energy condition"}
        table = {}
        if (not self.frame_built or not getattr(self, "type_one", False)) and self.null_conditions(names):
            return
        if not self.frame_built or not self.type_one:
            why = ("no orthonormal frame was built" if not self.frame_built else
                   "the stress-energy tensor is not diagonal in the frame, so its energy density and principal "
                   "pressures are not read off; stepper does not diagonalise it")
            for key, title in names.items():
                verdict = Verdict(f"{title}: {_inequality_words(key, n)}.", None, why)
                table[key] = {"holds": None, "evidence": verdict.evidence, "inequalities": {}}
                c.record(id=f"energy_conditions/{key}", kind="energy condition", component=key, annotation=verdict.statement,
                         formula=FORMULAS[key], uses=("frame",), result=verdict, params={"inequalities": {}})
            c.results["energy_conditions"] = table
            return
        decider = _Decider(self, self.request.region)
        rho, p = self.rho, self.p
        labels = [self.frame_key(k) for k in range(1, n)]
        inequalities = {
            "null": [(f"rho + p_({l})", rho + pk) for l, pk in zip(labels, p)],
            "weak": [("rho", rho)] + [(f"rho + p_({l})", rho + pk) for l, pk in zip(labels, p)],
            "strong": [] if n == 2 else [(f"rho + p_({l})", rho + pk) for l, pk in zip(labels, p)]
            + [(f"{n - 3}*rho + sum p" if n != 4 else "rho + sum p", rho * (n - 3) + sum(p, self.A.zero))],
            "dominant": [("rho", rho)] + [(f"rho - p_({l})", rho - pk) for l, pk in zip(labels, p)]
            + [(f"rho + p_({l})", rho + pk) for l, pk in zip(labels, p)],
        }
        for key, title in names.items():
            if not inequalities[key]:
                why = "the strong condition (T_ab - T g_ab/(n-2)) t^a t^b >= 0 is not defined in two dimensions"
                verdict = Verdict(f"{title}.", None, why)
                table[key] = {"holds": None, "evidence": why, "inequalities": {}}
                c.record(id=f"energy_conditions/{key}", kind="energy condition", component=key, annotation=verdict.statement,
                         formula=FORMULAS[key], uses=("density_and_pressures",), result=verdict,
                         params={"inequalities": {}})
                continue
            rows = {}
            outcome: bool | None = True
            first_failure = first_undecided = ""
            for label, element in inequalities[key]:
                decision = decider.decide(label, element)
                holds, value = decision.holds, self.physical(element)
                evidence = decision.sentence(value)
                rows[label] = {"value": value, "holds": holds, "evidence": evidence, "decision": decision.as_data()}
                if holds is False and not first_failure:
                    first_failure = f"{label} >= 0 fails: {evidence}"
                if holds is None and not first_undecided:
                    first_undecided = f"{label} >= 0 is undecided: {evidence}"
                if holds is False:
                    outcome = False
                elif holds is None and outcome is True:
                    outcome = None
            if outcome is False:
                evidence = first_failure
            elif outcome is None:
                evidence = first_undecided
            else:
                evidence = "every inequality is proven (" + "; ".join(
                    f"{label}: {row['evidence']}" for label, row in rows.items()) + ")"
            verdict = Verdict(f"{title}: {_inequality_words(key, n)}.", outcome, evidence)
            table[key] = {"holds": outcome, "evidence": evidence, "inequalities": rows}
            c.record(id=f"energy_conditions/{key}", kind="energy condition", component=key, annotation=verdict.statement,
                     formula=FORMULAS[key], uses=("density_and_pressures",), result=verdict,
                     params={"inequalities": rows,
                             "region": {s.name: [lo, hi] for s, lo, hi in self.request.region}})
        c.results["energy_conditions"] = table

    def null_conditions(self, names: dict) -> bool:
        """The energy conditions from null directions, when the frame's rho and p_k do not decide them: null dust
        T_ab = f k_a k_b (k null) decides all four by f >= 0; otherwise T_ab k^a k^b >= 0 along the null vectors
        known can disprove the null condition, never prove it.  False when no null direction is known."""
        c, n = self.c, self.n
        directions = null_directions(c, c.stage)
        if not directions:
            return False
        decider = _Decider(self, self.request.region)
        region = {s.name: [lo, hi] for s, lo, hi in self.request.region}
        found = null_dust(c, self.S, directions)
        table = {}
        source_step = {d.name: ("null_directions" if d.source != "given" else "frame/given/check") for d in directions}
        if found is not None:
            d, f, dust, check = found
            density = self.physical(f)
            statement = (f"Null dust (pure radiation): T_ab = f k_a k_b with k = {d.name} null"
                         + (f", f = {density}." if dust.holds else "."))
            c.record(id="null_dust", kind="check", component="null dust", annotation=statement,
                     formula=FRAME_FORMULAS["null_dust"], uses=(source_step[d.name], "stress_energy"),
                     result=Verdict(statement, dust.holds, dust.evidence),
                     params={"direction": d.name, "density": density, **check})
        if found is not None and found[2].holds:
            d, f = found[0], found[1]
            decision = decider.decide("f", f)
            value = self.physical(f)
            row = {"value": value, "holds": decision.holds, "evidence": decision.sentence(value),
                   "decision": decision.as_data(), "symbol": {"kind": "null dust density", "direction": d.name}}
            for key, title in names.items():
                words = NULL_DUST_WORDS[key]
                reduction = {"null": f"T_ab l^a l^b = f (k.l)^2 for every null l",
                             "weak": "T_ab t^a t^b = f (k.t)^2 with k.t != 0 for every timelike t",
                             "strong": "T = 0, so (T_ab - T g_ab/(n-2)) t^a t^b = f (k.t)^2",
                             "dominant": "T_ab t^a t^b = f (k.t)^2 and -T^a_b t^b = -f (k.t) k^a, null and "
                                         "future-pointing exactly when f >= 0"}[key]
                if decision.holds is None:
                    evidence = (f"the stress-energy is null dust along {d.name} (step null_dust): {reduction}, so the "
                                f"condition reduces to f = {value} >= 0, which is undecided: {row['evidence']}")
                else:
                    evidence = (f"the stress-energy is null dust along {d.name} (step null_dust): {reduction}, so the "
                                f"condition holds exactly when f = {value} >= 0: {row['evidence']}")
                verdict = Verdict(f"{title}: {words}.", decision.holds, evidence)
                table[key] = {"holds": decision.holds, "evidence": evidence, "inequalities": {"f": row}}
                c.record(id=f"energy_conditions/{key}", kind="energy condition", component=key,
                         annotation=verdict.statement, formula=FRAME_FORMULAS["null_dust"], uses=("null_dust",),
                         result=verdict, params={"route": "null dust", "direction": d.name, "inequalities": {"f": row},
                                                 "region": region})
            c.results["energy_conditions"] = table
            return True
        rows = {}
        for d in directions:
            element = contraction(c, self.S, d)
            decision = decider.decide(d.name, element)
            value = self.physical(element)
            rows[f"T({d.name},{d.name})"] = {"value": value, "holds": decision.holds, "evidence": decision.sentence(value),
                                             "decision": decision.as_data(),
                                             "symbol": {"kind": "contraction", "direction": d.name}}
        failing = next((label for label, row in rows.items() if row["holds"] is False), None)
        undecided = next((label for label, row in rows.items() if row["holds"] is None), None)
        if failing:
            outcome = False
            evidence = (f"{failing} >= 0 fails: {rows[failing]['evidence']}; a null vector with T_ab k^a k^b < 0 "
                        "violates the condition")
        elif undecided:
            outcome = None
            evidence = f"{undecided} >= 0 is undecided: {rows[undecided]['evidence']}"
        else:
            outcome = None
            evidence = (f"T_ab k^a k^b >= 0 is proven along the {len(rows)} null vector(s) listed, but the condition asks "
                        "it of every null vector and the stress-energy is not null dust along any of them, so it is "
                        "not decided")
        why = c.results.get("frame", {}).get("reason") or ("the stress-energy tensor is not diagonal in the frame; "
                                                           "stepper does not diagonalise it")
        uses = tuple(dict.fromkeys(source_step[d.name] for d in directions)) + ("stress_energy",)
        for key, title in names.items():
            if key == "null":
                verdict = Verdict(f"{title}: T_ab k^a k^b >= 0 for every null vector k.", outcome, evidence)
                table[key] = {"holds": outcome, "evidence": evidence, "inequalities": rows}
                c.record(id=f"energy_conditions/{key}", kind="energy condition", component=key,
                         annotation=verdict.statement, formula=r"T_{ab}\, k^a k^b \ge 0", uses=uses, result=verdict,
                         params={"route": "null vectors", "proves": "disproof only", "inequalities": rows,
                                 "region": region})
                continue
            verdict = Verdict(f"{title}: {_inequality_words(key, n)}.", None, why)
            table[key] = {"holds": None, "evidence": why, "inequalities": {}}
            c.record(id=f"energy_conditions/{key}", kind="energy condition", component=key, annotation=verdict.statement,
                     formula=FORMULAS[key], uses=("frame",), result=verdict, params={"inequalities": {}})
        c.results["energy_conditions"] = table
        return True


NULL_DUST_WORDS = {
    "null": "T_ab l^a l^b >= 0 for every null vector l",
    "weak": "T_ab t^a t^b >= 0 for every timelike vector t",
    "strong": "(T_ab - T g_ab/(n-2)) t^a t^b >= 0 for every timelike vector t",
    "dominant": "T_ab t^a t^b >= 0 and -T^a_b t^b causal for every future timelike t",
}




def residue_label(key: tuple) -> str:
    """A perfect-fluid residue in words: T_(a)(b) off the diagonal, or p_(a) - p_(b)."""
    kind, a, b = key
    return f"T_({a})({b})" if kind == "off-diagonal" else f"p_({a}) - p_({b})"


def _inequality_words(key: str, n: int) -> str:
    strong_sum = "rho + sum of p_k >= 0" if n == 4 else f"({n} - 3) rho + sum of p_k >= 0"
    return {"null": "rho + p_k >= 0 for every principal pressure p_k",
            "weak": "rho >= 0 and rho + p_k >= 0 for every k",
            "strong": f"rho + p_k >= 0 for every k and {strong_sum}",
            "dominant": "rho >= |p_k| for every k"}[key]


def _inverse_square_root(value: sympy.Expr) -> sympy.Expr:
    """1/sqrt(N) written as sqrt(denominator)/sqrt(numerator), equal to it wherever N > 0."""
    numerator, denominator = sympy.fraction(sympy.factor(value))
    if numerator.could_extract_minus_sign():  # N > 0: both negative, so take both positive
        numerator, denominator = sympy.factor(-numerator), sympy.factor(-denominator)
    return sympy.sqrt(denominator) / sympy.sqrt(numerator)


#: Expressions with square roots longer than this (in sympy operations) are not factored for display.
TIDY_OPERATIONS_LIMIT = 300


def _tidy(expr: sympy.Expr) -> sympy.Expr:
    """Cancel a rational factor against a square root (r/(r - 2M) * sqrt(r - 2M)/sqrt(r) becomes
    sqrt(r)/sqrt(r - 2M)) by factoring, when the expression is short."""
    if sympy.count_ops(expr) <= TIDY_OPERATIONS_LIMIT:
        expr = sympy.factor(expr)
    return _stable(expr)


def _stable(expr: sympy.Expr) -> sympy.Expr:
    return printer_stable(expr)


class _Decider:
    """Decides f >= 0 for kappa-scaled elements: by the declared signs where
    sympy's assumptions settle it, otherwise by exact evaluation at points of
    the user's region (a negative value there disproves it; non-negative
    values everywhere sampled are evidence, not proof)."""

    def __init__(self, matter: _Matter, region):
        self.m = matter
        self.region = {s: (lo, hi) for s, lo, hi in region}
        self.cache: dict = {}
        self._points = None

    def decide(self, label: str, element) -> Decision:
        key = self.m.A.pack(element) if hasattr(self.m.A, "pack") else element
        key = repr(key)
        if key not in self.cache:
            self.cache[key] = self._decide(element)
        return self.cache[key]

    def _decide(self, element) -> Decision:
        c = self.m.c
        if c.is_zero(element):
            return Decision(Method.IDENTICALLY_ZERO, True)
        expr = sympy.factor(c.expr(element))
        functions = expr.has(sympy.core.function.AppliedUndef)
        numerator, denominator = sympy.fraction(expr)
        signs = _real_functions(numerator * denominator)  # the sign of n/d wherever d != 0
        if signs.is_nonnegative:
            return Decision(Method.DECLARED_SIGNS, True, free_functions=functions)
        if signs.is_negative:
            return Decision(Method.DECLARED_SIGNS, False, free_functions=functions)
        if functions:
            return self._by_function_signs(numerator * denominator) or Decision(Method.FREE_FUNCTIONS, None)
        return self._sample(expr)

    def _by_function_signs(self, product: sympy.Expr) -> Decision | None:
        """The sign of ``product`` from the declared signs of the free functions (and first derivatives) in it,
        with the declarations that decide it (each one dropped that is not needed, in the order declared);
        None when they do not settle it."""
        declared = self.m.c.metric.function_signs
        if not declared:
            return None

        def sign(with_signs) -> bool | None:
            value, _ = signed_stand_ins(product, with_signs)
            return True if value.is_nonnegative else False if value.is_negative else None

        _, used = signed_stand_ins(product, declared)
        holds = sign(used) if used else None
        if holds is None:
            return None
        needed = list(used)
        for s in used:
            fewer = [x for x in needed if x != s]
            if sign(fewer) is holds:
                needed = fewer
        return Decision(Method.DECLARED_SIGNS, holds, free_functions=True, function_signs=tuple(needed))

    def points(self) -> list[tuple[dict, list]]:
        """Exact rational points of the region where the frame exists, each with its
        coordinates as 30-digit numbers (in the order of the region's sorted symbols)."""
        if self._points is not None:
            return self._points
        rng = random.Random(SAMPLE_SEED)
        self.symbols = sorted(self.region, key=lambda s: s.name)
        norms = [self.numeric(sympy.factor(self.m.c.expr(N))) for N in self.m.N]
        points = []
        for _ in range(SAMPLE_POINTS):
            point = {}
            for s in self.symbols:
                lo, hi = self.region[s]
                share = sympy.Rational(rng.randint(0, 10**6), 10**6)
                point[s] = lo + (hi - lo) * share
            values = [mpmath.mpf(str(sympy.N(point[s], SAMPLE_DIGITS + 5))) for s in self.symbols]
            if norms and not all(_positive(N, values) for N in norms):
                continue
            points.append((point, values))
        self._points = points
        return points

    def numeric(self, expr: sympy.Expr):
        """``expr`` as a function of the region's symbols, evaluated with mpmath (None if it needs others)."""
        if not expr.free_symbols <= set(self.symbols):
            return None
        return sympy.lambdify(self.symbols, expr, modules="mpmath", docstring_limit=0)

    def _sample(self, expr: sympy.Expr) -> Decision:
        needed = set(expr.free_symbols)
        for N in self.m.N:
            needed |= self.m.c.expr(N).free_symbols
        missing = sorted(s.name for s in needed if s not in self.region)
        if missing:
            return Decision(Method.NO_RANGE, None, missing=tuple(missing))
        points = self.points()
        if not points:
            return Decision(Method.NO_POINTS, None)
        evaluate = self.numeric(expr)
        used = 0
        with mpmath.workdps(SAMPLE_DIGITS):
            for point, values in points:
                self.m.c.check_time("energy conditions, sampling the region")
                approximate = _real_value(evaluate, values)
                if approximate is None:
                    continue
                used += 1
                if approximate >= 0:
                    continue
                value = expr.subs(point)  # confirm a negative value exactly
                if value.is_number and value.is_negative:
                    where = {s.name: v for s, v in sorted(point.items(), key=lambda kv: kv[0].name)
                             if s in expr.free_symbols}
                    return Decision(Method.EXACT_POINT, False, point=where, value_there=_stable(value / self.m.kappa))
        region = {s.name: (lo, hi) for s, (lo, hi) in sorted(self.region.items(), key=lambda kv: kv[0].name)}
        return Decision(Method.SAMPLED, None, points=used, region=region, digits=SAMPLE_DIGITS)


def _real_value(function, values: list):
    """The function's value as an mpmath real, or None where it is undefined or not real."""
    with mpmath.workdps(SAMPLE_DIGITS):
        try:
            value = mpmath.mpmathify(function(*values))
        except (ZeroDivisionError, ValueError, TypeError):
            return None
    return value if isinstance(value, mpmath.mpf) and mpmath.isfinite(value) else None


def _positive(function, values: list) -> bool:
    value = _real_value(function, values)
    return value is not None and value > 0


def _real_functions(expr: sympy.Expr) -> sympy.Expr:
    """``expr`` with each free function and derivative replaced by a real symbol (a metric is real)."""
    derivatives = sorted(expr.atoms(sympy.Derivative), key=sympy.default_sort_key)
    mapping = {d: sympy.Dummy(f"d{k}", real=True) for k, d in enumerate(derivatives)}
    expr = expr.xreplace(mapping)
    functions = sorted(expr.atoms(sympy.core.function.AppliedUndef), key=sympy.default_sort_key)
    return expr.xreplace({f: sympy.Dummy(f"f{k}", real=True) for k, f in enumerate(functions)})
