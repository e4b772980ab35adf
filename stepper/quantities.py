"""The registry of quantities: what each quantity stepper computes *is*, declared once.

Every other module reads this table: the chain for the general formula it records, the claims reader for
what may be claimed and how many indices a component names, the audit for where a value is kept and how to
say the quantity in words, the LaTeX writer for the symbol and index positions, the report for which step
results are tables of components, the command line for the words of a verdict.  Adding a quantity starts
here (see DEVELOPERS.md, "Adding a quantity").

Index positions are written one letter per index: ``u`` upper, ``d`` lower (coordinate indices), ``f`` a
frame index (named after the coordinate its frame vector starts from), ``v`` a velocity component
(du^a/dtau), ``n`` the name of a free function.  Components are keyed by comma-joined names ("r,t,t").
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping


@dataclass(frozen=True)
class Quantity:
    """One quantity.

    ``symbol`` is the TeX head (``\\Gamma``, ``R``); ``staggered`` puts an empty group between upper and
    lower indices (R^a{}_{bcd}; a Christoffel symbol is not staggered).  ``stored`` says which orderings
    a results table lists and how the others follow.  ``result_key`` is where the final values are kept in
    the results (default: the name), ``step`` the id of the step holding the whole quantity (default: the
    name).  ``requires`` is the metric-file table without which it is not computed ("matter", "ansatz")
    or "invariants" (skipped by --skip-invariants); ``kappa_scaled`` marks the matter quantities that carry
    1/kappa; ``claimable`` whether a claims file may name it.  ``tensor`` names the tensor a quantity is
    one index position of (G_ij and G^i_j are both "einstein"): a claim of it may ask for any position of
    that tensor (``indices = "ud"``), read from the quantity in that position or, when the registry has
    none, raised or lowered from the nearest one (see :func:`route`).
    """

    name: str
    words: str
    positions: str
    symbol: str
    formula: str
    stored: str = "all orderings"
    staggered: bool = True
    claimable: bool = False
    result_key: str = ""
    step: str = ""
    requires: str = ""
    kappa_scaled: bool = False
    tensor: str = ""

    @property
    def rank(self) -> int:
        return len(self.positions)

    @property
    def upper(self) -> int:
        """How many leading indices are upper."""
        return len(self.positions) - len(self.positions.lstrip("u"))

    @property
    def in_frame(self) -> bool:
        return "f" in self.positions

    @property
    def key(self) -> str:
        return self.result_key or self.name

    @property
    def step_id(self) -> str:
        return self.step or self.name


_RIEMANN_ORDER = "a < b, c < d and (a, b) <= (c, d); the others follow from R_abcd = -R_bacd = -R_abdc = R_cdab"

QUANTITIES: Mapping[str, Quantity] = {q.name: q for q in (
    Quantity("metric", "metric", "dd", "g", r"ds^2 = g_{ij}\,dx^i\,dx^j", "both orders of i, j", claimable=True,
             tensor="metric"),
    Quantity("metric_derivatives", "first derivatives of the metric", "ddd", r"\partial", r"\partial_k g_{ij}",
             "keyed 'k:i,j' with i <= j; d_k g_ji = d_k g_ij"),
    Quantity("determinant", "determinant of the metric", "", "g", r"g = \det(g_{ij})", claimable=True),
    Quantity("inverse_metric", "inverse metric", "uu", "g", r"g^{ik} g_{kj} = \delta^i_j", "both orders of i, j",
             claimable=True, tensor="metric"),
    Quantity("christoffel", "Christoffel symbol", "udd", r"\Gamma",
             r"\Gamma^a_{bc} = \tfrac12 g^{ad}\left(\partial_b g_{dc} + \partial_c g_{db} - \partial_d g_{bc}\right)",
             "both orders of b, c (Gamma^a_cb = Gamma^a_bc)", staggered=False, claimable=True),
    Quantity("contracted_christoffel", "contracted Christoffel symbol", "d", r"\Gamma",
             r"\Gamma^l_{li} = \partial_i \ln\sqrt{|g|} = \frac{\partial_i g}{2g}"),
    Quantity("riemann", "Riemann tensor", "uddd", "R",
             (r"R^a{}_{bcd} = \partial_c \Gamma^a_{db} - \partial_d \Gamma^a_{cb} "
              r"+ \Gamma^a_{ce}\Gamma^e_{db} - \Gamma^a_{de}\Gamma^e_{cb}"),
             "both orders of c, d (R^a_bdc = -R^a_bcd)", claimable=True, tensor="riemann"),
    Quantity("ricci", "Ricci tensor", "dd", "R", r"R_{bd} = R^a{}_{bad}", "both orders (symmetric)", claimable=True,
             tensor="ricci"),
    Quantity("ricci_by_trace_identity", "Ricci tensor by the trace identity", "dd", "R^{(2)}",
             (r"R_{ij} = \partial_l \Gamma^l_{ij} - \partial_i\partial_j \ln\sqrt{|g|} "
              r"+ \Gamma^a_{ij}\,\partial_a \ln\sqrt{|g|} - \Gamma^l_{ia}\Gamma^a_{jl}"), "both orders (symmetric)"),
    Quantity("scalar", "scalar curvature", "", "R", r"R = g^{ij} R_{ij}", claimable=True),
    Quantity("einstein", "Einstein tensor", "dd", "G", r"G_{ij} = R_{ij} - \tfrac12 R\, g_{ij}",
             "both orders (symmetric)", claimable=True, tensor="einstein"),
    Quantity("ricci_mixed", "Ricci tensor with its first index raised", "ud", "R", r"R^a{}_b = g^{ac} R_{cb}",
             "every ordering", claimable=True, tensor="ricci"),
    Quantity("einstein_mixed", "Einstein tensor with its first index raised", "ud", "G",
             r"G^a{}_b = g^{ac} G_{cb} = R^a{}_b - \tfrac12 R\,\delta^a_b", "every ordering", claimable=True,
             tensor="einstein"),
    Quantity("riemann_lowered", "Riemann tensor with all indices down", "dddd", "R", r"R_{abcd} = g_{ae} R^e{}_{bcd}",
             _RIEMANN_ORDER, claimable=True, tensor="riemann"),
    Quantity("kretschmann", "Kretschmann scalar", "", "K", r"K = R_{abcd} R^{abcd}", claimable=True,
             requires="invariants"),
    Quantity("weyl", "Weyl tensor", "dddd", "C",
             (r"C_{abcd} = R_{abcd} - \frac{g_{ac}R_{bd} - g_{ad}R_{bc} - g_{bc}R_{ad} + g_{bd}R_{ac}}{n-2} "
              r"+ \frac{R\,(g_{ac}g_{bd} - g_{ad}g_{bc})}{(n-1)(n-2)}"), _RIEMANN_ORDER, claimable=True,
             requires="invariants", tensor="weyl"),
    # three dimensions only (where the Weyl tensor vanishes identically): P_ab = R_ab - R g_ab / 4 is the
    # Schouten tensor; the metric is locally conformally flat exactly when C_abc = 0 (Eisenhart, sec. 28)
    Quantity("cotton", "Cotton tensor", "ddd", r"\mathcal{C}",
             (r"\mathcal{C}_{abc} = \nabla_c P_{ab} - \nabla_b P_{ac} = \nabla_c R_{ab} - \nabla_b R_{ac} "
              r"+ \tfrac14 \left(g_{ac}\,\partial_b R - g_{ab}\,\partial_c R\right)"),
             "every ordering (antisymmetric in b, c: C_acb = -C_abc; the step lists b < c)", claimable=True,
             requires="invariants"),
    # four dimensions, Lorentzian signature (stepper.petrov): a null tetrad l.n = -1, m.mbar = 1 and the Weyl
    # tensor in it; the tetrad is the user's ([frame]) or built by stepper and recorded
    Quantity("null_tetrad", "null tetrad", "", "l",
             (r"l \cdot n = -1,\ m \cdot \bar m = 1,\quad l, n = (e_T \pm e_S)/\sqrt2,\quad "
              r"m = (e_P + i e_Q)/\sqrt2,\quad e_k = w_k/\sqrt{|N_k|}"), requires="invariants"),
    Quantity("weyl_scalars", "Weyl scalars", "", r"\Psi",
             (r"\Psi_0 = C_{abcd} l^a m^b l^c m^d,\quad \Psi_1 = C_{abcd} l^a n^b l^c m^d,\quad "
              r"\Psi_2 = C_{abcd} l^a m^b \bar m^c n^d,\quad \Psi_3 = C_{abcd} l^a n^b \bar m^c n^d,\quad "
              r"\Psi_4 = C_{abcd} n^a \bar m^b n^c \bar m^d"), "Psi0 ... Psi4", requires="invariants"),
    Quantity("field_equation", "field equation of the ansatz", "dd", "E", r"E_{ij} = G_{ij} + \Lambda g_{ij}",
             requires="ansatz"),
    Quantity("stress_energy", "stress-energy tensor", "dd", "T",
             r"T_{ij} = \frac{1}{\kappa}\left(G_{ij} + \Lambda g_{ij}\right)", "both orders (symmetric)",
             claimable=True, requires="matter", kappa_scaled=True, tensor="stress_energy"),
    Quantity("stress_energy_mixed", "stress-energy tensor with its first index raised", "ud", "T", r"T^i{}_j = g^{ik} T_{kj}",
             "every ordering", claimable=True, requires="matter", kappa_scaled=True, tensor="stress_energy"),
    Quantity("stress_energy_up", "stress-energy tensor with both indices raised", "uu", "T", r"T^{ij} = g^{ik} g^{jl} T_{kl}",
             "both orders (symmetric)", claimable=True, requires="matter", kappa_scaled=True,
             tensor="stress_energy"),
    Quantity("frame_stress_energy", "stress-energy tensor in the orthonormal frame", "ff", "T",
             r"T_{(a)(b)} = e_{(a)}{}^i e_{(b)}{}^j T_{ij}", "both orders (symmetric)", claimable=True,
             requires="matter", kappa_scaled=True),
    Quantity("frame_ricci", "Ricci tensor in the orthonormal frame", "ff", "R",
             r"R_{(a)(b)} = e_{(a)}{}^i e_{(b)}{}^j R_{ij}", "both orders (symmetric)", claimable=True,
             requires="matter"),
    Quantity("frame_riemann", "Riemann tensor in the orthonormal frame", "ffff", "R",
             r"R_{(a)(b)(c)(d)} = e_{(a)}{}^i e_{(b)}{}^j e_{(c)}{}^k e_{(d)}{}^l R_{ijkl}",
             _RIEMANN_ORDER + " (in frame order)", requires="matter"),
    Quantity("energy_density", "energy density", "", r"\rho", r"\rho = T_{(0)(0)}", claimable=True,
             step="density_and_pressures", requires="matter", kappa_scaled=True),
    Quantity("pressure", "pressures", "f", "p", r"p_{(k)} = T_{(k)(k)}", "one per spatial frame direction",
             claimable=True, result_key="pressures", step="density_and_pressures", requires="matter",
             kappa_scaled=True),
    # [matter.model] (stepper/models.py): the declared matter's own T_ab, its field equations, div T = 0
    Quantity("model_stress_energy", "stress-energy tensor of the matter model", "dd", r"\mathcal{T}",
             r"T_{ab} \text{ of the declared matter (perfect fluid, dust, scalar or electromagnetic field)}",
             "both orders (symmetric)", claimable=True, step="model/stress_energy", requires="matter"),
    Quantity("model_equation", "field equation of the matter model", "dd", "E",
             r"E_{ab} = G_{ab} + \Lambda g_{ab} - \kappa T_{ab}", requires="matter"),
    Quantity("model_conservation", "divergence of the matter model's stress-energy", "d", r"\nabla\!\cdot\!\mathcal{T}",
             r"\nabla_a T^a{}_b", "one per coordinate", claimable=True, step="model/conservation", requires="matter"),
    Quantity("model_solution", "equations of the matter model in textbook form", "n", "",
             r"\text{structure or expansion equations}", requires="matter"),
    Quantity("geodesic_acceleration", "geodesic acceleration", "v", "u",
             r"\frac{du^a}{d\tau} = -\Gamma^a_{bc}\, u^b u^c", "one per coordinate", claimable=True,
             result_key="geodesic_equations", step="geodesic_equations"),
    Quantity("ansatz_solution", "solution of the ansatz", "n", "", r"E_{ij}\bigl|_{\text{solution}} = 0",
             "one per unknown function", claimable=True, result_key="ansatz", step="ansatz/solution",
             requires="ansatz"),
)}


@dataclass(frozen=True)
class VerdictKind:
    """A yes/no statement stepper decides: its label in summaries and its formula."""

    name: str
    label: str
    formula: str


VERDICTS: Mapping[str, VerdictKind] = {v.name: v for v in (
    VerdictKind("ricci_flat", "Ricci-flat", r"R_{ij} = 0"),
    VerdictKind("einstein_space", "Einstein manifold", r"R_{ij} = \lambda g_{ij},\quad \lambda = R/n"),
    VerdictKind("constant_curvature", "Constant curvature",
                r"R_{abcd} = k\,(g_{ac}g_{bd} - g_{ad}g_{bc}),\quad k = \frac{R}{n(n-1)} \text{ constant}"),
    VerdictKind("conformally_flat", "Conformally flat", r"C_{abcd} = 0"),
    VerdictKind("algebraic_type", "Algebraic (Petrov) type",
                r"I = \Psi_0\Psi_4 - 4\Psi_1\Psi_3 + 3\Psi_2^2,\quad J = \det\begin{pmatrix} \Psi_4 & \Psi_3 & \Psi_2 \\ "
                r"\Psi_3 & \Psi_2 & \Psi_1 \\ \Psi_2 & \Psi_1 & \Psi_0 \end{pmatrix};\quad "
                r"\text{type I} \iff I^3 \ne 27 J^2"),
    VerdictKind("bianchi", "Contracted Bianchi identity",
                r"\nabla^a G_{ab} = g^{ac}\left(\partial_c G_{ab} - \Gamma^e_{ca} G_{eb} - \Gamma^e_{cb} G_{ae}\right) = 0"),
    VerdictKind("trace_free", "Trace-free stress-energy", r"T = T^i{}_i = 0"),
    VerdictKind("perfect_fluid", "Perfect fluid at rest in the frame", r"T_{ij} = (\rho + p)\, u_i u_j + p\, g_{ij}"),
)}


def claimable() -> dict[str, Quantity]:
    """The quantities a claims file may name, in registry order."""
    return {name: q for name, q in QUANTITIES.items() if q.claimable}


def formula(name: str) -> str:
    """The general formula of a quantity or a verdict."""
    if name in QUANTITIES:
        return QUANTITIES[name].formula
    return VERDICTS[name].formula


# index positions -----------------------------------------------------------------------------------
def index_positions(name: str) -> dict[str, Quantity]:
    """The registry's quantities of the tensor that ``name`` is one index position of, keyed by their
    positions ("dd", "ud", ...); empty when ``name`` has no index positions to choose."""
    tensor = QUANTITIES[name].tensor
    if not tensor:
        return {}
    return {q.positions: q for q in QUANTITIES.values() if q.tensor == tensor}


def in_position(name: str, positions: str) -> Quantity | None:
    """The registry's quantity of the same tensor as ``name`` in ``positions``, or None when there is none."""
    return index_positions(name).get(positions)


