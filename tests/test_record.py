"""The derivation record as the boundary: trace.json is documented by a schema, loads back exactly,
renders on its own, and exporters import nothing of the engine."""

from __future__ import annotations

import ast
import json
import re
import shutil
import subprocess
import sys


import pytest
from jsonschema import Draft202012Validator

from conftest import CLAIM_STEMS, EXAMPLE_STEMS, EXAMPLES, ROOT, example_derivation, example_trace
from stepper.errors import InputError
from stepper.record import StepKind
from stepper.trace import TRACE_FORMAT_VERSION, load_trace, trace_json, trace_schema

ALL_STEMS = EXAMPLE_STEMS + CLAIM_STEMS

#: Modules that compute (the engine) or read untrusted input; no exporter may import them.
ENGINE = {"chain", "algebra", "matter", "ansatz", "geodesics", "verify", "numeric", "audit", "metricfile",
          "metric", "claims", "parse", "latex_input", "guards", "sampling", "tracer", "cli"}
EXPORTERS = ("exporters", "report", "notebook", "latex", "trace", "record")


def test_schema_is_valid_and_lists_every_step_kind():
    schema = trace_schema()
    Draft202012Validator.check_schema(schema)
    assert schema["properties"]["version"]["const"] == TRACE_FORMAT_VERSION
    assert schema["$defs"]["step"]["properties"]["kind"]["enum"] == [k.value for k in StepKind]


@pytest.mark.parametrize("stem", ALL_STEMS)
def test_every_example_trace_validates_and_loads_back_to_the_same_bytes(stem):
    text = example_trace(stem)
    errors = list(Draft202012Validator(trace_schema()).iter_errors(json.loads(text)))
    assert not errors, errors[0].message[:300]
    loaded = load_trace(text)
    assert trace_json(loaded) == text
    original = example_derivation(stem)
    assert [s.id for s in loaded.steps] == [s.id for s in original.steps]
    assert loaded.metric.matrix == original.metric.matrix
    assert loaded.metric.coordinates == original.metric.coordinates  # same names and assumptions


@pytest.mark.parametrize("stem", ["exterior_from_ansatz", "spinning_black_hole"])
def test_loaded_values_are_the_recorded_sympy_objects(stem):
    original = example_derivation(stem)
    loaded = load_trace(example_trace(stem))
    for quantity in ("christoffel", "riemann", "ricci", "inverse_metric"):
        assert dict(loaded.results[quantity]) == dict(original.results[quantity]), quantity
    assert loaded.results["kretschmann"] == original.results["kretschmann"]
    assert loaded.metric.functions == original.metric.functions
    for before, after in zip(original.steps, loaded.steps):
        assert before.result == after.result or isinstance(before.result, (dict, tuple)), before.id


def _tampered(change) -> str:
    data = json.loads(example_trace("round_sphere"))
    change(data)
    return json.dumps(data)


HOSTILE = {
    "attribute call": lambda d: d["metric"]["components"].__setitem__(
        "theta,theta", {"expr": "__import__('os').system('echo owned')"}),
    "undeclared name": lambda d: d["metric"]["components"].__setitem__("theta,theta", {"expr": "open"}),
    "undeclared function": lambda d: d["metric"]["components"].__setitem__("theta,theta", {"expr": "eval(a)"}),
    "lambda": lambda d: d["metric"]["components"].__setitem__("theta,theta", {"expr": "(lambda: 1)()"}),
    "huge power": lambda d: d["metric"]["components"].__setitem__("theta,theta", {"expr": "7**(10**9)"}),
    "float": lambda d: d["metric"]["components"].__setitem__("theta,theta", {"expr": "0.5"}),
    "deep nesting": lambda d: d["metric"]["components"].__setitem__("theta,theta",
                                                                    {"expr": "(" * 3000 + "a" + ")" * 3000}),
    "bad symbol name": lambda d: d["declarations"]["symbols"].__setitem__("os.system", "real"),
    "unknown kind": lambda d: d["steps"][0].__setitem__("kind", "magic"),
    "forward use": lambda d: d["steps"][0].__setitem__("uses", ["scalar"]),
    "old version": lambda d: d.__setitem__("version", 1),
    "not a trace": lambda d: d.__setitem__("format", "something else"),
}


@pytest.mark.parametrize("case", sorted(HOSTILE))
def test_a_tampered_trace_is_refused_with_one_line(case):
    with pytest.raises(InputError) as info:
        load_trace(_tampered(HOSTILE[case]))
    assert "\n" not in info.value.message and info.value.message


