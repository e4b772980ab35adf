"""``stepper compare OLD_OUT NEW_OUT``: what changed between two batches, as mathematics.

For every member of either batch's index: whether it appeared, vanished or changed status; and, where both
runs finished, whether the results, the verdicts and the conventions are equal *as mathematics* (two
expressions are equal when their difference cancels to zero, or else simplifies to zero; never by
comparing text alone) and which steps' results changed, appeared or vanished.  Traces are read with
:func:`stepper.trace.load_trace`, which never evaluates text.  Identical trace bytes are equal without
further work.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import sympy

from .batch import index_entries, read_index
from .errors import InputError

#: Results whose values are samples or measurements rather than mathematics: compared by their outcome only.
_OUTCOME_ONLY = {"numeric_verification": ("passed",)}
#: Expressions larger than this (operations) are compared by cancellation only, not by simplify().
SIMPLIFY_LIMIT = 400
#: Steps named in a member's line before "and N more".
SHOWN = 8


def same_value(old: sympy.Basic, new: sympy.Basic) -> bool:
    """Exact zero test of the difference: structural equality, then cancellation (canonical for rational
    functions), then, for moderate sizes, sympy's simplify (trigonometric and other identities)."""
    if old == new:
        return True
    new = _same_names(new, old)
    if old == new:
        return True
    try:
        difference = old - new
    except TypeError:
        return False
    try:
        if sympy.cancel(sympy.together(difference)) == 0:
            return True
        if sympy.count_ops(difference) <= SIMPLIFY_LIMIT:
            return sympy.simplify(difference) == 0
    except (TypeError, ValueError, NotImplementedError, RecursionError, sympy.PolynomialError):
        return False
    return False


def _same_names(expression: sympy.Basic, like: sympy.Basic) -> sympy.Basic:
    """``expression`` with each symbol replaced by the symbol of the same name in ``like`` (a symbol whose
    declared assumption changed between versions is still the same quantity)."""
    if not isinstance(expression, sympy.Basic) or not isinstance(like, sympy.Basic):
        return expression
    theirs = {s.name: s for s in like.free_symbols if isinstance(s, sympy.Symbol)}
    swap = {s: theirs[s.name] for s in expression.free_symbols
            if isinstance(s, sympy.Symbol) and s.name in theirs and theirs[s.name] != s}
    return expression.xreplace(swap) if swap else expression


def differences(old: Any, new: Any, path: str = "") -> list[str]:
    """Paths (``riemann/theta,phi,theta,phi``) where two recorded values differ as mathematics."""
    if isinstance(old, sympy.Basic) and isinstance(new, sympy.Basic):
        return [] if same_value(old, new) else [path or "value"]
    if isinstance(old, dict) and isinstance(new, dict):
        found = []
        for key in sorted(set(old) | set(new), key=str):
            where = f"{path}/{key}" if path else str(key)
            if key not in old:
                found.append(f"{where} (new)")
            elif key not in new:
                found.append(f"{where} (gone)")
            elif path == "" and key in _OUTCOME_ONLY:
                found += [f"{where}/{k}" for k in _OUTCOME_ONLY[key] if _get(old[key], k) != _get(new[key], k)]
            else:
                found += differences(old[key], new[key], where)
        return found
    if isinstance(old, (list, tuple)) and isinstance(new, (list, tuple)):
        if len(old) != len(new):
            return [f"{path} (length {len(old)} -> {len(new)})"]
        found = []
        for number, (a, b) in enumerate(zip(old, new)):
            found += differences(a, b, f"{path}[{number}]")
        return found
    if hasattr(old, "holds") and hasattr(new, "holds"):  # a verdict: what it decided, not its words
        return [] if old.holds == new.holds else [path]
    if isinstance(old, sympy.Basic) != isinstance(new, sympy.Basic):
        number = old if isinstance(new, sympy.Basic) else new
        expression = new if isinstance(new, sympy.Basic) else old
        if isinstance(number, int) and not isinstance(number, bool) and same_value(sympy.Integer(number), expression):
            return []
        return [path or "value"]
    return [] if old == new else [path or "value"]


def _get(value: Any, key: str) -> Any:
    return value.get(key) if isinstance(value, dict) else None


@dataclass
class MemberChange:
    name: str
    kind: str                               # unchanged, equal, changed, appeared, vanished, status
    old_status: str | None = None
    new_status: str | None = None
    results: list[str] = field(default_factory=list)
    conventions: list[str] = field(default_factory=list)
    steps_changed: list[str] = field(default_factory=list)
    steps_new: list[str] = field(default_factory=list)
    steps_gone: list[str] = field(default_factory=list)
    note: str = ""

    @property
    def changed(self) -> bool:
        return self.kind not in ("unchanged", "equal")

    def as_data(self) -> dict:
        return {k: v for k, v in self.__dict__.items() if v not in (None, [], "")}

    def line(self) -> str:
        if self.kind == "unchanged":
            return f"{self.name}: unchanged ({self.note or 'identical trace'})"
        if self.kind == "equal":
            return f"{self.name}: equal as mathematics ({self.note})"
        if self.kind == "appeared":
            return f"{self.name}: appeared ({self.new_status})"
        if self.kind == "vanished":
            return f"{self.name}: vanished (was {self.old_status})"
        if self.kind == "status":
            return f"{self.name}: status changed from {self.old_status} to {self.new_status}"
        parts = []
        for label, items in (("results", self.results), ("conventions", self.conventions),
                             ("steps changed", self.steps_changed), ("new steps", self.steps_new),
                             ("steps gone", self.steps_gone)):
            if items:
                shown = ", ".join(items[:SHOWN]) + (f" and {len(items) - SHOWN} more" if len(items) > SHOWN else "")
                parts.append(f"{label}: {shown}")
        return f"{self.name}: CHANGED; " + "; ".join(parts or [self.note or "the traces differ"])


