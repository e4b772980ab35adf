"""The curvature chain: metric -> determinant -> inverse -> Christoffel ->
Riemann -> Ricci (two routes) -> scalar -> Einstein -> verdicts, Kretschmann,
Weyl and the contracted Bianchi identity, every piece recorded as a step.

Conventions (stated in every trace, see :data:`CONVENTIONS`):

* Christoffel symbols of the second kind,
  Gamma^a_bc = 1/2 g^ad (d_b g_dc + d_c g_db - d_d g_bc), symmetric in b, c.
* Riemann tensor R^a_bcd = d_c Gamma^a_db - d_d Gamma^a_cb
  + Gamma^a_ce Gamma^e_db - Gamma^a_de Gamma^e_cb, so a round sphere has
  positive curvature; antisymmetric in c, d.
* Ricci tensor R_bd = R^a_bad (contraction of the first and third index).
* Scalar curvature R = g^bd R_bd; Einstein tensor G_ij = R_ij - R g_ij / 2.

The arithmetic (``stepper.algebra``) is a parameter: the chain only adds,
multiplies, differentiates and asks for zero tests.
"""

from __future__ import annotations

import itertools
import multiprocessing
import os
import time
from typing import Callable, Iterable, Sequence

import sympy

from .algebra import choose_arithmetic, printer_stable
from .errors import InputError, TimeLimitReached
from .metric import LINE_ELEMENT_CONVENTION, Metric
from .quantities import QUANTITIES, formula
from .record import Derivation, Simplification, Step, Verdict
from .tracer import Tracer
from .verify import numeric_check
from .matter import CONVENTIONS as MATTER_CONVENTIONS, CONVENTIONS_LATEX as MATTER_CONVENTIONS_LATEX, record_matter
from .ansatz import record_ansatz
from .geodesics import record_geodesics
from .petrov import record_petrov

CONVENTIONS = {
    "line_element": LINE_ELEMENT_CONVENTION,
    "christoffel": "Gamma^a_bc = 1/2 g^ad (d_b g_dc + d_c g_db - d_d g_bc), symmetric in the lower pair b, c",
    "riemann": ("R^a_bcd = d_c Gamma^a_db - d_d Gamma^a_cb + Gamma^a_ce Gamma^e_db - Gamma^a_de Gamma^e_cb; "
                "a round sphere has positive curvature; R_abcd = g_ae R^e_bcd"),
    "ricci": "R_bd = R^a_bad (first index contracted with the third)",
    "scalar": "R = g^bd R_bd",
    "einstein": "G_ij = R_ij - (1/2) R g_ij",
    "weyl": ("C_abcd = R_abcd - (g_ac R_bd - g_ad R_bc - g_bc R_ad + g_bd R_ac)/(n-2) "
             "+ R (g_ac g_bd - g_ad g_bc)/((n-1)(n-2))"),
}

#: The same conventions, for typeset reports.
CONVENTIONS_LATEX = {
    "Line element": (r"$ds^2 = g_{ij}\,dx^i dx^j$ summed over all $i$ and $j$: a cross term $2f\,dx^i dx^j$ "
                     r"($i \ne j$) gives $g_{ij} = g_{ji} = f$; squares of sums are expanded."),
    "Christoffel symbols": (r"$\Gamma^a_{bc} = \tfrac12 g^{ad}(\partial_b g_{dc} + \partial_c g_{db} - \partial_d g_{bc})$, "
                            r"symmetric in $b, c$."),
    "Riemann tensor": (r"$R^a{}_{bcd} = \partial_c \Gamma^a_{db} - \partial_d \Gamma^a_{cb} + \Gamma^a_{ce}\Gamma^e_{db} "
                       r"- \Gamma^a_{de}\Gamma^e_{cb}$ (a round sphere has positive curvature), antisymmetric in $c, d$; "
                       r"$R_{abcd} = g_{ae} R^e{}_{bcd}$."),
    "Ricci tensor": r"$R_{bd} = R^a{}_{bad}$ (first index contracted with the third).",
    "Scalar curvature and Einstein tensor": r"$R = g^{bd} R_{bd}$, $G_{ij} = R_{ij} - \tfrac12 R\, g_{ij}$.",
    "Weyl tensor": (r"for $n \ge 4$, \begin{gather*} C_{abcd} = R_{abcd} - \frac{g_{ac}R_{bd} - g_{ad}R_{bc}}{n-2} "
                    r"\\ + \frac{g_{bc}R_{ad} - g_{bd}R_{ac}}{n-2} \\ "
                    r"+ \frac{R\,(g_{ac}g_{bd} - g_{ad}g_{bc})}{(n-1)(n-2)}. \end{gather*}"),
}

#: Below this many polynomial terms in the Christoffel symbols, starting worker
#: processes costs more than it saves (measured: the flat expanding universe has
#: 73, the twisted vacuum 225, the rotating black hole 451).
PARALLEL_WORK_THRESHOLD = 300

#: Raw expressions longer than this (in polynomial terms of their inputs) are
#: not kept as the "before" of a simplification.
BEFORE_TERMS_LIMIT = 60

Progress = Callable[[str, int, int], None]


def _no_progress(label: str, done: int, total: int) -> None:
    return None


def derive(metric: Metric, progress: Progress | None = None, arithmetic=None,
           curvature_invariants: bool = True, jobs: int = 1, time_limit: float | None = None) -> Derivation:
    """Run the whole chain on ``metric`` and return the recorded derivation.

    ``jobs`` > 1 spreads the largest stages over that many processes (the
    result is the same as with one); ``time_limit`` in seconds stops the run
    with :class:`TimeLimitReached` saying where it was.
    """
    chain = _Chain(metric, progress or _no_progress, arithmetic, curvature_invariants)
    chain.jobs = max(1, int(jobs))
    chain.deadline = None if time_limit is None else time.perf_counter() + time_limit
    user_progress = chain.progress

    def progress_and_clock(label: str, done: int, total: int) -> None:
        chain.check_time(label)
        user_progress(label, done, total)
    chain.progress = progress_and_clock
    return chain.run()