def test_not_json_is_refused():
    with pytest.raises(InputError):
        load_trace("{not json")
    with pytest.raises(InputError):
        load_trace(b"\xff\xfe")


def _stepper_imports(module: str) -> set[str]:
    """The stepper modules ``stepper/<module>.py`` imports (relative or absolute), at any depth of its code."""
    tree = ast.parse((ROOT / "stepper" / f"{module}.py").read_text(encoding="utf-8"))
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level == 1 and node.module:
                found.add(node.module.split(".")[0])
            elif node.level == 1:
                found.update(alias.name for alias in node.names)
            elif node.module and node.module.startswith("stepper."):
                found.add(node.module.split(".")[1])
        elif isinstance(node, ast.Import):
            found.update(a.name.split(".")[1] for a in node.names if a.name.startswith("stepper."))
    return found


def test_no_exporter_imports_the_engine():
    seen, todo = set(), list(EXPORTERS)
    while todo:
        module = todo.pop()
        if module in seen:
            continue
        seen.add(module)
        imported = _stepper_imports(module)
        assert not imported & ENGINE, (module, sorted(imported & ENGINE))
        todo.extend(m for m in imported if (ROOT / "stepper" / f"{m}.py").exists())


def _run(args, cwd):
    return subprocess.run([sys.executable, "-m", "stepper", *args], cwd=cwd, capture_output=True, text=True,
                          timeout=600, stdin=subprocess.DEVNULL)


@pytest.mark.slow
@pytest.mark.parametrize("stem", ALL_STEMS)
def test_render_of_a_saved_trace_gives_the_bytes_derive_wrote(stem, tmp_path):
    shutil.copytree(EXAMPLES, tmp_path / "examples")
    command = ["audit", f"examples/claims/{stem}.toml"] if stem in CLAIM_STEMS else ["derive", f"examples/{stem}.toml"]
    first = _run([*command, "-o", "A", "--quiet"], tmp_path)
    assert first.returncode in (0, 1) and "error" not in first.stderr, first.stderr
    second = _run(["render", "A/trace.json", "-o", "B", "--quiet"], tmp_path)
    assert second.returncode == first.returncode, second.stderr
    written = sorted(p.name for p in (tmp_path / "A").iterdir())
    assert written == sorted(p.name for p in (tmp_path / "B").iterdir())
    assert {"trace.json", "report.tex", "appendix.tex", "derivation.ipynb"} <= set(written)
    for name in written:
        assert (tmp_path / "A" / name).read_bytes() == (tmp_path / "B" / name).read_bytes(), name


@pytest.mark.slow
def test_render_of_a_bad_trace_is_one_line_and_status_2(tmp_path):
    (tmp_path / "trace.json").write_text(_tampered(HOSTILE["attribute call"]), encoding="utf-8")
    proc = _run(["render", "trace.json", "-o", "out"], tmp_path)
    assert proc.returncode == 2
    assert proc.stderr.startswith("stepper: error: trace.json:") and proc.stderr.count("\n") == 1, proc.stderr
    assert not (tmp_path / "out").exists()
    missing = _run(["render", "nowhere.json"], tmp_path)
    assert missing.returncode == 2 and "no such trace file" in missing.stderr


#: String methods that read text back; calling one on evidence would parse a sentence another module wrote.
_TEXT_READERS = {"startswith", "endswith", "split", "rsplit", "partition", "rpartition", "replace", "find",
                 "index", "count", "strip", "removeprefix", "removesuffix"}


def _mentions_evidence(node: ast.AST) -> bool:
    return any((isinstance(n, ast.Name) and "evidence" in n.id) or
               (isinstance(n, ast.Attribute) and "evidence" in n.attr) or
               (isinstance(n, ast.Constant) and n.value == "evidence")
               for n in ast.walk(node))


def evidence_readings(source: str) -> list[str]:
    """Places where code reads evidence text: a regex over it, a string method on it, a substring test."""
    found = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute):
            target = node.func.value
            if node.func.attr in _TEXT_READERS and _mentions_evidence(target):
                found.append(f"line {node.lineno}: .{node.func.attr}() on evidence")
            if isinstance(target, ast.Name) and target.id == "re" and any(_mentions_evidence(a) for a in node.args):
                found.append(f"line {node.lineno}: re.{node.func.attr}() on evidence")
        if isinstance(node, ast.Compare) and any(isinstance(op, (ast.In, ast.NotIn)) for op in node.ops) \
                and any(_mentions_evidence(c) for c in node.comparators):
            found.append(f"line {node.lineno}: a substring test on evidence")
    return found


