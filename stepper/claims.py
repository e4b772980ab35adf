"""Read a claims file: results someone computed by hand, to be audited.

A claims file is TOML::

    metric = "compact_star_exterior.toml"   # the metric file, relative to this file
    title = "Checking the notes for Tuesday's seminar"   # optional

    constants = ["M"]            # optional: integration constants the claims use
                                 #   (C1, C2, ... are always known)

    [[claim]]
    quantity = "christoffel"     # a claimable quantity of stepper.quantities
    component = "r,t,t"          # coordinate names; omit for scalars; for a pressure the
                                 # frame direction, for ansatz_solution the unknown function
    value = "M*(r - 2*M)/r^3"    # stepper's plain syntax (derivatives: diff(w, x), diff(w, x, y), diff(w, x, 2)) ...
    # latex = '''\\frac{M(r-2M)}{r^{3}}'''  # ... or LaTeX as printed in a paper: a triple-quoted literal string
    #                                    #     needs no doubled backslashes and may hold primes (a'(t))
    label = "my notes, eq. 4"    # optional, shown in the report
    # indices = "ud"             # optional: the index positions, one letter per index, u up, d down
    #                            # (metric, Ricci, Einstein, stress-energy, Riemann, Weyl; default: the
    #                            # quantity's own, as in stepper.quantities); G^t_t is einstein "t,t" "ud"

Matter quantities (stress_energy, ..., pressure) need a [matter] table in the
metric file, ansatz_solution an [ansatz] table; without them the claims are
audited as "cannot be decided".  A geodesic acceleration du^a/dtau is written
with the velocity symbols u_<coordinate> (u_r for dr/dtau), which claims of
that quantity may use.  Frame components are named by the coordinate each
frame vector starts from ("t,t" is T_(t)(t)).  An ansatz solution agrees when
it is stepper's general solution for some values of the integration
constants, the same values for every claim of the file.

Every text is read by stepper's own parsers; nothing is evaluated as code.
A claim that cannot be read is kept, with the reason, and audited as
unreadable; the other claims are still checked.
"""

from __future__ import annotations

import shlex
from dataclasses import dataclass
from pathlib import Path

import sympy

from .errors import InputError
from .latex_input import parse_latex
from .metric import Metric
from .metricfile import load_metric, read_toml
from .parse import Vocabulary, check_identifier, parse_expression
from .quantities import QUANTITIES, claimable, index_positions

#: Integration constants a claim may always use (the names stepper gives them).
DEFAULT_CONSTANTS = tuple(f"C{k}" for k in range(1, 10))

CLAIM_KEYS = ("quantity", "component", "value", "latex", "label", "indices")
FILE_KEYS = ("metric", "title", "constants", "claim")


@dataclass(frozen=True)
class Claim:
    """One claimed result; ``expr`` is None when the text could not be read (``problem`` says why)."""

    number: int
    label: str
    quantity: str
    component: str
    text: str
    syntax: str
    expr: sympy.Expr | None
    problem: str = ""
    #: The index positions as the claims file gave them ("ud": first up, second down); "" when not given.
    indices: str = ""

    @property
    def positions(self) -> str:
        """The index positions claimed: ``indices`` when given, else the quantity's own (stepper.quantities)."""
        return self.indices or QUANTITIES[self.quantity].positions

    @property
    def name(self) -> str:
        where = f" {self.component}" if self.component else ""
        indices = f", indices {self.indices}" if self.indices else ""
        return f"claim {self.number} ({self.quantity}{where}{indices})"


def metric_vocabulary(metric: Metric) -> Vocabulary:
    """The names a claim about ``metric`` may use: those its file declared (with the symbols its
    [matter] and [ansatz] tables bring in, such as Lambda, G and c)."""
    symbols = {s.name: s for s in tuple(metric.coordinates) + tuple(metric.parameters)}
    for s in getattr(metric, "extra_symbols", ()):
        symbols.setdefault(s.name, s)
    functions = {f.func.__name__: f for f in metric.functions}
    return Vocabulary(symbols, functions, dict(metric.abbreviations), coordinates=tuple(metric.names))