def default_jobs() -> int:
    """Processes to use by default: the cores this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1


class _Chain:
    jobs = 1
    deadline: float | None = None
    stage = "curvature"

    def __init__(self, metric: Metric, progress: Progress, arithmetic, curvature_invariants: bool):
        self.metric = metric
        self.n = metric.dimension
        self.x = metric.coordinates
        self.progress = progress
        self.invariants = curvature_invariants
        extra = list(metric.extra_symbols)
        self.A = arithmetic or choose_arithmetic(metric.coordinates, list(metric.matrix) + extra,
                                                 tuple(metric.parameters) + tuple(extra))
        self.tracer = Tracer()
        self.results: dict = {}
        self._expr_cache: dict = {}
        self.tex = ["{" + sympy.latex(c) + "}" for c in self.x]

    # helpers ------------------------------------------------------------
    def key(self, *indices: int) -> str:
        return ",".join(self.x[i].name for i in indices)

    def expr(self, element) -> sympy.Expr:
        try:
            return self._expr_cache[element]
        except KeyError:
            value = self.A.to_expr(element)
            self._expr_cache[element] = value
            return value
        except TypeError:  # unhashable elements: no cache
            return self.A.to_expr(element)

    def is_zero(self, element) -> bool:
        if element == 0 or element == self.A.zero:
            return True
        return bool(self.A.zero_test(element).vanishes)

    def simplification(self, raw_parts: Callable[[], sympy.Expr] | None, size: int, result) -> tuple:
        after = self.expr(result)
        if raw_parts is None:
            return ()
        before = printer_stable(raw_parts()) if size <= BEFORE_TERMS_LIMIT else None
        return (Simplification(self.A.rewrite, before, after, size),)

    def size(self, elements: Iterable) -> int:
        total = 0
        for e in elements:
            total += len(e.num) + len(e.den) if hasattr(e, "num") else sympy.count_ops(getattr(e, "expr", e))
        return total

    def identity_verdict(self, statement: str, residues: list, what: str) -> tuple[Verdict, dict]:
        """Holds when every residue is proven zero, fails on a proven non-zero, undecided otherwise.

        Returns the verdict and the step params the exporters typeset its evidence from: ``count`` (residues
        checked), ``test`` (how the residue that decided it was tested, :meth:`ZeroTest.as_data`) and
        ``undecided`` (how many were not proven).
        """
        undecided = []
        for element in residues:
            test = self.A.zero_test(element)
            if test.vanishes is False:
                return (Verdict(statement, False, f"{what}: one is not zero ({test.evidence})"),
                        {"count": len(residues), "test": test.as_data()})
            if test.vanishes is None:
                undecided.append(test)
        if undecided:
            return (Verdict(statement, None, f"{what}: {len(undecided)} of {len(residues)} not proven symbolically "
                                             f"({undecided[0].evidence})"),
                    {"count": len(residues), "undecided": len(undecided), "test": undecided[0].as_data()})
        how = "have canonical rational form 0" if self.A.name == "field" else "reduce to 0 with sympy"
        return (Verdict(statement, True, f"{what}: all {len(residues)} {how}"),
                {"count": len(residues), "test": {"how": "canonical form" if self.A.name == "field" else "simplify",
                                                  "vanishes": True}})

    def checked(self, statement: str, residues: list, what: str) -> dict:
        """The ``result`` and ``params`` of a check step (see :meth:`identity_verdict`)."""
        verdict, params = self.identity_verdict(statement, residues, what)
        return {"result": verdict, "params": params}

    def record(self, **fields) -> Step:
        """Record a step; its stage is the one running unless given."""
        fields.setdefault("stage", self.stage)
        return self.tracer.record(Step(**fields))

    def _christoffel_size(self) -> int:
        """Polynomial terms in all Christoffel symbols: a cheap measure of the work ahead."""
        if not hasattr(self, "gamma"):
            return 0
        return self.size(e for plane in self.gamma for row in plane for e in row if e is not None)

    def check_time(self, where: str) -> None:
        if self.deadline is not None and time.perf_counter() > self.deadline:
            raise TimeLimitReached(where)

    def compute_many(self, method: str, items: list[tuple], label: str) -> list:
        """``[getattr(self, method)(*item) for item in items]``, on several processes when asked.

        Workers are forked from this process (they see every earlier result),
        each computes a contiguous share and returns its elements packed as
        plain data together with their display expressions, and the parent
        keeps the input order, so the result is the same as the serial one.
        """
        total = len(items)
        if self.jobs <= 1 or total < 2 * self.jobs or self._christoffel_size() < PARALLEL_WORK_THRESHOLD:
            out = []
            for done, item in enumerate(items, start=1):
                out.append(getattr(self, method)(*item))
                if done % 8 == 0 or done == total:
                    self.check_time(f"{label} ({done} of {total} components)")
                    self.progress(f"{label} {done}/{total}", done, total)
            return out
        global _ACTIVE_CHAIN
        _ACTIVE_CHAIN = self
        size = max(1, total // (4 * self.jobs))
        chunks = [(method, items[i:i + size]) for i in range(0, total, size)]
        out = []
        context = multiprocessing.get_context("fork")
        try:
            with context.Pool(self.jobs, initializer=_quiet_worker) as pool:
                for packed in pool.imap(_compute_chunk, chunks):
                    for data, display in packed:
                        element = self.A.unpack(data)
                        self._expr_cache.setdefault(element, display)
                        out.append(element)
                    self.progress(f"{label} {len(out)}/{total}", len(out), total)
        finally:
            _ACTIVE_CHAIN = None
        return out

    # the chain ----------------------------------------------------------
    def run(self) -> Derivation:
        start = time.perf_counter()
        stages = [self.metric_step, self.metric_derivatives, self.determinant, self.inverse_metric,
                  self.christoffel, self.contracted_christoffel, self.riemann, self.ricci,
                  self.ricci_by_trace_identity, self.scalar, self.einstein, self.mixed_tensors, self.verdict_ricci_flat,
                  self.verdict_einstein_space, self.riemann_lowered, self.verdict_constant_curvature]
        if self.invariants:
            stages += [self.kretschmann, self.weyl, self.algebraic_type]
        stages += [self.bianchi, self.numeric_verification]
        if self.metric.frame is not None:
            stages.append(self.given_frame)
        if self.metric.matter is not None:
            stages.append(self.matter)
        if self.metric.ansatz is not None:
            stages.append(self.ansatz)
        stages.append(self.geodesics)
        finished: list[str] = []
        kept = (0, _snapshot(self.results))  # the steps and results of the finished stages
        for number, stage in enumerate(stages):
            label = f"{stage.__name__.replace('_', ' ')} (stage {number + 1} of {len(stages)})"
            try:
                self.check_time(label)
                self.progress(label, number, len(stages))
                stage()
            except (TimeLimitReached, KeyboardInterrupt) as stop:
                if not finished:
                    raise
                reason = "time limit" if isinstance(stop, TimeLimitReached) else "interrupted"
                stop.partial = self.derivation(start, steps=self.tracer.steps[:kept[0]], results=kept[1],
                                               stopped={"reason": reason, "during": stage.__name__,
                                                        "finished": list(finished)})
                raise
            finished.append(stage.__name__)
            kept = (len(self.tracer.steps), _snapshot(self.results))
        self.progress("done", len(stages), len(stages))
        return self.derivation(start, self.tracer.steps, self.results)

    def derivation(self, start: float, steps, results, stopped: dict | None = None) -> Derivation:
        """The record of the stages run so far (all of them unless ``stopped`` says otherwise)."""
        conventions, conventions_latex = dict(CONVENTIONS), dict(CONVENTIONS_LATEX)
        convention_data = {**CONVENTION_DATA, "signature": self.signature,
                           "stored_orderings": {name: QUANTITIES[name].stored for name in QUANTITIES
                                                if name in self.results and QUANTITIES[name].rank > 1}}
        if self.metric.matter is not None:
            conventions.update(MATTER_CONVENTIONS)
            conventions_latex.update(MATTER_CONVENTIONS_LATEX)
        return Derivation(self.metric, tuple(steps), results, self.A.name,
                          arithmetic_description=self.A.description, conventions=conventions,
                          convention_data=convention_data,
                          conventions_latex=conventions_latex, seconds=time.perf_counter() - start,
                          stopped=stopped)

    def given_frame(self) -> None:
        """The metric file's [frame], checked (stepper/frames.py; recorded once, also for other stages)."""
        from .frames import given_frame
        self.stage = "curvature"
        given_frame(self)

    def algebraic_type(self) -> None:
        """Weyl scalars and the algebraic (Petrov) type, four-dimensional Lorentzian metrics only."""
        record_petrov(self)

    def matter(self) -> None:
        self.stage = "matter"
        record_matter(self, self.metric.matter)

    def ansatz(self) -> None:
        self.stage = "ansatz"
        record_ansatz(self, self.metric.ansatz)

    def geodesics(self) -> None:
        self.stage = "geodesics"
        record_geodesics(self, self.metric.orbit)

    def metric_step(self) -> None:
        n = self.n
        self.g = [[self.A.from_expr(self.metric.matrix[i, j]) for j in range(n)] for i in range(n)]
        if hasattr(self.A, "learn_display_factors"):
            self.A.learn_display_factors(value for row in self.g for value in row)
        comps = {self.key(i, j): self.expr(self.g[i][j]) for i in range(n) for j in range(n)
                 if not self.is_zero(self.g[i][j])}
        self.results["metric"] = comps
        self.signature = metric_signature(self.metric.matrix)
        self.record(id="metric", kind="input", annotation="The metric components g_ij read from the input.",
                    formula=formula("metric"), uses=(), result=comps, quantity="metric",
                    params={"coordinates": list(self.metric.names), "arithmetic": self.A.name,
                            "convention": LINE_ELEMENT_CONVENTION, "signature": self.signature,
                            # why the exact field could not hold the metric (algebra.UnsupportedByField.as_data)
                            **({"slow_path_because": self.A.slow_path_because}
                               if getattr(self.A, "slow_path_because", None) else {})})

    def metric_derivatives(self) -> None:
        n = self.n
        self.dg = [[[self.A.diff(self.g[i][j], k) if j >= i else None for j in range(n)] for i in range(n)]
                   for k in range(n)]
        for k in range(n):
            for i in range(n):
                for j in range(i):
                    self.dg[k][i][j] = self.dg[k][j][i]
        comps = {f"{self.x[k].name}:{self.key(i, j)}": self.expr(self.dg[k][i][j])
                 for k in range(n) for i in range(n) for j in range(i, n) if not self.is_zero(self.dg[k][i][j])}
        self.record(id="metric_derivatives", kind="derivative", quantity="metric_derivatives",
                    annotation="First partial derivatives d_k g_ij of the metric, keyed 'k:i,j'; "
                               "those not listed vanish, and d_k g_ji = d_k g_ij.",
                    formula=formula("metric_derivatives"), uses=("metric",), result=comps)

    def determinant(self) -> None:
        n, g = self.n, self.g
        blocks = self._blocks()
        if all(len(b) == 1 for b in blocks):
            method = "diagonal: the product of the diagonal components"
        elif len(blocks) > 1:
            method = "block diagonal: the product of the determinants of the blocks " + \
                     "; ".join("(" + ",".join(self.x[i].name for i in b) + ")" for b in blocks)
        else:
            method = "general: expansion by minors"
        det = self.A.one
        for block in blocks:
            det = det * _determinant([[g[i][j] for j in block] for i in block], self.A)
        if self.is_zero(det):
            raise InputError("the metric is degenerate: its determinant is identically 0")
        self.det = det
        self.blocks = blocks
        value = self.expr(det)
        self.results["determinant"] = value
        raw = (lambda: sympy.Matrix(self.metric.matrix).det(method="berkowitz")) if n <= 4 else None
        self.record(id="determinant", kind="determinant", quantity="determinant", annotation=f"Determinant of the metric ({method}).",
                    formula=formula("determinant"), uses=("metric",), result=value,
                    params={"method": method, "blocks": [[self.x[i].name for i in b] for b in blocks]},
                    simplifications=self.simplification(raw, self.size(g[i][j] for i in range(n) for j in range(n)), det))

    def _blocks(self) -> list[list[int]]:
        """Connected groups of coordinates linked by non-zero off-diagonal components."""
        n = self.n
        parent = list(range(n))

        def find(i):
            while parent[i] != i:
                i = parent[i]
            return i
        for i in range(n):
            for j in range(i + 1, n):
                if not self.is_zero(self.g[i][j]):
                    parent[find(j)] = find(i)
        groups: dict[int, list[int]] = {}
        for i in range(n):
            groups.setdefault(find(i), []).append(i)
        return sorted(groups.values())

    def inverse_metric(self) -> None:
        n, g, A = self.n, self.g, self.A
        ginv = [[A.zero] * n for _ in range(n)]
        for block in self.blocks:
            sub = [[g[i][j] for j in block] for i in block]
            inv = _inverse(sub, A)
            for a, i in enumerate(block):
                for b, j in enumerate(block):
                    ginv[i][j] = inv[a][b]
        self.ginv = ginv
        if all(len(b) == 1 for b in self.blocks):
            method = "diagonal: each g^ii is 1/g_ii"
        elif len(self.blocks) > 1:
            method = "block: each block inverted as its adjugate over its determinant"
        else:
            method = "general: adjugate over determinant"
        comps = {self.key(i, j): self.expr(ginv[i][j]) for i in range(n) for j in range(n)
                 if not self.is_zero(ginv[i][j])}
        self.results["inverse_metric"] = comps
        self.record(id="inverse_metric", kind="inverse", quantity="inverse_metric", annotation=f"Inverse metric g^ij ({method}).",
                    formula=formula("inverse_metric"), uses=("metric", "determinant"), result=comps,
                    params={"method": method, "blocks": [[self.x[i].name for i in b] for b in self.blocks]})
        verdict, check = self.identity_verdict(
            "g^ik g_kj = delta^i_j",
            [sum((ginv[i][k] * g[k][j] for k in range(n)), A.zero) - (1 if i == j else 0)
             for i in range(n) for j in range(n)], "the entries of g^ik g_kj - delta^i_j")
        self.record(id="inverse_metric/check", kind="check", quantity="inverse_metric", component="identity",
                    annotation="The product of the inverse and the metric is the identity.",
                    formula=r"g^{ik} g_{kj} - \delta^i_j = 0", uses=("metric", "inverse_metric"), result=verdict,
                    params=check)

    def christoffel(self) -> None:
        n, A, dg, ginv = self.n, self.A, self.dg, self.ginv
        first = [[[(dg[b][d][c] + dg[c][d][b] - dg[d][b][c]) * sympy.Rational(1, 2) if c >= b else None
                   for c in range(n)] for b in range(n)] for d in range(n)]
        gamma = [[[None] * n for _ in range(n)] for _ in range(n)]
        components = {}
        zero_count = 0
        for a in range(n):
            for b in range(n):
                for c in range(b, n):
                    terms = [d for d in range(n) if not self.is_zero(ginv[a][d]) and not self.is_zero(first[d][b][c])]
                    value = A.zero
                    for d in terms:
                        value = value + ginv[a][d] * first[d][b][c]
                    gamma[a][b][c] = gamma[a][c][b] = value
                    if self.is_zero(value):
                        zero_count += 1
                        continue
                    key = self.key(a, b, c)
                    raw = self._christoffel_raw(a, b, c, terms)
                    step = self.record(
                        id=f"christoffel/{key}", kind="component",
                        annotation=f"Christoffel symbol Gamma^{self.x[a].name}_({self.x[b].name} {self.x[c].name})"
                                   + ("" if b == c else f" (= Gamma^{self.x[a].name}_({self.x[c].name} {self.x[b].name}))"),
                        formula=formula("christoffel"), uses=("inverse_metric", "metric_derivatives"),
                        result=self.expr(value), quantity="christoffel", component=key,
                        substituted=self._christoffel_tex(a, b, c, terms),
                        simplifications=self.simplification(raw, self.size([ginv[a][d] for d in terms] + [
                            dg[k][i][j] for d in terms for (k, i, j) in ((b, d, c), (c, d, b), (d, b, c))]), value))
                    components[key] = step.result
                    if b != c:
                        components[self.key(a, c, b)] = step.result
        self.gamma = gamma
        self.results["christoffel"] = dict(sorted(components.items(), key=lambda kv: self._order(kv[0])))
        independent = n * n * (n + 1) // 2
        self.record(id="christoffel", kind="summary", quantity="christoffel",
                    annotation=f"Christoffel symbols of the second kind: {independent - zero_count} of the "
                               f"{independent} independent components (b <= c) are non-zero; the rest vanish, "
                               "and Gamma^a_cb = Gamma^a_bc.",
                    formula=formula("christoffel"),
                    uses=tuple(s.id for s in self.tracer.steps if s.id.startswith("christoffel/")) or ("inverse_metric",),
                    result=self.results["christoffel"], params={"zero_independent": zero_count})

    def _order(self, key: str) -> tuple:
        names = self.metric.names
        return tuple(names.index(part) for part in key.replace(":", ",").split(","))

    def _christoffel_raw(self, a, b, c, terms):
        def build():
            E = self.expr
            half = sympy.Rational(1, 2)
            def d(i, j, k):
                return sympy.Derivative(E(self.g[i][j]), self.x[k]) if not self.is_zero(self.dg[k][i][j]) else 0
            return sympy.Add(*[half * E(self.ginv[a][d_]) * (d(d_, c, b) + d(d_, b, c) - d(b, c, d_))
                               for d_ in terms])
        return build

    def _christoffel_tex(self, a, b, c, terms) -> str:
        t = self.tex
        parts = []
        for d in terms:
            inner = []
            for sign, (k, i, j) in (("+", (b, d, c)), ("+", (c, d, b)), ("-", (d, b, c))):
                if not self.is_zero(self.dg[k][i][j]):
                    inner.append(f"{sign} \\partial_{{{t[k]}}} g_{{{t[i]}{t[j]}}}")
            bracket = " ".join(inner).lstrip("+ ").strip()
            parts.append(f"g^{{{t[a]}{t[d]}}}\\left({bracket}\\right)")
        return f"\\Gamma^{{{t[a]}}}_{{{t[b]}{t[c]}}} = \\tfrac12\\left[" + " + ".join(parts) + "\\right]"

    def contracted_christoffel(self) -> None:
        n, A = self.n, self.A
        self.log_sqrt_det = []
        differences = []
        for i in range(n):
            explicit = A.zero
            for l in range(n):
                explicit = explicit + self.gamma[l][l][i]
            from_det = A.diff(self.det, i) / (self.det * 2)
            self.log_sqrt_det.append(from_det)
            differences.append(explicit - from_det)
            outcome = self.A.zero_test(explicit - from_det).vanishes
            name = self.x[i].name
            self.record(id=f"contracted_christoffel/{name}", kind="identity", quantity="contracted_christoffel",
                        component=name,
                        annotation=f"Trace identity along {name}: the sum Gamma^l_l{name} over l, and d_{name} ln sqrt|g| "
                                   "from the determinant, " + {True: "agree.", False: "DISAGREE.",
                                                               None: "agree numerically (not proven)."}[outcome],
                        formula=formula("contracted_christoffel"),
                        uses=("christoffel", "determinant"),
                        result={"sum": self.expr(explicit), "from_determinant": self.expr(from_det)},
                        )
        self.record(id="contracted_christoffel", kind="check", quantity="contracted_christoffel",
                    annotation="The contracted Christoffel symbols equal the derivative of ln sqrt|g| in every direction.",
                    formula=formula("contracted_christoffel"),
                    uses=tuple(f"contracted_christoffel/{c.name}" for c in self.x),
                    **self.checked("Gamma^l_li = d_i ln sqrt|g| for every i", differences,
                                                 "the differences of the two routes"))

    def _d_gamma(self, k, a, b, c):
        """d_k Gamma^a_bc, computed once per process."""
        key = (k, a, min(b, c), max(b, c))
        cache = self.__dict__.setdefault("_d_gamma_cache", {})
        if key not in cache:
            cache[key] = self.A.diff(self.gamma[a][b][c], k)
        return cache[key]

    def _riemann_terms(self, a, b, c, d) -> list[tuple[int, tuple, tuple | None]]:
        """The non-vanishing terms of R^a_bcd: (sign, first factor, second factor or None for a derivative)."""
        G = self.gamma
        nz = lambda i, j, k: not self.is_zero(G[i][j][k])
        terms = []
        if nz(a, d, b):
            terms.append((1, (c, a, d, b), None))
        if nz(a, c, b):
            terms.append((-1, (d, a, c, b), None))
        for e in range(self.n):
            if nz(a, c, e) and nz(e, d, b):
                terms.append((1, (a, c, e), (e, d, b)))
            if nz(a, d, e) and nz(e, c, b):
                terms.append((-1, (a, d, e), (e, c, b)))
        return terms

    def _riemann_value(self, a, b, c, d):
        """R^a_bcd = d_c Gamma^a_db - d_d Gamma^a_cb + Gamma^a_ce Gamma^e_db - Gamma^a_de Gamma^e_cb."""
        G = self.gamma
        value = self.A.zero
        for sign, first, second in self._riemann_terms(a, b, c, d):
            if second is None:
                term = self._d_gamma(*first)
            else:
                term = G[first[0]][first[1]][first[2]] * G[second[0]][second[1]][second[2]]
            value = value + term if sign > 0 else value - term
        return value

    def _riemann_groups(self, a, b, c, d) -> list[dict]:
        """The terms of R^a_bcd grouped as they come from the Christoffel symbols, each group's value exact:
        the two derivative terms, then the products Gamma^a_ce Gamma^e_db summed over e, and those
        Gamma^a_de Gamma^e_cb (with its sign).  Shown where the expression before simplification is too long
        to reproduce, so that a reader can check a component group by group."""
        G, key, A = self.gamma, self.key, self.A
        groups = []
        products = {1: [], -1: []}
        total = {1: A.zero, -1: A.zero}
        for sign, first, second in self._riemann_terms(a, b, c, d):
            if second is None:
                k, i, j, l = first
                groups.append({"kind": "derivative", "sign": sign, "by": self.x[k].name,
                               "christoffel": key(i, j, l), "value": self.expr(self._d_gamma(*first))})
            else:
                products[sign].append([key(*first), key(*second)])
                total[sign] = total[sign] + G[first[0]][first[1]][first[2]] * G[second[0]][second[1]][second[2]]
        for sign in (1, -1):
            if products[sign]:
                groups.append({"kind": "products", "sign": sign, "pairs": products[sign],
                               "value": self.expr(total[sign])})
        return groups

    def riemann(self) -> None:
        n, A, G = self.n, self.A, self.gamma
        R = {}
        components = {}
        zero_count = 0
        indices = [(a, b, c, d) for a in range(n) for b in range(n) for c in range(n) for d in range(c + 1, n)]
        values = self.compute_many("_riemann_value", indices, "riemann")
        for (a, b, c, d), value in zip(indices, values):
            R[a, b, c, d] = value
            R[a, b, d, c] = -value
            if self.is_zero(value):
                zero_count += 1
                continue
            key = self.key(a, b, c, d)
            terms = self._riemann_terms(a, b, c, d)
            used = {t[1][1:] if t[2] is None else t[1] for t in terms} | {t[2] for t in terms if t[2] is not None}
            uses = sorted({self._christoffel_id(*u) for u in used}, key=lambda s: self._order(s.split("/")[1]))
            size = self.size(G[u[0]][u[1]][u[2]] for u in used)
            step = self.record(
                id=f"riemann/{key}", kind="component",
                annotation=f"Riemann component R^{self.x[a].name}_({self.x[b].name} {self.x[c].name} {self.x[d].name}) "
                           f"(= -R^{self.x[a].name}_({self.x[b].name} {self.x[d].name} {self.x[c].name}))",
                formula=formula("riemann"), uses=tuple(uses) or ("christoffel",), result=self.expr(value),
                quantity="riemann", component=key,
                substituted=self._riemann_tex(a, b, c, d),
                simplifications=self.simplification(self._riemann_raw(a, b, c, d), size, value),
                params={"groups": self._riemann_groups(a, b, c, d)} if size > BEFORE_TERMS_LIMIT else {})
            components[key] = step.result
            components[self.key(a, b, d, c)] = printer_stable(-step.result)
        total = len(indices)
        self.R = R
        for a, b, c in itertools.product(range(n), repeat=3):
            R[a, b, c, c] = A.zero
        self.results["riemann"] = dict(sorted(components.items(), key=lambda kv: self._order(kv[0])))
        self.record(id="riemann", kind="summary", quantity="riemann",
                    annotation=f"Riemann tensor: {total - zero_count} of the {total} components with c < d are non-zero; "
                               "the others vanish, and R^a_bdc = -R^a_bcd.",
                    formula=formula("riemann"),
                    uses=tuple(s.id for s in self.tracer.steps if s.id.startswith("riemann/")) or ("christoffel",),
                    result=self.results["riemann"], params={"convention": CONVENTIONS["riemann"]})

    def _christoffel_id(self, a, b, c) -> str:
        b, c = min(b, c), max(b, c)
        return f"christoffel/{self.key(a, b, c)}"

    def _riemann_raw(self, a, b, c, d):
        def build():
            E, G, x = self.expr, self.gamma, self.x
            nz = lambda i, j, k: not self.is_zero(G[i][j][k])
            total = sympy.Integer(0)
            if nz(a, d, b):
                total += sympy.Derivative(E(G[a][d][b]), x[c])
            if nz(a, c, b):
                total -= sympy.Derivative(E(G[a][c][b]), x[d])
            for e in range(self.n):
                if nz(a, c, e) and nz(e, d, b):
                    total += E(G[a][c][e]) * E(G[e][d][b])
                if nz(a, d, e) and nz(e, c, b):
                    total -= E(G[a][d][e]) * E(G[e][c][b])
            return total
        return build

    def _riemann_tex(self, a, b, c, d) -> str:
        t, G = self.tex, self.gamma
        nz = lambda i, j, k: not self.is_zero(G[i][j][k])
        parts = []
        if nz(a, d, b):
            parts.append(f"+ \\partial_{{{t[c]}}}\\Gamma^{{{t[a]}}}_{{{t[d]}{t[b]}}}")
        if nz(a, c, b):
            parts.append(f"- \\partial_{{{t[d]}}}\\Gamma^{{{t[a]}}}_{{{t[c]}{t[b]}}}")
        for e in range(self.n):
            if nz(a, c, e) and nz(e, d, b):
                parts.append(f"+ \\Gamma^{{{t[a]}}}_{{{t[c]}{t[e]}}}\\Gamma^{{{t[e]}}}_{{{t[d]}{t[b]}}}")
            if nz(a, d, e) and nz(e, c, b):
                parts.append(f"- \\Gamma^{{{t[a]}}}_{{{t[d]}{t[e]}}}\\Gamma^{{{t[e]}}}_{{{t[c]}{t[b]}}}")
        body = " ".join(parts).lstrip("+ ").strip() or "0"
        return f"R^{{{t[a]}}}{{}}_{{{t[b]}{t[c]}{t[d]}}} = {body}"

    def ricci(self) -> None:
        n, A, R = self.n, self.A, self.R
        ric = [[None] * n for _ in range(n)]
        for b in range(n):
            for d in range(n):
                value = A.zero
                for a in range(n):
                    if a != d:
                        value = value + R[a, b, a, d]
                ric[b][d] = value
        symmetry = self.checked("R_ij = R_ji", [ric[i][j] - ric[j][i] for i in range(n)
                                                          for j in range(i + 1, n)], "the differences R_ij - R_ji")
        self.ric = ric
        components = {}
        for b in range(n):
            for d in range(b, n):
                if self.is_zero(ric[b][d]):
                    continue
                key = self.key(b, d)
                used = [f"riemann/{self.key(a, b, min(a, d), max(a, d))}" for a in range(n) if a != d
                        and f"riemann/{self.key(a, b, min(a, d), max(a, d))}" in self.tracer]
                t = self.tex
                tex_terms = " + ".join(f"R^{{{t[a]}}}{{}}_{{{t[b]}{t[a]}{t[d]}}}" for a in range(n)
                                       if a != d and not self.is_zero(R[a, b, a, d]))
                step = self.record(
                    id=f"ricci/{key}", kind="component",
                    annotation=f"Ricci component R_({self.x[b].name} {self.x[d].name}) by contracting the Riemann tensor",
                    formula=formula("ricci"), uses=tuple(used) or ("riemann",), result=self.expr(ric[b][d]),
                    quantity="ricci", component=key,
                    substituted=f"R_{{{t[b]}{t[d]}}} = {tex_terms}",
                    simplifications=self.simplification(
                        lambda b=b, d=d: sympy.Add(*[self.expr(R[a, b, a, d]) for a in range(n) if a != d]),
                        self.size(R[a, b, a, d] for a in range(n) if a != d), ric[b][d]))
                components[key] = step.result
                if b != d:
                    components[self.key(d, b)] = step.result
        self.results["ricci"] = dict(sorted(components.items(), key=lambda kv: self._order(kv[0])))
        self.record(id="ricci", kind="summary", quantity="ricci",
                    annotation="Ricci tensor from the contraction of the Riemann tensor (components not listed vanish).",
                    formula=formula("ricci"),
                    uses=tuple(s.id for s in self.tracer.steps if s.id.startswith("ricci/")) or ("riemann",),
                    result=self.results["ricci"])
        self.record(id="ricci/symmetry", kind="check", quantity="ricci", component="symmetry",
                    annotation="The Ricci tensor is symmetric, R_ij = R_ji.",
                    formula=r"R_{ij} - R_{ji} = 0", uses=("riemann",),
                    **symmetry)

    def ricci_by_trace_identity(self) -> None:
        n, A, G, L = self.n, self.A, self.gamma, self.log_sqrt_det
        route_differences = []
        other = {}
        for i in range(n):
            self.progress(f"ricci by the trace identity, row {i + 1}/{n}", i, n)
            for j in range(i, n):
                value = A.zero
                for l in range(n):
                    if not self.is_zero(G[l][i][j]):
                        value = value + A.diff(G[l][i][j], l)
                value = value - A.diff(L[i], j)
                for a in range(n):
                    if not self.is_zero(G[a][i][j]) and not self.is_zero(L[a]):
                        value = value + G[a][i][j] * L[a]
                for l in range(n):
                    for a in range(n):
                        if not self.is_zero(G[l][i][a]) and not self.is_zero(G[a][j][l]):
                            value = value - G[l][i][a] * G[a][j][l]
                route_differences.append(value - self.ric[i][j])
                if not self.is_zero(value):
                    other[self.key(i, j)] = self.expr(value)
        self.record(id="ricci_by_trace_identity", kind="route", quantity="ricci_by_trace_identity",
                    annotation="Ricci tensor by the second route, from the Christoffel symbols and ln sqrt|g| "
                               "(independent components i <= j; those not listed vanish).",
                    formula=formula("ricci_by_trace_identity"), uses=("christoffel", "contracted_christoffel"),
                    result=other)
        self.record(id="ricci/agreement", kind="check", quantity="ricci", component="agreement",
                    annotation="The two routes to the Ricci tensor agree component by component.",
                    formula=r"R^{(1)}_{ij} - R^{(2)}_{ij} = 0",
                    uses=tuple(s.id for s in self.tracer.steps if s.id.startswith("ricci/") and s.kind == "component")
                    + ("ricci_by_trace_identity",),
                    **self.checked("contraction of Riemann = trace-identity formula",
                                                 route_differences, "the component-wise differences"))

    def scalar(self) -> None:
        n, A = self.n, self.A
        value = A.zero
        parts = []
        for i in range(n):
            for j in range(n):
                if not self.is_zero(self.ginv[i][j]) and not self.is_zero(self.ric[i][j]):
                    value = value + self.ginv[i][j] * self.ric[i][j]
                    parts.append((i, j))
        self.R_scalar = value
        t = self.tex
        self.results["scalar"] = self.expr(value)
        self.record(id="scalar", kind="contraction", quantity="scalar", annotation="Scalar curvature R = g^ij R_ij.",
                    formula=formula("scalar"),
                    uses=("inverse_metric",) + tuple(f"ricci/{self.key(min(i, j), max(i, j))}" for i, j in parts
                                                     if i <= j),
                    result=self.results["scalar"],
                    substituted="R = " + (" + ".join(f"g^{{{t[i]}{t[j]}}}R_{{{t[i]}{t[j]}}}" for i, j in parts) or "0"),
                    simplifications=self.simplification(
                        lambda: sympy.Add(*[self.expr(self.ginv[i][j]) * self.expr(self.ric[i][j]) for i, j in parts]),
                        self.size([self.ginv[i][j] for i, j in parts] + [self.ric[i][j] for i, j in parts]), value))

    def einstein(self) -> None:
        n, A = self.n, self.A
        half = sympy.Rational(1, 2)
        self.G = [[self.ric[i][j] - self.R_scalar * self.g[i][j] * half for j in range(n)] for i in range(n)]
        components = {}
        for i in range(n):
            for j in range(i, n):
                if self.is_zero(self.G[i][j]):
                    continue
                key = self.key(i, j)
                uses = ["scalar", "metric"] + ([f"ricci/{key}"] if f"ricci/{key}" in self.tracer else [])
                step = self.record(id=f"einstein/{key}", kind="component",
                                   annotation=f"Einstein component G_({self.x[i].name} {self.x[j].name})",
                                   formula=formula("einstein"), uses=tuple(uses), result=self.expr(self.G[i][j]),
                                   quantity="einstein", component=key,
                                   simplifications=self.simplification(
                                       lambda i=i, j=j: self.expr(self.ric[i][j]) - half * self.results["scalar"] * self.expr(self.g[i][j]),
                                       self.size([self.ric[i][j], self.R_scalar, self.g[i][j]]), self.G[i][j]))
                components[key] = step.result
                if i != j:
                    components[self.key(j, i)] = step.result
        self.results["einstein"] = components
        self.record(id="einstein", kind="summary", quantity="einstein",
                    annotation="Einstein tensor G_ij = R_ij - R g_ij / 2 (components not listed vanish).",
                    formula=formula("einstein"),
                    uses=tuple(s.id for s in self.tracer.steps if s.id.startswith("einstein/")) or ("scalar", "metric"),
                    result=components)

    def mixed_tensors(self) -> None:
        """R^a_b = g^ac R_cb and G^a_b = g^ac G_cb, every ordering listed (those not listed vanish)."""
        for name, lowered, summary in (("ricci_mixed", self.ric, "ricci"), ("einstein_mixed", self.G, "einstein")):
            components = {}
            for a in range(self.n):
                for b in range(self.n):
                    value = self.A.zero
                    for c in range(self.n):
                        if not self.is_zero(self.ginv[a][c]) and not self.is_zero(lowered[c][b]):
                            value = value + self.ginv[a][c] * lowered[c][b]
                    if not self.is_zero(value):
                        components[self.key(a, b)] = self.expr(value)
            self.results[name] = components
            q = QUANTITIES[name]
            self.record(id=name, kind="raising", quantity=name,
                        annotation=f"The {q.words}, keyed (a, b) (components not listed vanish).",
                        formula=q.formula, uses=("inverse_metric", summary), result=components)

    # verdicts -----------------------------------------------------------
    def _verdict(self, name: str, statement: str, residues: list, uses: tuple, extra: str = "",
                 params: dict | None = None, verdict_formula: str = "") -> Verdict:
        """All residues vanish -> holds; the first that does not is named as evidence.

        ``residues`` lists (label, kind, component, element): the label words the plain-text evidence, the
        kind and component go into the step's params, from which the exporters typeset the evidence.
        """
        params = dict(params or {})
        params["checked"] = len(residues)
        undecided = []
        for label, kind, component, element in residues:
            test = self.A.zero_test(element)
            if test.vanishes is False:
                verdict = Verdict(statement, False, f"{label} is not zero: it equals {self.expr(element)}"
                                  + (f" ({test.evidence})" if self.A.name != "field" else ""))
                params["residue"] = {"kind": kind, "component": component, "value": self.expr(element),
                                     "test": test.as_data()}
                break
            if test.vanishes is None:
                undecided.append((label, kind, component, test))
        else:
            if undecided:
                verdict = Verdict(statement, None, "not proven symbolically; " + "; ".join(
                    f"{label}: {test.evidence}" for label, _, _, test in undecided))
                params["undecided"] = [{"kind": kind, "component": component, "test": test.as_data()}
                                       for _, kind, component, test in undecided]
            else:
                how = "its canonical rational form is 0" if self.A.name == "field" else "sympy reduces it to 0"
                verdict = Verdict(statement, True,
                                  f"each of the {len(residues)} components checked vanishes ({how})" + extra)
                params["test"] = "canonical form" if self.A.name == "field" else "simplify"
        self.results.setdefault("verdicts", {})[name] = {"holds": verdict.holds, "evidence": verdict.evidence}
        self.record(id=f"verdict/{name}", kind="verdict", quantity=name, annotation=statement,
                    formula=verdict_formula or formula(name), uses=uses, result=verdict, params=params)
        return verdict

    def verdict_ricci_flat(self) -> None:
        n = self.n
        residues = [(f"R_{self.key(i, j)}", "ricci", self.key(i, j), self.ric[i][j])
                    for i in range(n) for j in range(i, n)]
        self._verdict("ricci_flat", "Ricci-flat: every component of the Ricci tensor vanishes.", residues,
                      ("ricci/symmetry",) + tuple(s.id for s in self.tracer.steps if s.id.startswith("ricci/") and s.kind == "component"))

    def verdict_einstein_space(self) -> None:
        n, A = self.n, self.A
        lam = self.R_scalar / n
        self.results["einstein_constant"] = self.expr(lam)
        residues = [(f"R_{self.key(i, j)} - lambda g_{self.key(i, j)}", "einstein_space", self.key(i, j),
                     self.ric[i][j] - lam * self.g[i][j]) for i in range(n) for j in range(i, n)]
        extra = f"; lambda = R/{n} = {self.expr(lam)}"
        params = {"lambda": self.expr(lam)}
        if n == 2:
            constant = self.constancy(lam)
            params["lambda_constant"] = constant
            extra += "; in two dimensions every metric satisfies R_ij = (R/2) g_ij"
            if constant is False:
                extra += (", and here lambda = R/2 is not constant: this is that identity, not an Einstein space "
                          "with a constant lambda (the surface does not have constant curvature)")
            elif constant:
                extra += ", and here lambda is constant: a surface of constant curvature"
        self._verdict("einstein_space", f"Einstein manifold: R_ij = lambda g_ij with lambda = R/{n}.", residues,
                      ("scalar", "metric", "ricci/symmetry"), extra, params)

    def constancy(self, element) -> bool | None:
        """Whether ``element`` is constant: True when every coordinate derivative vanishes, False when one
        does not, None when the zero test cannot decide one."""
        undecided = False
        for i in range(self.n):
            test = self.A.zero_test(self.A.diff(element, i))
            if test.vanishes is False:
                return False
            undecided = undecided or test.vanishes is None
        return None if undecided else True

    def riemann_lowered(self) -> None:
        n, A, g, R = self.n, self.A, self.g, self.R
        low = {}
        comps = {}
        for a, b, c, d in _independent_riemann_indices(n):
            value = A.zero
            for e in range(n):
                if not self.is_zero(g[a][e]) and not self.is_zero(R[e, b, c, d]):
                    value = value + g[a][e] * R[e, b, c, d]
            low[a, b, c, d] = value
            if not self.is_zero(value):
                comps[self.key(a, b, c, d)] = self.expr(value)
        self.Rdown = low
        pair_residues = []
        for a, b, c, d in _independent_riemann_indices(n):
            # R_abcd = R_cdab and the first Bianchi identity, using R^e_bcd for the other orderings
            pair = A.zero
            for e in range(n):
                if not self.is_zero(g[c][e]) and not self.is_zero(R[e, d, a, b]):
                    pair = pair + g[c][e] * R[e, d, a, b]
            pair_residues.append(pair - low[a, b, c, d])
        cyclic_residues = [self.full_lowered(a, b, c, d) + self.full_lowered(a, c, d, b) + self.full_lowered(a, d, b, c)
                           for a, b, c, d in _first_bianchi_indices(n)]
        self.results["riemann_lowered"] = comps
        self.record(id="riemann_lowered", kind="lowering", quantity="riemann_lowered",
                    annotation="Riemann tensor with all indices down, R_abcd = g_ae R^e_bcd, for a < b, c < d, "
                               "(a,b) <= (c,d); the others follow from R_abcd = -R_bacd = -R_abdc = R_cdab.",
                    formula=formula("riemann_lowered"), uses=("metric", "riemann"), result=comps)
        self.record(id="riemann_lowered/pair_symmetry", kind="check", quantity="riemann_lowered", component="pair_symmetry",
                    annotation="Pair exchange symmetry R_abcd = R_cdab holds for the lowered components.",
                    formula=r"R_{abcd} - R_{cdab} = 0", uses=("riemann_lowered",),
                    **self.checked("R_abcd = R_cdab", pair_residues,
                                                 "R_abcd - R_cdab on the independent components"))
        self.record(id="riemann_lowered/first_bianchi", kind="check", quantity="riemann_lowered", component="first_bianchi",
                    annotation="First Bianchi identity: the cyclic sum R_abcd + R_acdb + R_adbc vanishes.",
                    formula=r"R_{abcd} + R_{acdb} + R_{adbc} = 0", uses=("riemann_lowered",),
                    **self.checked("R_a[bcd] = 0", cyclic_residues,
                                                 "the cyclic sums with b < c < d"))

    def full_lowered(self, a, b, c, d):
        sign, canonical = canonical_lowered((a, b, c, d))
        if sign == 0:
            return self.A.zero
        value = self.Rdown[canonical]
        return value if sign == 1 else -value

    def verdict_constant_curvature(self) -> None:
        n, g = self.n, self.g
        k = self.R_scalar / (n * (n - 1))
        residues = []
        for a, b, c, d in _independent_riemann_indices(n):
            residues.append((f"R_{self.key(a, b, c, d)} - k(...)", "constant_curvature", self.key(a, b, c, d),
                             self.Rdown[a, b, c, d] - k * (g[a][c] * g[b][d] - g[a][d] * g[b][c])))
        for i in range(n):
            residues.append((f"d_{self.x[i].name} k", "derivative_of_k", self.x[i].name, self.A.diff(k, i)))
        self.results["sectional_curvature_if_constant"] = self.expr(k)
        self._verdict("constant_curvature", "Constant curvature: R_abcd = k (g_ac g_bd - g_ad g_bc) with constant k = R/(n(n-1)).",
                      residues, ("riemann_lowered", "scalar", "metric"), f"; k = {self.expr(k)}",
                      {"k": self.expr(k)})

    def kretschmann(self) -> None:
        """K = R_abcd R^abcd = 4 tr(G R G R) over pairs A = (a < b): R_AB = R_abcd with A = (a,b), B = (c,d),
        and G^AB = g^ac g^bd - g^ad g^bc the inverse metric on pairs, so R^AB = G^AE R_EF G^FB."""
        n, A, ginv = self.n, self.A, self.ginv
        indices = list(_independent_riemann_indices(n))
        pairs = [(a, b) for a in range(n) for b in range(a + 1, n)]
        bivector_inverse = [[ginv[a][c] * ginv[b][d] - ginv[a][d] * ginv[b][c] for c, d in pairs] for a, b in pairs]
        lowered = [[self.full_lowered(a, b, c, d) for c, d in pairs] for a, b in pairs]
        mixed = []  # (G R)^A_B
        for row, G_row in enumerate(bivector_inverse):
            self.progress(f"kretschmann pair row {row + 1}/{len(pairs)}", row, len(pairs))
            entries = []
            for column in range(len(pairs)):
                total = A.zero
                for middle, G_entry in enumerate(G_row):
                    if not self.is_zero(G_entry) and not self.is_zero(lowered[middle][column]):
                        total = total + G_entry * lowered[middle][column]
                entries.append(total)
            mixed.append(entries)
        value = A.zero
        for row in range(len(pairs)):
            for column in range(len(pairs)):
                if not self.is_zero(mixed[row][column]) and not self.is_zero(mixed[column][row]):
                    value = value + mixed[row][column] * mixed[column][row]
        value = value * 4
        self.results["kretschmann"] = self.expr(value)
        self.record(id="kretschmann", kind="invariant", quantity="kretschmann",
                    annotation="Kretschmann scalar: the full contraction of the Riemann tensor with itself, "
                               "summed as 4 times the sum over a < b and c < d.",
                    formula=formula("kretschmann"), uses=("riemann_lowered", "inverse_metric"),
                    result=self.results["kretschmann"], params={"independent_lowered_components": len(indices)})

    def weyl(self) -> None:
        n, A, g, ric = self.n, self.A, self.g, self.ric
        if n == 3:
            self.cotton()
            return
        if n < 4:
            reason = "in two dimensions every metric is locally conformally flat (isothermal coordinates exist)"
            verdict = Verdict("Conformally flat.", True, reason)
            self.results.setdefault("verdicts", {})["conformally_flat"] = {"holds": verdict.holds, "evidence": reason}
            self.record(id="verdict/conformally_flat", kind="verdict", quantity="conformally_flat", annotation=verdict.statement,
                        formula=formula("conformally_flat"), uses=("metric",), result=verdict)
            return
        Rs = self.R_scalar
        comps = {}
        residues = []
        self.weyl_elements = {}
        c1 = sympy.Rational(1, n - 2)
        c2 = sympy.Rational(1, (n - 1) * (n - 2))
        for a, b, c, d in _independent_riemann_indices(n):
            self.progress(f"weyl {self.key(a, b, c, d)}", 0, 1)
            value = (self.Rdown[a, b, c, d]
                     - (g[a][c] * ric[b][d] - g[a][d] * ric[b][c] - g[b][c] * ric[a][d] + g[b][d] * ric[a][c]) * c1
                     + Rs * (g[a][c] * g[b][d] - g[a][d] * g[b][c]) * c2)
            residues.append((f"C_{self.key(a, b, c, d)}", "weyl", self.key(a, b, c, d), value))
            self.weyl_elements[a, b, c, d] = value
            if not self.is_zero(value):
                comps[self.key(a, b, c, d)] = self.expr(value)
        self.results["weyl"] = comps
        self.record(id="weyl", kind="tensor", quantity="weyl",
                    annotation="Weyl tensor with all indices down, for a < b, c < d, (a,b) <= (c,d); "
                               "components not listed vanish.",
                    formula=formula("weyl"), uses=("riemann_lowered", "ricci", "scalar", "metric"), result=comps)
        self._verdict("conformally_flat", "Conformally flat: the Weyl tensor vanishes.", residues, ("weyl",))

    def cotton(self) -> None:
        """Three dimensions: the Weyl tensor vanishes identically, and the metric is locally conformally flat
        exactly when the Cotton tensor C_abc = nabla_c P_ab - nabla_b P_ac vanishes, P_ab = R_ab - R g_ab / 4
        the Schouten tensor (Eisenhart, Riemannian Geometry, sec. 28).  With nabla g = 0,
        C_abc = nabla_c R_ab - nabla_b R_ac + (g_ac d_b R - g_ab d_c R) / 4, antisymmetric in b, c."""
        n, A, g, ric, Gam, Rs = self.n, self.A, self.g, self.ric, self.gamma, self.R_scalar

        def nabla_ricci(c: int, a: int, b: int):  # nabla_c R_ab = d_c R_ab - Gamma^e_ca R_eb - Gamma^e_cb R_ae
            value = A.diff(ric[a][b], c)
            for e in range(n):
                if not self.is_zero(Gam[e][c][a]) and not self.is_zero(ric[e][b]):
                    value = value - Gam[e][c][a] * ric[e][b]
                if not self.is_zero(Gam[e][c][b]) and not self.is_zero(ric[a][e]):
                    value = value - Gam[e][c][b] * ric[a][e]
            return value

        dR = [A.diff(Rs, i) for i in range(n)]
        quarter = sympy.Rational(1, 4)
        step_components, stored, residues = {}, {}, []
        for a in range(n):
            for b in range(n):
                for c in range(b + 1, n):
                    self.progress(f"cotton {self.key(a, b, c)}", 0, 1)
                    value = (nabla_ricci(c, a, b) - nabla_ricci(b, a, c)
                             + (g[a][c] * dR[b] - g[a][b] * dR[c]) * quarter)
                    residues.append((f"Cotton_{self.key(a, b, c)}", "cotton", self.key(a, b, c), value))
                    if not self.is_zero(value):
                        step_components[self.key(a, b, c)] = self.expr(value)
                        stored[self.key(a, b, c)] = self.expr(value)
                        stored[self.key(a, c, b)] = -self.expr(value)
        self.results["cotton"] = dict(sorted(stored.items(), key=lambda kv: self._order(kv[0])))
        self.record(id="cotton", kind="tensor", quantity="cotton",
                    annotation="Cotton tensor with all indices down, for b < c (C_acb = -C_abc); "
                               "components not listed vanish.",
                    formula=formula("cotton"), uses=("ricci", "christoffel", "scalar", "metric"),
                    result=step_components)
        self._verdict("conformally_flat", "Conformally flat: the Cotton tensor vanishes.", residues, ("cotton",),
                      verdict_formula=r"\mathcal{C}_{abc} = 0 \quad (n = 3)")

    def numeric_verification(self) -> None:
        m = self.metric
        check = numeric_check(m.coordinates, m.matrix, m.parameters, m.functions, self.results)
        holds = None if not check.points else check.passed
        verdict = Verdict("The symbolic Christoffel symbols, Riemann and Ricci tensors and scalar curvature agree "
                          "with an independent numeric computation.", holds, _numeric_evidence(check))
        self.results["numeric_verification"] = {
            "passed": holds, "note": check.note, "deviations": dict(check.deviations), "tolerance": check.tolerance,
            "digits": check.digits, "points": [dict(p) for p in check.points],
            "parameters": dict(check.parameters), "functions": dict(check.functions)}
        self.record(id="numeric_verification", kind="numeric check",
                    annotation="At random points the metric is evaluated with mpmath and its curvature computed by "
                               "finite differences, sharing no code with the symbolic route; the symbolic results "
                               "are evaluated at the same points and compared.",
                    formula=r"\max_{\text{components}} \frac{|X_{\text{symbolic}} - X_{\text{numeric}}|}"
                            r"{\max(|X_{\text{symbolic}}|, |X_{\text{numeric}}|, \text{floor})}",
                    uses=("christoffel", "riemann", "ricci", "scalar"), result=verdict,
                    params={"points": [dict(p) for p in check.points], "parameters": dict(check.parameters),
                            "functions": dict(check.functions), "digits": check.digits,
                            "tolerance": check.tolerance, "deviations": dict(check.deviations)})

    def bianchi(self) -> None:
        n, A, G, ginv, Gam = self.n, self.A, self.G, self.ginv, self.gamma
        residues = []
        for b in range(n):
            self.progress(f"bianchi, component {b + 1}/{n}", b, n)
            total = A.zero
            for a in range(n):
                for c in range(n):
                    if self.is_zero(ginv[a][c]):
                        continue
                    term = A.diff(G[a][b], c)
                    for e in range(n):
                        if not self.is_zero(Gam[e][c][a]) and not self.is_zero(G[e][b]):
                            term = term - Gam[e][c][a] * G[e][b]
                        if not self.is_zero(Gam[e][c][b]) and not self.is_zero(G[a][e]):
                            term = term - Gam[e][c][b] * G[a][e]
                    total = total + ginv[a][c] * term
            residues.append((f"nabla^a G_a{self.x[b].name}", "divergence", self.x[b].name, total))
        self._verdict("bianchi", "Contracted Bianchi identity: the Einstein tensor is divergence-free.",
                      residues, ("einstein", "christoffel", "inverse_metric"))


