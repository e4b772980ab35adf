"""Read a claims file: results someone computed by hand, to be audited.

A claims file is TOML::

    metric = "compact_star_exterior.toml"   # the metric file, relative to this file
    title = "Checking the notes for Tuesday's seminar"   # optional

    [[claim]]
    quantity = "christoffel"     # one of QUANTITIES
    component = "r,t,t"          # coordinate names; omit for scalars
    value = "M*(r - 2*M)/r^3"    # stepper's plain syntax ...
    # latex = "\\frac{M(r-2M)}{r^{3}}"   # ... or LaTeX as printed in a paper (TOML literal strings
    #                                    #     '...' need no doubled backslashes)
    label = "my notes, eq. 4"    # optional, shown in the report

Every text is read by stepper's own parsers; nothing is evaluated as code.
A claim that cannot be read is kept, with the reason, and audited as
unreadable; the other claims are still checked.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import sympy

from .errors import InputError
from .latex_input import parse_latex
from .metric import Metric
from .metricfile import load_metric, read_toml
from .parse import Vocabulary, parse_expression

#: Quantity name -> number of indices (0 for a scalar).
QUANTITIES = {
    "determinant": 0,
    "inverse_metric": 2,
    "christoffel": 3,
    "riemann": 4,
    "riemann_lowered": 4,
    "ricci": 2,
    "scalar": 0,
    "einstein": 2,
    "kretschmann": 0,
    "weyl": 4,
}

CLAIM_KEYS = ("quantity", "component", "value", "latex", "label")


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

    @property
    def name(self) -> str:
        where = f" {self.component}" if self.component else ""
        return f"claim {self.number} ({self.quantity}{where})"


def metric_vocabulary(metric: Metric) -> Vocabulary:
    """The names a claim about ``metric`` may use: those its file declared."""
    symbols = {s.name: s for s in tuple(metric.coordinates) + tuple(metric.parameters)}
    functions = {f.func.__name__: f for f in metric.functions}
    return Vocabulary(symbols, functions, dict(metric.abbreviations))


def load_claims(path: str | Path) -> tuple[Metric, str, list[Claim]]:
    """The metric the claims are about, the title, and the claims."""
    path = Path(path)
    data = read_toml(path)
    unknown = [k for k in data if k not in ("metric", "title", "claim")]
    if unknown:
        raise InputError(f"unknown key '{unknown[0]}' in {path.name} (known keys: metric, title, claim)")
    metric_name = data.get("metric")
    if not isinstance(metric_name, str) or not metric_name:
        raise InputError(f"{path.name} must name its metric file, e.g. metric = \"my_metric.toml\"")
    metric = load_metric(path.parent / metric_name)
    title = data.get("title", f"Claims in {path.name}")
    if not isinstance(title, str):
        raise InputError("'title' must be text")
    entries = data.get("claim", [])
    if not isinstance(entries, list) or not all(isinstance(e, dict) for e in entries) or not entries:
        raise InputError(f"{path.name} has no claims: add [[claim]] tables")
    vocabulary = metric_vocabulary(metric)
    return metric, title, [read_claim(number, entry, metric, vocabulary)
                           for number, entry in enumerate(entries, start=1)]


def read_claim(number: int, entry: dict, metric: Metric, vocabulary: Vocabulary) -> Claim:
    """One [[claim]] table; structural mistakes are errors, unreadable expressions are kept."""
    where = f"claim {number}"
    unknown = [k for k in entry if k not in CLAIM_KEYS]
    if unknown:
        raise InputError(f"{where}: unknown key '{unknown[0]}' (known keys: {', '.join(CLAIM_KEYS)})")
    quantity = entry.get("quantity")
    if quantity not in QUANTITIES:
        raise InputError(f"{where}: quantity must be one of {', '.join(QUANTITIES)}, not {quantity!r}")
    rank = QUANTITIES[quantity]
    component = entry.get("component", "")
    if not isinstance(component, str):
        raise InputError(f"{where}: component must be text such as \"r,t,t\"")
    parts = [p.strip() for p in component.split(",")] if component.strip() else []
    if len(parts) != rank:
        raise InputError(f"{where}: {quantity} needs {rank} coordinate names in 'component', got {len(parts)}")
    for part in parts:
        if part not in metric.names:
            raise InputError(f"{where}: '{part}' in component is not a coordinate ({', '.join(metric.names)})")
    label = entry.get("label", "")
    if not isinstance(label, str):
        raise InputError(f"{where}: label must be text")
    has_plain, has_latex = "value" in entry, "latex" in entry
    if has_plain == has_latex:
        raise InputError(f"{where}: give exactly one of 'value' (plain syntax) and 'latex'")
    syntax = "plain" if has_plain else "latex"
    text = entry["value" if has_plain else "latex"]
    if not isinstance(text, str):
        text = str(text) if isinstance(text, int) and not isinstance(text, bool) else None
    if text is None:
        raise InputError(f"{where}: the claimed value must be text")
    reader = parse_expression if syntax == "plain" else parse_latex
    try:
        expr = reader(text, vocabulary, where)
        problem = ""
    except InputError as err:
        expr, problem = None, err.message
    return Claim(number, label, quantity, ",".join(parts), text, syntax, expr, problem)