def velocity_symbols(metric: Metric) -> dict[str, sympy.Symbol]:
    """u_x standing for dx/dtau, as the geodesic equations write them."""
    from .geodesics import velocity_symbols as symbols_for
    return {s.name: s for s in symbols_for(metric)}


def constant_symbols(metric: Metric, names: tuple[str, ...] = ()) -> dict[str, sympy.Symbol]:
    """Integration constants: C1, ..., C9 and the names a claims file lists, unless the metric declares them."""
    taken = set(metric_vocabulary(metric).symbols) | {f.func.__name__ for f in metric.functions} | \
        {name for name, _ in metric.abbreviations}
    return {name: sympy.Symbol(name, real=True) for name in DEFAULT_CONSTANTS + tuple(names) if name not in taken}


def claim_vocabulary(metric: Metric, quantity: str, constants: tuple[str, ...] = ()) -> Vocabulary:
    """The names a claim of ``quantity`` may use: the metric's, plus the velocity symbols u_x for a
    geodesic acceleration and integration constants for an ansatz solution."""
    base = metric_vocabulary(metric)
    if quantity == "geodesic_acceleration":
        return Vocabulary({**base.symbols, **velocity_symbols(metric)}, base.functions, base.abbreviations,
                          coordinates=base.coordinates)
    if quantity == "ansatz_solution":
        return Vocabulary({**constant_symbols(metric, constants), **base.symbols}, base.functions, base.abbreviations,
                          coordinates=base.coordinates)
    return base


def load_claims(path: str | Path) -> tuple[Metric, str, list[Claim]]:
    """The metric the claims are about, the title, and the claims."""
    path = Path(path)
    data = read_toml(path)
    if "metric" not in data and "claim" not in data and any(
            key in data for key in ("coordinates", "line_element", "components")):
        raise InputError(f"{path.name} is a metric file; stepper audit expects a claims file (see README, "
                         f"'Auditing a hand calculation') — to derive the metric use: "
                         f"stepper derive {shlex.quote(str(path))}")
    unknown = [k for k in data if k not in FILE_KEYS]
    if unknown:
        raise InputError(f"unknown key '{unknown[0]}' in {path.name} (known keys: {', '.join(FILE_KEYS)})")
    metric_name = data.get("metric")
    if not isinstance(metric_name, str) or not metric_name:
        raise InputError(f"{path.name} must name its metric file, e.g. metric = \"my_metric.toml\"")
    metric = load_metric(path.parent / metric_name)
    title = data.get("title", f"Claims in {path.name}")
    if not isinstance(title, str):
        raise InputError("'title' must be text")
    constants = data.get("constants", [])
    if not isinstance(constants, list) or not all(isinstance(c, str) for c in constants):
        raise InputError("'constants' must be a list of names, e.g. constants = [\"M\"]")
    declared = metric_vocabulary(metric)
    for name in constants:
        check_identifier(name, "constants")
        if name in declared.symbols or name in declared.functions or name in declared.abbreviations:
            raise InputError(f"constants: '{name}' is already declared by the metric file")
    entries = data.get("claim", [])
    if not isinstance(entries, list) or not all(isinstance(e, dict) for e in entries) or not entries:
        raise InputError(f"{path.name} has no claims: add [[claim]] tables")
    return metric, title, [read_claim(number, entry, metric, None, tuple(constants))
                           for number, entry in enumerate(entries, start=1)]