def test_the_evidence_check_finds_what_it_looks_for():
    sample = ('a = row["evidence"].startswith("x")\nb = re.match("y", step.result.evidence)\n'
              'c = "sampled" in evidence\nd = evidence\n')
    assert len(evidence_readings(sample)) == 3


@pytest.mark.parametrize("module", sorted(str(p.relative_to(ROOT / "stepper")) for p in (ROOT / "stepper").rglob("*.py")))
def test_no_module_reads_evidence_text(module):
    """The evidence sentence is for people: no module of stepper (exporters, audit, command line) reads it back."""
    assert evidence_readings((ROOT / "stepper" / module).read_text(encoding="utf-8")) == []


_TEMPLATE_READING = re.compile(r"\bin\s+[\w.\[\]'\"]*evidence|evidence[\w.\[\]'\"]*\.(?:%s)\b"
                               % "|".join(sorted(_TEXT_READERS)))


def test_no_template_reads_evidence_text():
    assert _TEMPLATE_READING.search('{% if "sampled" in row.evidence %}')
    assert _TEMPLATE_READING.search("{{ step.result.evidence.split(';')[0] }}")
    for template in sorted((ROOT / "templates").rglob("*.j2")):
        found = _TEMPLATE_READING.search(template.read_text(encoding="utf-8"))
        assert found is None, (template.name, found and found.group())


def test_conventions_are_recorded_as_data():
    # Conventions of stepper's chain (README, "Conventions"): R^a_bcd with the derivative on c, d; Ricci
    # contracts the first index with the third; a round sphere has positive curvature.
    data = json.loads(example_trace("round_sphere"))["convention_data"]
    assert data["riemann"]["derivative_indices"] == [3, 4] and data["ricci"]["contracted_indices_of_riemann"] == [1, 3]
    # rho^2 sin(theta)^2 vanishes at the poles, and theta is only declared positive: no signature is claimed
    assert data["signature"] is None
    assert "christoffel" in data["stored_orderings"]
    # the upper half-plane with y > 0 and L > 0: L^2/y^2 > 0 twice (Riemannian, common practice)
    assert example_derivation("hyperbolic_plane").convention_data["signature"] == "++"


def test_signature_only_when_the_declared_signs_fix_it():
    import sympy as sp
    from stepper import Metric, derive
    t, x, y, z = sp.symbols("t x y z", real=True)
    flat = derive(Metric.from_matrix([t, x, y, z], sp.diag(-1, 1, 1, 1)), curvature_invariants=False)
    assert flat.convention_data["signature"] == "-+++"  # Minkowski space (common practice)
    # Schwarzschild without r > 2M declared: the sign of 1 - 2M/r is not fixed, so no signature is claimed
    assert example_derivation("compact_star_exterior").convention_data["signature"] is None


def test_the_notebook_chooses_a_steps_code_by_its_fields_not_its_id():
    tree = ast.parse((ROOT / "stepper" / "notebook.py").read_text(encoding="utf-8"))
    dispatch = [node for node in ast.walk(tree) if isinstance(node, ast.FunctionDef)
                and node.name in ("for_step", "_printers")]
    assert len(dispatch) == 2
    for function in dispatch:
        assert not [n for n in ast.walk(function) if isinstance(n, ast.Attribute) and n.attr == "id"], function.name


@pytest.mark.parametrize("stem", ["compact_star_exterior", "wormhole_passage", "exterior_from_ansatz"])
def test_every_step_has_a_notebook_printer(stem):
    from stepper.notebook import _Cells, _Source
    d = example_derivation(stem)
    cells = _Cells(d, _Source(d))
    missing = [s.id for s in d.steps if cells.for_step(s)[0] == "not_recomputed"]
    assert missing == []


@pytest.mark.parametrize("module", ["report.py", "notebook.py", "latex.py", "exporters.py"])
def test_exporters_decide_nothing_from_a_steps_id(module):
    """A step's id is for links and anchors; what to print is chosen from its kind, quantity and component."""
    tree = ast.parse((ROOT / "stepper" / module).read_text(encoding="utf-8"))

    def is_id(node):
        return isinstance(node, ast.Attribute) and node.attr == "id"
    found = [node.lineno for node in ast.walk(tree)
             if (isinstance(node, ast.Compare) and (is_id(node.left) or any(is_id(c) for c in node.comparators)))
             or (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute) and is_id(node.func.value))]
    assert found == [], f"{module}: decisions from step ids on lines {found}"