def compare_members(name: str, old_folder: Path, new_folder: Path) -> MemberChange:
    """Two finished runs of one member, compared trace against trace."""
    from .trace import read_trace_file
    old_bytes = _trace_bytes(old_folder)
    new_bytes = _trace_bytes(new_folder)
    if hashlib.sha256(old_bytes).digest() == hashlib.sha256(new_bytes).digest():
        return MemberChange(name, "unchanged", "ok", "ok")
    old = read_trace_file(old_folder / "trace.json")
    new = read_trace_file(new_folder / "trace.json")
    change = MemberChange(name, "changed", "ok", "ok")
    change.results = differences(dict(old.results), dict(new.results))
    change.conventions = differences(dict(old.convention_data), dict(new.convention_data))
    if dict(old.conventions) != dict(new.conventions) and not change.conventions:
        change.conventions = [key for key in sorted(set(old.conventions) | set(new.conventions))
                              if old.conventions.get(key) != new.conventions.get(key)]
    old_steps = {s.id: s for s in old.steps}
    new_steps = {s.id: s for s in new.steps}
    change.steps_new = [i for i in new_steps if i not in old_steps]
    change.steps_gone = [i for i in old_steps if i not in new_steps]
    for step_id, step in old_steps.items():
        other = new_steps.get(step_id)
        if other is None:
            continue
        if (step.kind, step.quantity, step.component) != (other.kind, other.quantity, other.component) or \
                differences(step.result, other.result):
            change.steps_changed.append(step_id)
    if not (change.results or change.conventions or change.steps_changed or change.steps_new or change.steps_gone):
        written = sum(1 for i, s in old_steps.items() if s.result != new_steps[i].result)
        change.kind = "equal"
        change.note = (f"the traces differ in bytes; {written} step results written differently"
                       if written else "the traces differ in bytes, not in any result or step")
    return change


def _trace_bytes(folder: Path) -> bytes:
    path = folder / "trace.json"
    try:
        return path.read_bytes()
    except OSError as err:
        raise InputError(f"{path}: cannot be read ({err.strerror or err})") from None


def compare_batches(old_out: Path, new_out: Path) -> list[MemberChange]:
    old_out, new_out = Path(old_out), Path(new_out)
    for folder in (old_out, new_out):
        if not (folder / "index.json").is_file():
            raise InputError(f"{folder} holds no index.json: give two output folders of 'stepper batch'")
    old = index_entries(read_index(old_out))
    new = index_entries(read_index(new_out))
    changes = []
    for name in sorted(set(old) | set(new)):
        if name not in old:
            changes.append(MemberChange(name, "appeared", None, new[name].get("status")))
        elif name not in new:
            changes.append(MemberChange(name, "vanished", old[name].get("status"), None))
        elif old[name].get("status") != new[name].get("status"):
            changes.append(MemberChange(name, "status", old[name].get("status"), new[name].get("status")))
        elif old[name].get("status") != "ok":
            changes.append(MemberChange(name, "unchanged", old[name]["status"], new[name]["status"],
                                        note=f"{old[name]['status']} in both"))
        else:
            changes.append(compare_members(name, old_out / name, new_out / name))
    return changes


def add_parser(commands) -> None:
    compare = commands.add_parser(
        "compare", help="what changed, as mathematics, between two batch output folders",
        description="Compare two output folders of 'stepper batch' member by member: which members appeared, "
                    "vanished or changed status, and whether results, verdicts and conventions are equal as "
                    "mathematics (their difference simplifies to zero) and which steps changed. Exit status "
                    "0 when nothing changed, 1 when something did, 2 for bad input.")
    compare.add_argument("file", metavar="OLD_OUT", help="the earlier batch's output folder")
    compare.add_argument("new", metavar="NEW_OUT", help="the later batch's output folder")
    compare.add_argument("--json", metavar="FILE", help="also write the comparison as JSON to FILE")
    compare.add_argument("--quiet", action="store_true", help="print only the changed members")


def command(args) -> int:
    from .cli import terminal_text
    changes = compare_batches(Path(args.file), Path(args.new))
    changed = [c for c in changes if c.changed]
    for change in changes:
        if change.changed or not args.quiet:
            print(terminal_text(change.line()))
    print(f"compare: {len(changes)} members, {len(changed)} changed")
    if args.json:
        from .trace import write_atomically
        write_atomically(Path(args.json), json.dumps([c.as_data() for c in changes], indent=1) + "\n")
    return 1 if changed else 0