def read_claim(number: int, entry: dict, metric: Metric, vocabulary: Vocabulary | None = None,
               constants: tuple[str, ...] = ()) -> Claim:
    """One [[claim]] table; structural mistakes are errors, unreadable expressions are kept.

    ``vocabulary`` None means the one :func:`claim_vocabulary` gives for the claim's quantity."""
    where = f"claim {number}"
    unknown = [k for k in entry if k not in CLAIM_KEYS]
    if unknown:
        raise InputError(f"{where}: unknown key '{unknown[0]}' (known keys: {', '.join(CLAIM_KEYS)})")
    quantity = entry.get("quantity")
    known = claimable()
    if quantity not in known:
        raise InputError(f"{where}: quantity must be one of {', '.join(known)}, not {quantity!r}")
    rank = known[quantity].rank
    component = entry.get("component", "")
    if not isinstance(component, str):
        raise InputError(f"{where}: component must be text such as \"r,t,t\"")
    parts = [p.strip() for p in component.split(",")] if component.strip() else []
    if len(parts) != rank:
        raise InputError(f"{where}: {quantity} needs {rank} coordinate names in 'component', got {len(parts)}")
    if known[quantity].positions == "n":  # the component names a free function
        functions = [f.func.__name__ for f in metric.functions]
        if parts and parts[0] not in functions:
            raise InputError(f"{where}: '{parts[0]}' in component is not a declared function "
                             f"({', '.join(functions) or 'the metric has none'})")
    else:
        for part in parts:
            if part not in metric.names:
                raise InputError(f"{where}: '{part}' in component is not a coordinate ({', '.join(metric.names)})")
    if quantity == "pressure" and metric.matter is not None and parts[0] == metric.matter.time.name:
        raise InputError(f"{where}: a pressure is along a spatial frame direction; '{parts[0]}' is the time "
                         "of the frame (claim the energy_density instead)")
    label = entry.get("label", "")
    if not isinstance(label, str):
        raise InputError(f"{where}: label must be text")
    indices = read_indices(where, entry, quantity)
    has_plain, has_latex = "value" in entry, "latex" in entry
    if has_plain == has_latex:
        raise InputError(f"{where}: give exactly one of 'value' (plain syntax) and 'latex'")
    syntax = "plain" if has_plain else "latex"
    text = entry["value" if has_plain else "latex"]
    if not isinstance(text, str):
        text = str(text) if isinstance(text, int) and not isinstance(text, bool) else None
    if text is None:
        raise InputError(f"{where}: the claimed value must be text")
    if vocabulary is None:
        vocabulary = claim_vocabulary(metric, quantity, constants)
    reader = parse_expression if syntax == "plain" else parse_latex
    try:
        expr = reader(text, vocabulary, where)
        problem = ""
    except InputError as err:
        expr, problem = None, err.message
    return Claim(number, label, quantity, ",".join(parts), text, syntax, expr, problem, indices)


def read_indices(where: str, entry: dict, quantity: str) -> str:
    """The claim's ``indices``: one letter per index, u (up) or d (down); "" when not given.  Only the
    quantities that are one index position of a tensor (stepper.quantities, ``tensor``) take it."""
    if "indices" not in entry:
        return ""
    value = entry["indices"]
    q = QUANTITIES[quantity]
    if not index_positions(quantity):
        tensors = ", ".join(name for name, other in claimable().items() if other.tensor == name)
        what = "it is a scalar" if q.rank == 0 else "its indices stay where stepper.quantities puts them"
        raise InputError(f"{where}: {quantity} has no index positions to choose ({what}); 'indices' is for "
                         f"the tensors {tensors} and their mixed forms")
    example = "u" + "d" * (q.rank - 1)
    if not isinstance(value, str) or not value or set(value) - {"u", "d"}:
        shown = (repr(value) if len(value) <= 12 else "other letters") if isinstance(value, str) \
            else type(value).__name__
        raise InputError(f"{where}: 'indices' must be one letter per index, u (up) or d (down), such as "
                         f"\"{example}\"; got {shown}")
    if len(value) != q.rank:
        raise InputError(f"{where}: {quantity} has {q.rank} indices, so 'indices' needs {q.rank} letters "
                         f"(u up, d down), such as \"{example}\"; got {len(value)}")
    return value
