"""From an ansatz with free functions to the equations they must satisfy, and,
where sympy can, to their solution, checked by substitution.

The field equations E_ij = G_ij + Lambda g_ij = 0 (vacuum, or an Einstein
space R_ij = 2 Lambda g_ij / (n - 2) when Lambda is not 0) are reduced one
by one: each component's numerator is factored, and factors that cannot
vanish (those free of the unknowns, assumed non-zero, powers of an
unknown that divides the determinant or, for a diagonal metric, a diagonal
component (numerator or denominator) of the non-degenerate metric, and
exponentials) are dropped.  Components whose reduced equations are multiples of each other by a factor
free of the unknowns are duplicates.  The contracted Bianchi identity
g^ac (d_c E_ab - Gamma^e_ca E_eb - Gamma^e_cb E_ae) = 0, an identity for any
metric, is a linear relation among the E_ij and their derivatives; where an
equation enters one component of it only undifferentiated, with a non-zero
coefficient, and every other equation in that component is kept, it follows
from the kept ones (where the coefficient is non-zero).  The independent
equations are then solved one unknown at a time with sympy's dsolve, and the
solution is substituted back into every component E_ij.
"""

from __future__ import annotations

import sympy
from sympy.core.function import AppliedUndef

from .algebra import choose_arithmetic, printer_stable
from .record import as_expression, AnsatzRequest
from .record import Verdict

FORMULAS = {
    "equations": r"E_{ij} \equiv G_{ij} + \Lambda g_{ij} = 0",
    "dependence": r"\nabla^a E_{ab} = g^{ac}\left(\partial_c E_{ab} - \Gamma^e_{ca} E_{eb} - \Gamma^e_{cb} E_{ae}\right) \equiv 0",
    "solve": r"E = 0 \;\Rightarrow\; f = f(x;\, C_1, C_2, \dots)",
    "solution": r"g_{ij} = g_{ij}\big|_{f = f(x; C)}",
    "check": r"E_{ij}\big|_{f = f(x; C)} = 0",
}


def record_ansatz(chain, request: AnsatzRequest) -> None:
    """Record the reduced equations, their dependence, the solution and its check."""
    _Ansatz(chain, request).run()