def route(name: str, positions: str) -> tuple[Quantity, str, tuple[int, ...]]:
    """Where the tensor of ``name`` in ``positions`` is computed from: the registry's quantity of that tensor
    whose positions differ in the fewest slots, every one raised or every one lowered (raising first on a
    tie, then registry order); with the kind of the step ("raising" or "lowering") and the slots it changes.
    Every tensor has a quantity with all indices down, so a route by raising always exists."""
    best = None
    for q in index_positions(name).values():
        changed = tuple(k for k, (old, new) in enumerate(zip(q.positions, positions)) if old != new)
        directions = {positions[k] for k in changed}
        if len(directions) > 1:
            continue
        kind = "lowering" if directions == {"d"} else "raising"
        rank = (len(changed), kind != "raising")
        if best is None or rank < best[0]:
            best = (rank, q, kind, changed)
    if best is None:
        raise ValueError(f"{name} has no index positions to compute {positions!r} from")
    return best[1], best[2], best[3]


_ORDINALS = ("first", "second", "third", "fourth", "fifth", "sixth")


def position_words(positions: str) -> str:
    """Index positions in words: "both indices down", "the first index up", "the first and second indices up"."""
    n = len(positions)
    ups = [k for k, p in enumerate(positions) if p == "u"]
    downs = [k for k, p in enumerate(positions) if p == "d"]
    every = "both" if n == 2 else "all"
    if not ups:
        return f"{every} indices down" if n > 1 else "the index down"
    if not downs:
        return f"{every} indices up" if n > 1 else "the index up"
    few, word = (ups, "up") if len(ups) <= len(downs) else (downs, "down")
    names = [_ORDINALS[k] if k < len(_ORDINALS) else f"index {k + 1}" for k in few]
    listed = names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]
    return f"the {listed} {'index' if len(few) == 1 else 'indices'} {word}"


def component_text(symbol: str, positions: str, names: list[str] | tuple[str, ...]) -> str:
    """A component in plain text with its index positions: G^t_t, G_tt, R^theta_phi,theta,phi (names of
    one character are run together, longer ones separated by commas)."""
    glue = "" if all(len(n) == 1 for n in names) else ","
    out, k = symbol.lstrip("\\"), 0
    while k < len(positions):
        end = k
        while end < len(positions) and positions[end] == positions[k]:
            end += 1
        out += ("^" if positions[k] == "u" else "_") + glue.join(names[k:end])
        k = end
    return out


def indexed_tex(symbol: str, positions: str, indices: list[str] | tuple[str, ...], staggered: bool = True) -> str:
    """A TeX head with its indices (each already TeX) placed by ``positions``, e.g. G^{t}{}_{t}; a staggered
    symbol puts an empty group where the indices change height."""
    out, k = symbol, 0
    while k < len(positions):
        end = k
        while end < len(positions) and positions[end] == positions[k]:
            end += 1
        if k and staggered:
            out += "{}"
        out += ("^" if positions[k] == "u" else "_") + "{" + "".join(indices[k:end]) + "}"
        k = end
    return out