_ACTIVE_CHAIN: "_Chain | None" = None


def _snapshot(results: dict) -> dict:
    """A copy of the results that later stages cannot change: they add keys, and add entries to the
    dictionaries of earlier stages (the verdicts), but never change an expression."""
    return {key: dict(value) if isinstance(value, dict) else value for key, value in results.items()}


def _numeric_evidence(check) -> str:
    deviations = ", ".join(f"{q} {v}" for q, v in check.deviations.items())
    text = (f"largest relative deviations at {len(check.points)} random points, {check.digits} digits: "
            f"{deviations} (tolerance {check.tolerance})")
    return text + (f"; {check.note}" if check.note else "")


def _quiet_worker() -> None:
    """In a forked worker: die with the parent and quietly.

    The parent stops its pool with SIGTERM (which here takes the default,
    silent action instead of the parent's cleanup handler); Ctrl-C and the
    parent's alarm are the parent's business; and Linux sends SIGTERM to the
    worker when the parent dies, so no orphan goes on computing or writes a
    traceback into a closed pipe.
    """
    import signal
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    signal.signal(signal.SIGHUP, signal.SIG_DFL)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGALRM, signal.SIG_IGN)
    try:
        import ctypes
        ctypes.CDLL(None, use_errno=True).prctl(1, signal.SIGTERM)  # PR_SET_PDEATHSIG
    except (AttributeError, OSError):
        pass
    parent = multiprocessing.parent_process()
    if parent is not None and os.getppid() != parent.pid:  # the parent died before the line above took effect
        os._exit(0)