class _Ansatz:
    def __init__(self, chain, request: AnsatzRequest):
        self.c = chain
        self.A = chain.A
        self.n = chain.n
        self.request = request
        self.unknowns = list(request.unknowns)
        self.heads = {f.func for f in self.unknowns}
        self.lam = request.cosmological_constant

    def run(self) -> None:
        self.equations()
        self.dependence()
        self.solve()

    def has_unknowns(self, expr: sympy.Expr) -> bool:
        return any(f.func in self.heads for f in expr.atoms(AppliedUndef))

    # 1. the equations ----------------------------------------------------------
    def equations(self) -> None:
        c, n, A = self.c, self.n, self.A
        lam = A.from_expr(self.lam) if self.lam != 0 else A.zero
        self.E = {(i, j): c.G[i][j] + lam * c.g[i][j] for i in range(n) for j in range(i, n)}
        det_factors = self.nonvanishing_unknowns()
        self.det_factors = det_factors
        self.reduced, dropped, self.duplicates, zero = {}, {}, {}, []
        representatives: list[tuple[int, int]] = []
        for ij, element in self.E.items():
            if c.is_zero(element):
                zero.append(c.key(*ij))
                continue
            reduced, removed = self.reduce(c.expr(element), det_factors)
            for rep in representatives:
                # the same equation once the factors that cannot vanish are removed
                if not self.has_unknowns(sympy.cancel(reduced / self.reduced[rep])):
                    self.duplicates[ij] = (rep, element / self.E[rep])
                    break
            else:
                representatives.append(ij)
                self.reduced[ij], dropped[ij] = reduced, removed
        self.order = representatives
        eqs = {c.key(*ij): self.reduced[ij] for ij in representatives}
        c.results["ansatz"] = {"equations": eqs}
        params = {
            "unknowns": [printer_stable(f) for f in self.unknowns],
            "cosmological_constant": self.lam,
            "dropped_factors": {c.key(*ij): dropped[ij] for ij in representatives if dropped[ij]},
            "duplicates": {c.key(*ij): {"of": c.key(*rep), "factor": c.expr(q)}
                           for ij, (rep, q) in self.duplicates.items()},
            "identically_zero": zero,
        }
        lam_words = "" if self.lam == 0 else f" with Lambda = {self.lam}"
        c.record(id="ansatz/equations", kind="ansatz", quantity="field_equation", component="equations",
                 annotation=f"Field equations E_ij = G_ij + Lambda g_ij = 0{lam_words} for the unknowns "
                            f"{', '.join(str(f) for f in self.unknowns)}: each listed component's numerator, with "
                            "the factors that cannot vanish removed; duplicates (once reduced, a multiple of another "
                            "equation by a factor free of the unknowns) and identically vanishing components are named.",
                 formula=FORMULAS["equations"],
                 uses=("einstein", "metric") + tuple(f"einstein/{c.key(*ij)}" for ij in self.E
                                                     if f"einstein/{c.key(*ij)}" in c.tracer),
                 result=eqs, params=params)

    def nonvanishing_unknowns(self) -> set:
        """Factors of the determinant and, for a diagonal metric, of the diagonal components (numerators
        and denominators): none can vanish identically in a non-degenerate metric with finite components."""
        c = self.c
        found = set()
        diagonal = all(len(block) == 1 for block in c.blocks)
        sources = [c.expr(c.det)] + ([c.expr(c.g[i][i]) for i in range(self.n) if not c.is_zero(c.g[i][i])]
                                     if diagonal else [])
        for expr in sources:
            numerator, denominator = sympy.fraction(sympy.together(expr))
            for part in (numerator, denominator):
                found |= {f for f, _ in sympy.factor_list(part)[1]}
        return found

    def reduce(self, expr: sympy.Expr, det_factors: set) -> tuple[sympy.Expr, list]:
        numerator = sympy.numer(sympy.together(expr))
        constant, factors = sympy.factor_list(numerator)
        kept, dropped = [], []
        for factor, _power in factors:
            if not self.has_unknowns(factor):
                dropped.append(factor)
            elif isinstance(factor, AppliedUndef) and factor in det_factors:
                dropped.append(factor)
            elif isinstance(factor, sympy.exp) or (factor.is_Pow and isinstance(factor.base, sympy.exp)):
                dropped.append(factor)  # exp of a real quantity never vanishes
            else:
                kept.append(factor)
        return printer_stable(sympy.Mul(*kept)), dropped

    # 2. which equations follow from the others ---------------------------------------
    def dependence(self) -> None:
        c, n, A = self.c, self.n, self.A
        ginv, gamma = c.ginv, c.gamma
        sym = lambda i, j: (min(i, j), max(i, j))
        kept = list(self.order)
        follows = {}
        relations = {}
        for b in range(n):
            alg: dict = {}
            der: dict = {}
            for a in range(n):
                for cc in range(n):
                    if c.is_zero(ginv[a][cc]):
                        continue
                    der.setdefault(sym(a, b), {}).setdefault(cc, A.zero)
                    der[sym(a, b)][cc] = der[sym(a, b)][cc] + ginv[a][cc]
                    for e in range(n):
                        if not c.is_zero(gamma[e][cc][a]):
                            alg[sym(e, b)] = alg.get(sym(e, b), A.zero) - ginv[a][cc] * gamma[e][cc][a]
                        if not c.is_zero(gamma[e][cc][b]):
                            alg[sym(a, e)] = alg.get(sym(a, e), A.zero) - ginv[a][cc] * gamma[e][cc][b]
            alg, der = self.fold_duplicates(alg, der)
            present = {ij for ij, v in alg.items() if not c.is_zero(v)} | \
                      {ij for ij, d in der.items() if any(not c.is_zero(v) for v in d.values())}
            present = {ij for ij in present if ij in self.reduced}
            relations[self.c.x[b].name] = sorted(c.key(*ij) for ij in present)
            candidates = [ij for ij in kept if ij in present
                          and all(c.is_zero(v) for v in der.get(ij, {}).values())]
            candidates.sort(key=lambda ij: (self.order_of(self.reduced[ij]), self.order.index(ij)))
            for ij in reversed(candidates):
                others = present - {ij}
                if not self.never_vanishes(c.expr(alg[ij])):
                    continue  # a coefficient that may vanish on solutions says nothing there
                if others and others <= set(kept) - {ij}:
                    kept.remove(ij)
                    follows[c.key(*ij)] = {
                        "from": sorted(c.key(*o) for o in others),
                        "bianchi_component": self.c.x[b].name,
                        "coefficient": c.expr(alg[ij]),
                    }
                    break
        self.independent = kept
        c.results["ansatz"]["independent"] = [c.key(*ij) for ij in kept]
        c.results["ansatz"]["follows"] = follows
        words = "; ".join(f"E_{k} follows from {', '.join('E_' + o for o in v['from'])} and their derivatives "
                          f"(component {v['bianchi_component']} of the identity, where its coefficient "
                          f"{v['coefficient']} is non-zero)" for k, v in follows.items())
        c.record(id="ansatz/dependence", kind="ansatz", quantity="field_equation", component="dependence",
                 annotation="Independent equations: " + ", ".join("E_" + c.key(*ij) for ij in kept) + ". "
                            + (words + "." if words else "No equation follows from the others by the contracted "
                                                         "Bianchi identity."),
                 formula=FORMULAS["dependence"], uses=("ansatz/equations", "verdict/bianchi"),
                 result={"independent": [c.key(*ij) for ij in kept], "follows": follows},
                 params={"relations": relations})

    def never_vanishes(self, coefficient: sympy.Expr) -> bool:
        """True when every factor is free of the unknowns, an exponential, or an unknown dividing det g."""
        _, factors = sympy.factor_list(sympy.numer(sympy.together(coefficient)))
        for factor, _power in factors:
            if not self.has_unknowns(factor):
                continue
            if isinstance(factor, sympy.exp) or (factor.is_Pow and isinstance(factor.base, sympy.exp)):
                continue
            if isinstance(factor, AppliedUndef) and factor in self.det_factors:
                continue
            return False
        return True

    def fold_duplicates(self, alg: dict, der: dict) -> tuple[dict, dict]:
        """Write each duplicate E_k = q E_rep in terms of its representative."""
        A = self.A
        for ij, (rep, q) in self.duplicates.items():
            a = alg.pop(ij, A.zero)
            d = der.pop(ij, {})
            total = a * q
            for cc, coefficient in d.items():
                total = total + coefficient * A.diff(q, cc)
                der.setdefault(rep, {})
                der[rep][cc] = der[rep].get(cc, A.zero) + coefficient * q
            alg[rep] = alg.get(rep, A.zero) + total
        return alg, der

    @staticmethod
    def order_of(expr: sympy.Expr) -> int:
        orders = [sum(count for _, count in d.variable_count) for d in expr.atoms(sympy.Derivative)]
        return max(orders, default=0)

    # 3. solving ------------------------------------------------------------------
    def fresh_constants(self, solution: sympy.Expr) -> sympy.Expr:
        """Name dsolve's integration constants C1, C2, ... in order, skipping names already in use."""
        known = set(self.c.metric.parameters) | set(self.c.x) | set(self.lam.free_symbols) | set(self.constants)
        taken = {s.name for s in known} | {f.func.__name__ for f in self.c.metric.functions} \
            | {name for name, _ in self.c.metric.abbreviations}
        mapping = {}
        for s in sorted(solution.free_symbols - known, key=lambda s: s.name):
            k = 1
            while f"C{k}" in taken:
                k += 1
            new = sympy.Symbol(f"C{k}", real=True)
            taken.add(new.name)
            self.constants.append(new)
            mapping[s] = new
        return solution.xreplace(mapping)

    def solve(self) -> None:
        c = self.c
        self.constants: list[sympy.Symbol] = []
        solved: dict = {}
        pending = {ij: self.reduced[ij] for ij in self.independent}
        last = "ansatz/dependence"
        number = 0
        branches = 0
        failure = ""
        while len(solved) < len(self.unknowns):
            current = {}
            for ij, eq in pending.items():
                value = sympy.factor(sympy.numer(sympy.together(eq.subs(solved).doit()))) if solved else eq
                if value != 0:
                    current[ij] = value
            pending = current
            choice = None
            for ij, eq in sorted(pending.items(), key=lambda kv: (self.order_of(kv[1]), self.order.index(kv[0]))):
                left = [f for f in self.unknowns if f not in solved and eq.has(f)]
                if len(left) == 1:
                    choice = (ij, eq, left[0])
                    break
            if choice is None:
                failure = ("no remaining equation involves a single unsolved unknown"
                           if pending else "the equations no longer constrain the remaining unknowns")
                break
            ij, eq, f = choice
            try:
                solutions = sympy.dsolve(eq, f)
            except (NotImplementedError, ValueError, TypeError) as err:
                failure = f"sympy's dsolve could not solve E_{c.key(*ij)} for {f} ({type(err).__name__})"
                break
            solutions = solutions if isinstance(solutions, list) else [solutions]
            explicit = [s.rhs for s in solutions if s.lhs == f and not s.rhs.has(f) and s.rhs != 0]
            how = "dsolve"
            if not explicit:
                explicit = _solve_implicit([s for s in solutions if not (s.lhs == f and not s.rhs.has(f))], f)
                how = "dsolve, then solve() on its implicit solution"
            complex_branches = [e for e in explicit if e.has(sympy.I)]
            explicit = [e for e in explicit if not e.has(sympy.I)]
            if not explicit:
                failure = (f"sympy's dsolve gave no explicit real non-zero solution of E_{c.key(*ij)} for {f}"
                           + (f" (its {len(complex_branches)} branch(es) contain the imaginary unit)"
                              if complex_branches else ""))
                break
            c.check_time(f"solving the ansatz ({len(solved) + 1} of {len(self.unknowns)} unknowns)")
            value = printer_stable(self.fresh_constants(explicit[0]))
            solved[f] = value
            branches += len(explicit) - 1
            number += 1
            step_id = f"ansatz/solve/{number}"
            c.record(id=step_id, kind="ode solution",
                     annotation=f"Solve E_{c.key(*ij)} = 0 (after the earlier solutions are substituted) for {f} "
                                f"with sympy's {how}" + (f"; {len(explicit) - 1} other branch(es) not followed"
                                                         if len(explicit) > 1 else "") + ".",
                     formula=FORMULAS["solve"], uses=(last,),
                     result={"equation": eq, "unknown": f, "solution": value},
                     params={"component": c.key(*ij), "method": how,
                             "other_branches": [printer_stable(s) for s in explicit[1:]]})
            last = step_id
        c.results["ansatz"]["solution"] = {str(f): v for f, v in solved.items()}
        c.results["ansatz"]["constants"] = [s.name for s in self.constants]
        c.results["ansatz"]["other_branches"] = branches
        if not self.reduced:
            statement = "Every field equation E_ij vanishes identically: any choice of the unknowns is a solution."
            c.results["ansatz"]["check"] = {"holds": True, "evidence": statement}
            c.record(id="ansatz/solution", kind="ansatz", quantity="ansatz_solution", annotation=statement, formula=FORMULAS["solution"],
                     uses=(last,), result=Verdict("The ansatz equations are solved.", True, statement))
            return
        if failure:
            c.results["ansatz"]["unsolved"] = failure
        if not solved:
            c.record(id="ansatz/solution", kind="ansatz", quantity="ansatz_solution",
                     annotation=f"The system is not solved: {failure}. The independent equations above stand "
                                "as the result.", formula=FORMULAS["solution"], uses=(last,),
                     result=Verdict("The ansatz equations are solved.", None, failure))
            return
        self.record_solution(solved, last, failure)

    def record_solution(self, solved: dict, last: str, failure: str) -> None:
        c, n = self.c, self.n
        matrix = self.c.metric.matrix.subs(solved).doit()
        components = {c.key(i, j): printer_stable(sympy.factor(matrix[i, j])) for i in range(n) for j in range(n)
                      if matrix[i, j] != 0}
        rescaled = self.absorbable(matrix)
        c.results["ansatz"]["metric"] = components
        c.results["ansatz"]["rescalings"] = rescaled
        note = "; ".join(f"{k} is removed by rescaling {v['coordinate']}: {v['coordinate']} -> {v['coordinate']} / "
                         f"sqrt(|{v['factor']}|) sets it to +1 or -1, the sign being fixed by the signature (a local "
                         f"change of coordinates: if {v['coordinate']} is periodic, its period changes)"
                         for k, v in rescaled.items())
        c.record(id="ansatz/solution", kind="ansatz", quantity="ansatz_solution",
                 annotation="The metric with the solution put in, with integration constants "
                            f"{', '.join(s.name for s in self.constants) or 'none'}"
                            + (f" ({note})" if note else "") + (f". Not every unknown is solved: {failure}" if failure else "") + ".",
                 formula=FORMULAS["solution"], uses=(last,), result=components,
                 params={"solution": {str(f): v for f, v in solved.items()}, "rescalings": rescaled})
        residues = []
        entries = list(matrix) + list(self.constants)
        check = choose_arithmetic(c.x, entries, tuple(c.metric.parameters) + tuple(self.constants)
                                  + tuple(self.lam.free_symbols))
        keys = list(self.E)
        for ij in keys:
            value = c.expr(self.E[ij]).subs(solved).doit()
            residues.append(check.from_expr(value))
        undecided = []
        holds = True
        offending = ""
        params: dict = {"count": len(residues)}
        for ij, r in zip(keys, residues):
            test = check.zero_test(r)
            if test.vanishes is False:
                holds = False
                offending = f"E_{c.key(*ij)} = {check.to_expr(r)} after substitution"
                params["residue"] = {"component": c.key(*ij), "value": check.to_expr(r), "test": test.as_data()}
                break
            if test.vanishes is None:
                undecided.append(f"E_{c.key(*ij)}: {test.evidence}")
                params.setdefault("undecided", []).append({"component": c.key(*ij), "test": test.as_data()})
        if holds:
            params["test"] = {"how": "canonical form" if check.name == "field" else "simplify", "vanishes": True}
        if holds and undecided:
            holds = None
        how = {True: f"all {len(residues)} components E_ij vanish after substitution ("
                     + ("canonical rational form 0" if check.name == "field" else "sympy reduces them to 0") + ")",
               False: f"{offending}, which is not zero",
               None: f"not proven symbolically: {undecided[0] if undecided else ''}"}[holds]
        if failure:
            free = ", ".join(str(f) for f in self.unknowns if f not in solved)
            params["free_unknowns"] = [f for f in self.unknowns if f not in solved]
            if holds is True:
                how += f"; the unknowns {free} remain free ({failure})"
            else:
                holds = None
                how = (f"only part of the system is solved ({failure}), so the unknowns {free} "
                       f"remain free; with them free, {how}")
        verdict = Verdict("The solution satisfies every field equation E_ij = 0.", holds, how)
        c.results["ansatz"]["check"] = {"holds": holds, "evidence": how}
        c.record(id="ansatz/check", kind="check", quantity="ansatz_solution",
                 annotation="Substitute the solution into every component E_ij = G_ij + Lambda g_ij, including the "
                            "duplicates and those that follow by the Bianchi identity.",
                 formula=FORMULAS["check"], uses=("ansatz/solution", "ansatz/equations"), result=verdict,
                 params=params)
        if holds is True and not failure:
            self.record_properties(solved)

    def record_properties(self, solved: dict) -> None:
        """What the solved metric is: its scalar curvature and Kretschmann scalar (the chain's results with the
        solution put in), and, since it satisfies G_ij + Lambda g_ij = 0, R_ij = 2 Lambda / (n - 2) g_ij: an
        Einstein space, Ricci-flat when Lambda = 0."""
        c, n = self.c, self.n
        result = {}
        for key in ("scalar", "kretschmann"):
            if key in c.results:
                value = as_expression(c.results[key]).subs(solved).doit()
                result[key] = printer_stable(sympy.factor(sympy.cancel(sympy.together(value))))
        result["einstein_constant"] = printer_stable(2 * self.lam / (n - 2))
        c.results["ansatz"]["properties"] = result
        kinds = "Ricci-flat (a vacuum solution)" if self.lam == 0 else "an Einstein space"
        c.record(id="ansatz/properties", kind="ansatz", quantity="ansatz_solution", component="properties",
                 annotation=f"The solved metric satisfies G_ij + Lambda g_ij = 0, so R_ij = 2 Lambda/(n - 2) g_ij: it is "
                            f"{kinds}; its invariants are the chain's with the solution put in.",
                 formula=r"R_{ij} = \frac{2\Lambda}{n-2}\, g_{ij}", uses=("ansatz/check", "scalar")
                 + (("kretschmann",) if "kretschmann" in result else ()), result=result,
                 params={"ricci_flat": self.lam == 0})

    def absorbable(self, matrix) -> dict:
        """Constants that only scale g_xx of a coordinate x the metric does not depend on, as
        {constant: {"coordinate": x, "factor": f(C)}}: x -> x / sqrt(|f(C)|) sets the factor to +1 or -1."""
        out = {}
        n, x = self.n, self.c.x
        for C in self.constants:
            holders = [(i, j) for i in range(n) for j in range(i, n) if matrix[i, j].has(C)]
            if len(holders) != 1 or holders[0][0] != holders[0][1]:
                continue
            i = holders[0][0]
            if any(matrix[a, b].has(x[i]) for a in range(n) for b in range(n)):
                continue
            entry = sympy.factor(matrix[i, i])
            scale, rest = entry.as_independent(C, as_Add=False)
            if rest.free_symbols == {C}:
                out[C.name] = {"coordinate": x[i].name, "factor": printer_stable(rest)}
        return out


def _solve_implicit(equations: list, f: sympy.Expr) -> list[sympy.Expr]:
    """Explicit forms of implicit solutions F(f, x) = C: solve() on F - C, or on exp(k (F - C)) - 1
    when the logarithms in F keep solve() from it."""
    found = []
    for eq in equations:
        difference = eq.lhs - eq.rhs
        for attempt in (difference, sympy.powsimp(sympy.expand_power_exp(sympy.exp(2 * difference))) - 1,
                        sympy.powsimp(sympy.expand_power_exp(sympy.exp(difference))) - 1):
            try:
                roots = sympy.solve(attempt, f)
            except (NotImplementedError, ValueError, TypeError):
                continue
            roots = [root for root in roots if not root.has(f) and root != 0]
            if roots:
                found += roots
                break
    return found