def _compute_chunk(job: tuple[str, list[tuple]]) -> list:
    """In a forked worker: compute a share of the components and pack them."""
    method, items = job
    chain = _ACTIVE_CHAIN
    out = []
    for item in items:
        element = getattr(chain, method)(*item)
        out.append((chain.A.pack(element), chain.A.to_expr(element)))
    return out


def metric_signature(matrix: sympy.Matrix) -> str | None:
    """The signs of the metric's eigenvalues, "-+++" style, when the declared signs fix them: for a diagonal
    metric whose every component has a sign by sympy's assumptions.  None otherwise (not decided)."""
    n = matrix.rows
    if any(matrix[i, j] != 0 for i in range(n) for j in range(n) if i != j):
        return None
    signs = []
    for i in range(n):
        entry = matrix[i, i]
        if entry.is_positive:
            signs.append("+")
        elif entry.is_negative:
            signs.append("-")
        else:
            return None
    return "".join(signs)


#: The conventions as data, for programs reading the trace (the words are in CONVENTIONS).
CONVENTION_DATA = {
    "line_element": {"summed_over": "all i and j", "cross_term_2f_gives": "g_ij = g_ji = f"},
    "christoffel": {"kind": "second", "symmetric_indices": [2, 3]},
    "riemann": {"upper_index": 1, "derivative_indices": [3, 4], "sign": "a round sphere has R > 0",
                "lowered": "R_abcd = g_ae R^e_bcd"},
    "ricci": {"contracted_indices_of_riemann": [1, 3]},
    "scalar": {"from": "g^bd R_bd"},
    "einstein": {"definition": "G_ij = R_ij - R g_ij / 2"},
}


def canonical_lowered(indices: tuple[int, int, int, int]) -> tuple[int, tuple[int, int, int, int]]:
    """(sign, indices) with a < b, c < d and (a, b) <= (c, d) for a tensor with the symmetries of R_abcd;
    sign 0 when the component vanishes by antisymmetry."""
    a, b, c, d = indices
    if a == b or c == d:
        return 0, indices
    sign = 1
    if a > b:
        a, b, sign = b, a, -sign
    if c > d:
        c, d, sign = d, c, -sign
    if (a, b) > (c, d):
        a, b, c, d = c, d, a, b
    return sign, (a, b, c, d)


def _first_bianchi_indices(n: int):
    """(a, b, c, d) with b < c < d: the cyclic sums that are not trivially zero."""
    for a in range(n):
        for b, c, d in itertools.combinations(range(n), 3):
            yield a, b, c, d


def _is_canonical(order: tuple, rank: int) -> bool:
    if rank == 3:
        return order[1] <= order[2]
    return True


def _independent_riemann_indices(n: int) -> Iterable[tuple[int, int, int, int]]:
    pairs = [(a, b) for a in range(n) for b in range(a + 1, n)]
    for p, (a, b) in enumerate(pairs):
        for c, d in pairs[p:]:
            yield a, b, c, d


def _determinant(rows: Sequence[Sequence], A):
    """Determinant by expansion along the first row, with minors memoised."""
    size = len(rows)
    memo: dict = {}

    def minor(first_row: int, cols: tuple) -> object:
        if not cols:
            return A.one
        key = (first_row, cols)
        if key in memo:
            return memo[key]
        total = A.zero
        for position, col in enumerate(cols):
            entry = rows[first_row][col]
            if entry == 0 or entry == A.zero:
                continue
            rest = minor(first_row + 1, cols[:position] + cols[position + 1:])
            term = entry * rest
            total = total + term if position % 2 == 0 else total - term
        memo[key] = total
        return total

    return minor(0, tuple(range(size)))


def _inverse(rows: Sequence[Sequence], A) -> list[list]:
    """Inverse as adjugate over determinant."""
    size = len(rows)
    if size == 1:
        return [[A.one / rows[0][0]]]
    det = _determinant(rows, A)
    inv = [[None] * size for _ in range(size)]
    for i in range(size):
        for j in range(size):
            sub = [[rows[r][c] for c in range(size) if c != i] for r in range(size) if r != j]
            cof = _determinant(sub, A)
            inv[i][j] = cof / det if (i + j) % 2 == 0 else -cof / det
    return inv
