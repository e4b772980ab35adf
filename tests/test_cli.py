"""The command line, run for real as a subprocess: bad input, safety, good paths.

Every bad input must give exit status 2, exactly one line on stderr starting
with ``stepper: error:``, no traceback, a message naming the problem, and no
output written (no trace.json, no leftover ``.trace.json.*.part``).  A metric
file may come from anyone, so no field of it may ever be run as code.

Starting the interpreter costs most of a second, so the runs of each group are
started together in a module-scoped fixture (a few at a time) and the tests
then look at the finished runs.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import pytest
import sympy as sp

# Every test here starts stepper as a subprocess: part of the full run, not the everyday subset.
pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"
EXAMPLE_FILES = sorted(EXAMPLES.glob("*.toml"))
TIMEOUT = 180  # seconds per run; the slowest example takes a few seconds
WORKERS = max(2, os.cpu_count() or 2)

FOLDER = object()  # content marker: make the input path a folder
MISSING = object()  # content marker: do not create the input file at all


# ------------------------------------------------------------------ helpers

def toml_string(text: str) -> str:
    """A TOML basic string holding ``text`` exactly (JSON string syntax is valid TOML here)."""
    return json.dumps(text)


def run_stepper(args: list[str], cwd: Path) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "stepper", *args], cwd=cwd, capture_output=True,
                          text=True, timeout=TIMEOUT, stdin=subprocess.DEVNULL)


def run_all(jobs: dict) -> dict:
    """Run ``{key: (args, cwd)}`` concurrently; return ``{key: CompletedProcess}``."""
    with ThreadPoolExecutor(max_workers=WORKERS) as pool:
        futures = {key: pool.submit(run_stepper, args, cwd) for key, (args, cwd) in jobs.items()}
        return {key: future.result() for key, future in futures.items()}


def leftovers(folder: Path) -> list[Path]:
    """Any trace.json or temporary part file anywhere below ``folder``."""
    return sorted(p for p in folder.rglob("*") if p.name == "trace.json" or p.name.endswith(".part"))


def assert_one_line_error(proc: subprocess.CompletedProcess, *needles: str) -> str:
    """Exit 2, exactly one stderr line ``stepper: error: ...``, no traceback; return the line."""
    assert proc.returncode == 2, (proc.returncode, proc.stderr)
    assert "Traceback" not in proc.stderr, proc.stderr
    assert proc.stderr.startswith("stepper: error: "), proc.stderr
    assert proc.stderr.endswith("\n") and proc.stderr.count("\n") == 1, repr(proc.stderr)
    assert proc.stdout == "", proc.stdout
    line = proc.stderr.strip()
    for needle in needles:
        assert needle.lower() in line.lower(), f"{needle!r} not in {line!r}"
    return line


def read_sympy(text, names) -> sp.Expr:
    """Read an expression written in trace.json ({"expr": text}) or in a test back, with real symbols."""
    if isinstance(text, dict):
        text = text["expr"]
    return sp.sympify(text, locals={n: sp.Symbol(n, real=True) for n in names})


def equal(a: sp.Expr, b: sp.Expr) -> bool:
    return sp.simplify(a - b) == 0


# ------------------------------------------------------------ bad input

FLAT = 'coordinates = ["t", "x"]\nline_element = "-dt^2 + dx^2"\n'


@dataclass
class Bad:
    id: str
    content: object  # str, bytes, FOLDER or MISSING
    needles: tuple[str, ...]
    filename: str = "metric.toml"


BAD = [
    # the issue's list
    Bad("unknown_name", 'coordinates = ["t", "x"]\nline_element = "-dt^2 + Q*dx^2"\n',
        ("unknown name", "'Q'")),
    Bad("not_square", 'coordinates = ["t", "x"]\ncomponents = [["-1", "0"], ["0"]]\n',
        ("not a square",)),
    Bad("not_symmetric", 'coordinates = ["t", "x"]\ncomponents = [["-1", "x"], ["0", "1"]]\n',
        ("not symmetric",)),
    Bad("degenerate_line_element", 'coordinates = ["t", "x"]\nline_element = "dt^2 + 2*dt*dx + dx^2"\n',
        ("degenerate",)),
    Bad("not_quadratic", 'coordinates = ["t", "x"]\nline_element = "-dt^2 + dx^2 + dx"\n',
        ("differentials", "dx")),
    Bad("undeclared_differential", 'coordinates = ["t", "x"]\nline_element = "-dt^2 + dx^2 + dy^2"\n',
        ("'dy'", "not a declared coordinate")),
    Bad("coordinate_declared_twice", 'coordinates = ["t", "x", "t"]\nline_element = "-dt^2 + dx^2"\n',
        ("'t'", "declared twice")),
    Bad("empty_file", "", ("empty",)),
    Bad("blank_file", "  \n\n\t\n", ("empty",)),
    Bad("broken_toml", 'coordinates = ["t", "x"\nline_element = "-dt^2 + dx^2"\n', ("TOML",)),
    # more bad inputs
    Bad("missing_coordinates", 'line_element = "-dt^2 + dx^2"\n', ("missing", "coordinates")),
    Bad("both_line_element_and_components",
        FLAT + 'components = [["-1", "0"], ["0", "1"]]\n', ("exactly one", "line_element", "components")),
    Bad("neither_line_element_nor_components", 'coordinates = ["t", "x"]\n',
        ("exactly one", "line_element", "components")),
    Bad("unknown_assumption", FLAT + '[symbols]\nM = "large"\n', ("'M'", "unknown assumption", "large")),
    Bad("function_of_non_coordinate",
        'coordinates = ["t", "x"]\nline_element = "-dt^2 + a*dx^2"\n[functions]\na = ["s"]\n',
        ("'a'", "'s'", "not a coordinate")),
    Bad("three_differentials",
        'coordinates = ["t", "r", "theta"]\nline_element = "-dt^2 + dr^2 + dtheta^2 + dt*dr*dtheta"\n',
        ("3 differentials",)),
    Bad("differential_inside_function", 'coordinates = ["t", "x"]\nline_element = "-dt^2 + dx^2 + sin(dt)*dx"\n',
        ("not quadratic", "sin(dt)")),
    Bad("implicit_multiplication",
        'coordinates = ["t", "x"]\nline_element = "-dt^2 + 2M*dx^2"\n[symbols]\nM = "positive"\n',
        ("'M'", "missing '*'")),
    Bad("unbalanced_open_parenthesis", 'coordinates = ["t", "x"]\nline_element = "-(dt^2 + dx^2"\n',
        ("unmatched '('",)),
    Bad("unbalanced_close_parenthesis", 'coordinates = ["t", "x"]\nline_element = "-dt^2) + dx^2"\n',
        ("unmatched ')'",)),
    Bad("file_does_not_exist", MISSING, ("nosuch.toml", "no such file"), filename="nosuch.toml"),
    Bad("file_is_a_folder", FOLDER, ("folder",), filename="folder.toml"),
    Bad("unknown_top_level_key", FLAT + 'colour = "red"\n', ("unknown key", "'colour'")),
    Bad("abbreviation_clashes_with_symbol",
        'coordinates = ["t", "x"]\nline_element = "-dt^2 + M*dx^2"\n[symbols]\nM = "positive"\n'
        '[abbreviations]\nM = "2"\n', ("abbreviation 'M'",)),
    Bad("abbreviation_clashes_with_differential", FLAT + '[abbreviations]\ndt = "5"\n',
        ("'dt'", "differential")),
    Bad("components_wrong_number_of_rows", 'coordinates = ["t", "x", "y"]\ncomponents = [["-1", "0"], ["0", "1"]]\n',
        ("3 coordinates",)),
    Bad("degenerate_components", 'coordinates = ["t", "x"]\ncomponents = [["1", "1"], ["1", "1"]]\n',
        ("degenerate",)),
    Bad("reserved_name", 'coordinates = ["t", "pi"]\nline_element = "-dt^2 + dpi^2"\n', ("'pi'", "reserved")),
    Bad("one_coordinate", 'coordinates = ["x"]\nline_element = "dx^2"\n', ("at least 2",)),
    Bad("not_utf8", b'title = "caf\xe9"\n' + FLAT.encode(), ("UTF-8",)),
]


def make_input(folder: Path, case: Bad) -> None:
    path = folder / case.filename
    if case.content is FOLDER:
        path.mkdir()
    elif isinstance(case.content, bytes):
        path.write_bytes(case.content)
    elif isinstance(case.content, str):
        path.write_text(case.content, encoding="utf-8")


@pytest.fixture(scope="module")
def bad_runs(tmp_path_factory):
    jobs, folders = {}, {}
    for case in BAD:
        cwd = tmp_path_factory.mktemp(case.id)
        make_input(cwd, case)
        folders[case.id] = cwd
        jobs[case.id] = (["derive", case.filename, "-o", "result"], cwd)
    return {key: (proc, folders[key]) for key, proc in run_all(jobs).items()}


@pytest.mark.parametrize("case", BAD, ids=[c.id for c in BAD])
def test_bad_input_gives_one_line_and_writes_nothing(bad_runs, case):
    proc, cwd = bad_runs[case.id]
    assert_one_line_error(proc, *case.needles)
    assert not (cwd / "result" / "trace.json").exists()
    assert leftovers(cwd) == []
    assert not (cwd / "out").exists()


GOOD_SMALL = 'title = "Flat"\ncoordinates = ["t", "x"]\nline_element = "-dt^2 + x^2*dx^2"\n[symbols]\nx = "positive"\n'
FAILING = {
    "unknown_name": 'coordinates = ["t", "x"]\nline_element = "-dt^2 + Q*dx^2"\n',
    "degenerate": 'coordinates = ["t", "x"]\ncomponents = [["1", "1"], ["1", "1"]]\n',
    "broken_toml": 'coordinates = ["t"\n',
    "empty": "",
}


def test_failing_run_leaves_earlier_trace_byte_identical(tmp_path):
    """Nothing lost: a failed run into a folder that already holds a good trace leaves it alone."""
    (tmp_path / "good.toml").write_text(GOOD_SMALL, encoding="utf-8")
    first = run_stepper(["derive", "good.toml", "-o", "result"], tmp_path)
    assert first.returncode == 0, first.stderr
    folder = tmp_path / "result"

    def snapshot():
        return {p.name: (p.read_bytes(), p.stat().st_mtime_ns) for p in sorted(folder.iterdir())}
    before = snapshot()
    assert "trace.json" in before and "report.tex" in before
    for name, text in FAILING.items():
        (tmp_path / f"{name}.toml").write_text(text, encoding="utf-8")
    for name in FAILING:  # one after another: all of them aim at the same folder
        proc = run_stepper(["derive", f"{name}.toml", "-o", "result"], tmp_path)
        assert_one_line_error(proc)
        assert snapshot() == before, name


def test_output_folder_that_is_a_file_is_refused_and_kept(tmp_path):
    (tmp_path / "good.toml").write_text(GOOD_SMALL, encoding="utf-8")
    (tmp_path / "result").write_text("keep me\n")
    proc = run_stepper(["derive", "good.toml", "-o", "result"], tmp_path)
    assert_one_line_error(proc, "not a folder")
    assert (tmp_path / "result").read_text() == "keep me\n"
    assert leftovers(tmp_path) == []


def test_output_folder_below_a_file_is_a_one_line_error(tmp_path):
    (tmp_path / "good.toml").write_text(GOOD_SMALL, encoding="utf-8")
    (tmp_path / "afile").write_text("keep me\n")
    proc = run_stepper(["derive", "good.toml", "-o", "afile/sub"], tmp_path)
    assert_one_line_error(proc, "cannot create output folder", "is not a folder")
    assert (tmp_path / "afile").read_text() == "keep me\n"
    assert leftovers(tmp_path) == []


@pytest.mark.parametrize("limit", ["nan", "inf", "-1", "0"])
def test_time_limit_must_be_a_finite_positive_number(tmp_path, limit):
    (tmp_path / "good.toml").write_text(GOOD_SMALL, encoding="utf-8")
    proc = run_stepper(["derive", "good.toml", "-o", "result", "--time-limit", limit], tmp_path)
    assert_one_line_error(proc, "--time-limit must be a positive number")
    assert leftovers(tmp_path) == []


def test_unknown_command_line_option_is_one_line(tmp_path):
    proc = run_stepper(["derive", "x.toml", "--no-such-option"], tmp_path)
    assert_one_line_error(proc, "--no-such-option")


# ------------------------------------------------------------- safety

PAYLOADS = {
    "import_system": "__import__('os').system('touch pwned')",
    "eval": "eval('1')",
    "exec": "exec('x')",
    "dunder_bases": "().__class__.__bases__",
}

#: A valid metric that uses every kind of field, so each can be replaced in turn.
BASE = {
    "title": "Base", "notes": "Base notes", "coordinates": ["t", "x"],
    "line_element": "-dt^2 + h*dx^2", "components": None,
    "symbols": {"K": "positive"}, "functions": {"a": ["t"]}, "abbreviations": {"h": "a^2 + K"},
}


def metric_toml(fields: dict) -> str:
    lines = []
    for key in ("title", "notes", "line_element"):
        if fields.get(key) is not None:
            lines.append(f"{key} = {toml_string(fields[key])}")
    lines.append("coordinates = [" + ", ".join(toml_string(c) for c in fields["coordinates"]) + "]")
    if fields.get("components") is not None:
        rows = ("[" + ", ".join(toml_string(e) for e in row) + "]" for row in fields["components"])
        lines.append("components = [" + ", ".join(rows) + "]")
    for table in ("symbols", "functions", "abbreviations"):
        lines.append(f"[{table}]")
        for name, value in fields[table].items():
            if isinstance(value, list):
                value_text = "[" + ", ".join(toml_string(v) for v in value) + "]"
            else:
                value_text = toml_string(value)
            lines.append(f"{toml_string(name)} = {value_text}")
    return "\n".join(lines) + "\n"


def with_payload(where: str, payload: str) -> dict:
    fields = json.loads(json.dumps(BASE))
    if where in ("title", "notes", "line_element"):
        fields[where] = payload
    elif where == "coordinates_entry":
        fields["coordinates"] = ["t", payload]
    elif where == "components_entry":
        fields["line_element"] = None
        fields["components"] = [["-1", "0"], ["0", payload]]
    elif where == "symbol_name":
        fields["symbols"][payload] = "positive"
    elif where == "symbol_value":
        fields["symbols"]["K"] = payload
    elif where == "function_name":
        fields["functions"][payload] = ["t"]
    elif where == "function_argument":
        fields["functions"]["a"] = [payload]
    elif where == "abbreviation_name":
        fields["abbreviations"][payload] = "1"
    elif where == "abbreviation_value":
        fields["abbreviations"]["h"] = payload
    else:
        raise AssertionError(where)
    return fields


FREE_TEXT = ("title", "notes")
EXPRESSION_OR_NAME = ("coordinates_entry", "line_element", "components_entry", "symbol_name", "symbol_value",
                      "function_name", "function_argument", "abbreviation_name", "abbreviation_value")
SAFETY_CASES = [(w, p) for w in FREE_TEXT + EXPRESSION_OR_NAME for p in PAYLOADS]


@pytest.fixture(scope="module")
def safety_runs(tmp_path_factory):
    jobs, folders = {}, {}
    for where, payload in SAFETY_CASES:
        cwd = tmp_path_factory.mktemp(f"safety_{where}_{payload}")
        (cwd / "metric.toml").write_text(metric_toml(with_payload(where, PAYLOADS[payload])), encoding="utf-8")
        folders[where, payload] = cwd
        jobs[where, payload] = (["derive", "metric.toml", "-o", "result"], cwd)
    return {key: (proc, folders[key]) for key, proc in run_all(jobs).items()}


def test_base_metric_of_the_safety_tests_is_valid(tmp_path):
    (tmp_path / "metric.toml").write_text(metric_toml(BASE), encoding="utf-8")
    proc = run_stepper(["derive", "metric.toml", "-o", "result"], tmp_path)
    assert proc.returncode == 0, proc.stderr
    metric = json.loads((tmp_path / "result" / "trace.json").read_text())["metric"]
    assert metric["title"] == "Base" and metric["abbreviations"]


@pytest.mark.parametrize("where,payload", SAFETY_CASES, ids=[f"{w}-{p}" for w, p in SAFETY_CASES])
def test_no_field_of_a_metric_file_is_run(safety_runs, where, payload):
    proc, cwd = safety_runs[where, payload]
    assert not (cwd / "pwned").exists()
    assert "Traceback" not in proc.stderr
    text = PAYLOADS[payload]
    if where in FREE_TEXT:
        assert proc.returncode == 0, proc.stderr
        metric = json.loads((cwd / "result" / "trace.json").read_text(encoding="utf-8"))["metric"]
        assert metric[where] == text
        if where == "title":
            assert text in proc.stdout
    else:
        assert_one_line_error(proc)
        assert leftovers(cwd) == []


# ------------------------------------------------------------ good paths

def test_python_m_stepper_help():
    proc = subprocess.run([sys.executable, "-m", "stepper", "--help"], capture_output=True, text=True,
                          timeout=TIMEOUT)
    assert proc.returncode == 0, proc.stderr
    assert "derive" in proc.stdout


def test_stepper_command_help():
    command = Path(sys.executable).parent / "stepper"
    if not command.exists():
        found = shutil.which("stepper")
        assert found, "the stepper command is not installed"
        command = Path(found)
    proc = subprocess.run([str(command), "--help"], capture_output=True, text=True, timeout=TIMEOUT)
    assert proc.returncode == 0, proc.stderr
    assert "derive" in proc.stdout


REPEATED = ("spinning_black_hole", "round_sphere")  # run twice to check the bytes repeat


@pytest.fixture(scope="module")
def example_runs(tmp_path_factory):
    """Every example once, in its own folder, with the default output folder;
    the examples in REPEATED a second time into another folder.

    spinning_black_hole and twisted_vacuum are the slowest (a few seconds each); fine to run."""
    jobs, folders = {}, {}
    # The repeated ones first and side by side, the slowest first.
    for path in sorted(EXAMPLE_FILES, key=lambda p: (p.stem not in REPEATED, p.stem not in REPEATED[:1])):
        cwd = tmp_path_factory.mktemp(path.stem)
        shutil.copy(path, cwd / path.name)
        folders[path.stem] = cwd
        jobs[path.stem] = (["derive", path.name], cwd)
        if path.stem in REPEATED:
            jobs[path.stem, "again"] = (["derive", path.name, "-o", "again"], cwd)
    procs = run_all(jobs)
    return {stem: (procs[stem], folders[stem]) for stem in folders}, procs


def test_examples_exist():
    assert len(EXAMPLE_FILES) >= 8
    assert {"spinning_black_hole", "twisted_vacuum"} <= {p.stem for p in EXAMPLE_FILES}


@pytest.mark.parametrize("stem", [p.stem for p in EXAMPLE_FILES])
def test_example_derives_into_default_folder(example_runs, stem):
    proc, cwd = example_runs[0][stem]
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr
    trace = cwd / "out" / stem / "trace.json"
    assert trace.is_file()
    data = json.loads(trace.read_text(encoding="utf-8"))
    assert "steps" in data and "results" in data
    assert isinstance(data["steps"], list) and data["steps"]
    assert "scalar" in data["results"]
    assert "scalar curvature" in proc.stdout
    assert f"written to {Path('out') / stem}: trace.json, report.tex, appendix.tex, report.pdf, derivation.ipynb" \
        in proc.stdout
    assert not list((cwd / "out" / stem).glob("*.part"))


@pytest.mark.parametrize("stem", REPEATED)
def test_trace_is_byte_identical_on_a_second_run(example_runs, stem):
    runs, procs = example_runs
    again = procs[stem, "again"]
    assert again.returncode == 0, again.stderr
    cwd = runs[stem][1]
    first = (cwd / "out" / stem / "trace.json").read_text(encoding="utf-8").splitlines()
    second = (cwd / "again" / "trace.json").read_text(encoding="utf-8").splitlines()
    differing = next((i for i, (a, b) in enumerate(zip(first, second)) if a != b), None)
    assert differing is None, (differing + 1, first[differing], second[differing])
    assert (cwd / "out" / stem / "trace.json").read_bytes() == (cwd / "again" / "trace.json").read_bytes()


def test_twisted_vacuum_square_is_expanded(example_runs):
    """-f*(dt + 2*n*cos(theta)*dphi)^2 gives g_t,phi = -2*n*f*cos(theta)."""
    proc, cwd = example_runs[0]["twisted_vacuum"]
    assert proc.returncode == 0, proc.stderr
    data = json.loads((cwd / "out" / "twisted_vacuum" / "trace.json").read_text(encoding="utf-8"))
    names = ["t", "r", "theta", "phi", "m", "n"]
    m, n, r, theta = (sp.Symbol(s, real=True) for s in ("m", "n", "r", "theta"))
    f = (r**2 - 2*m*r - n**2) / (r**2 + n**2)
    g = data["results"]["metric"]
    assert equal(read_sympy(g["t,phi"], names), -2*n*f*sp.cos(theta))
    assert equal(read_sympy(g["phi,t"], names), -2*n*f*sp.cos(theta))
    assert equal(read_sympy(g["t,t"], names), -f)


SMALL_METRICS = {
    "cross_term": ('coordinates = ["t", "phi"]\nline_element = "-dt^2 + 2*f*dt*dphi + dphi^2"\n'
                   '[symbols]\nf = "positive"\n',
                   ["t", "phi", "f"], {"t,t": "-1", "t,phi": "f", "phi,t": "f", "phi,phi": "1"}),
    "squared_sum": ('coordinates = ["t", "x"]\nline_element = "-(dt + w*dx)^2 + dx^2"\n'
                    '[symbols]\nw = "real"\n',
                    ["t", "x", "w"], {"t,t": "-1", "t,x": "-w", "x,t": "-w", "x,x": "1 - w**2"}),
    "squared_sum_with_cosine": (
        'coordinates = ["t", "theta", "phi"]\n'
        'line_element = "-(dt + 2*n*cos(theta)*dphi)^2 + dtheta^2 + sin(theta)^2*dphi^2"\n'
        '[symbols]\nn = "positive"\n',
        ["t", "theta", "phi", "n"],
        {"t,t": "-1", "t,phi": "-2*n*cos(theta)", "phi,t": "-2*n*cos(theta)", "theta,theta": "1",
         "phi,phi": "sin(theta)**2 - 4*n**2*cos(theta)**2"}),
    "single_cross_term_is_halved": ('coordinates = ["u", "v"]\nline_element = "-du*dv"\n',
                                    ["u", "v"], {"u,v": "-1/2", "v,u": "-1/2"}),
}


@pytest.fixture(scope="module")
def small_runs(tmp_path_factory):
    jobs, folders = {}, {}
    for name, (text, _, _) in SMALL_METRICS.items():
        cwd = tmp_path_factory.mktemp(name)
        (cwd / f"{name}.toml").write_text(text, encoding="utf-8")
        folders[name] = cwd
        jobs[name] = (["derive", f"{name}.toml", "-o", "result", "--quiet"], cwd)
    return {key: (proc, folders[key]) for key, proc in run_all(jobs).items()}


@pytest.mark.parametrize("name", SMALL_METRICS)
def test_line_element_gives_metric_components(small_runs, name):
    proc, cwd = small_runs[name]
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout == ""  # --quiet
    data = json.loads((cwd / "result" / "trace.json").read_text(encoding="utf-8"))
    _, names, expected = SMALL_METRICS[name]
    got = data["results"]["metric"]
    for key, value in expected.items():
        assert key in got, (key, got)
        assert equal(read_sympy(got[key], names), read_sympy(value, names)), (key, got[key], value)
    assert set(got) == set(expected)  # the trace lists the non-zero components only


# --- output formats ------------------------------------------------------------------

def test_formats_option_writes_only_what_was_asked(tmp_path):
    (tmp_path / "good.toml").write_text(GOOD_SMALL, encoding="utf-8")
    proc = run_stepper(["derive", "good.toml", "-o", "result", "--formats", "trace,notebook"], tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert sorted(p.name for p in (tmp_path / "result").iterdir()) == ["derivation.ipynb", "trace.json"]


def test_unknown_format_is_a_one_line_error(tmp_path):
    (tmp_path / "good.toml").write_text(GOOD_SMALL, encoding="utf-8")
    proc = run_stepper(["derive", "good.toml", "-o", "result", "--formats", "trace,docx"], tmp_path)
    assert_one_line_error(proc, "docx")
    assert not (tmp_path / "result").exists()


def test_without_tex_everything_else_is_written_and_a_warning_says_how(tmp_path):
    (tmp_path / "good.toml").write_text(GOOD_SMALL, encoding="utf-8")
    bare_path = tmp_path / "bin"
    bare_path.mkdir()
    (bare_path / "python").symlink_to(sys.executable)
    env = {"PATH": str(bare_path), "HOME": str(tmp_path)}
    proc = subprocess.run([sys.executable, "-m", "stepper", "derive", "good.toml", "-o", "result",
                           "--formats", "trace,tex,pdf"], cwd=tmp_path, capture_output=True, text=True,
                          timeout=TIMEOUT, env=env)
    assert proc.returncode == 1  # pdf was asked for by name and could not be made
    assert proc.stderr.count("\n") == 1 and "apt-get install" in proc.stderr and "Traceback" not in proc.stderr
    assert sorted(p.name for p in (tmp_path / "result").iterdir()) == ["report.tex", "trace.json"]
    default = subprocess.run([sys.executable, "-m", "stepper", "derive", "good.toml", "-o", "second"],
                             cwd=tmp_path, capture_output=True, text=True, timeout=TIMEOUT, env=env)
    assert default.returncode == 0 and "warning" in default.stderr
    assert "report.pdf" not in [p.name for p in (tmp_path / "second").iterdir()]


def test_user_templates_override_the_projects(tmp_path):
    (tmp_path / "good.toml").write_text(GOOD_SMALL, encoding="utf-8")
    mine = tmp_path / "mine" / "latex"
    mine.mkdir(parents=True)
    (mine / "steps.tex.j2").write_text("<% macro explain(kind) %>OUR GROUP'S WORDING<% endmacro %>\n")
    proc = run_stepper(["derive", "good.toml", "-o", "result", "--formats", "tex", "--templates", "mine"], tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "OUR GROUP'S WORDING" in (tmp_path / "result" / "report.tex").read_text()


def test_huge_power_in_a_line_element_is_refused_at_once(tmp_path):
    # Found in review: expanding before checking the degree could run for minutes.
    (tmp_path / "big.toml").write_text('coordinates = ["t", "r"]\nline_element = "(dt + dr + r + t + 3)^80"\n')
    (tmp_path / "big2.toml").write_text('coordinates = ["t", "r"]\nline_element = "(dt + dr)^100000"\n')
    for name in ("big.toml", "big2.toml"):
        proc = run_stepper(["derive", name, "-o", "result"], tmp_path)
        assert_one_line_error(proc, "raises a sum to the power")


def test_time_limit_stops_cleanly_and_writes_nothing(tmp_path):
    proc = run_stepper(["derive", str(EXAMPLES / "spinning_black_hole.toml"), "-o", "result",
                        "--time-limit", "0.05", "--jobs", "1"], tmp_path)
    assert proc.returncode == 3
    assert proc.stderr.strip().splitlines()[-1].startswith("stepper: stopped: the time limit of 0.05 s")
    assert "nothing was written" in proc.stderr and "Traceback" not in proc.stderr
    assert not (tmp_path / "result").exists()


def test_parallel_run_gives_the_same_bytes_as_the_serial_one(tmp_path):
    args = ["derive", str(EXAMPLES / "twisted_vacuum.toml"), "--formats", "trace,tex,notebook", "--quiet"]
    serial = run_stepper(args + ["-o", "one", "--jobs", "1"], tmp_path)
    parallel = run_stepper(args + ["-o", "two", "--jobs", "2"], tmp_path)
    assert serial.returncode == 0 and parallel.returncode == 0, (serial.stderr, parallel.stderr)
    for name in ("trace.json", "report.tex", "derivation.ipynb"):
        assert (tmp_path / "one" / name).read_bytes() == (tmp_path / "two" / name).read_bytes(), name


def test_the_process_ends_with_mains_status_and_every_line_written(tmp_path):
    """``python -m stepper`` ends the process without tearing the interpreter down (stepper.cli.run): the
    terminal lines are all there, the status is main's, and a closed stdout or a reader that went away is no
    traceback (common practice for command-line tools: 141 for a broken pipe)."""
    command = [sys.executable, "-m", "stepper", "derive", str(EXAMPLES / "round_sphere.toml"), "--formats", "trace"]
    done = subprocess.run(command + ["-o", str(tmp_path / "a")], capture_output=True, text=True, timeout=TIMEOUT)
    assert done.returncode == 0 and done.stdout.rstrip().splitlines()[-1].startswith("  written to "), done.stdout
    assert (tmp_path / "a" / "trace.json").is_file()
    closed = subprocess.run(command + ["-o", str(tmp_path / "b")], stdout=None, stderr=subprocess.PIPE, text=True,
                            timeout=TIMEOUT, preexec_fn=lambda: os.close(1))
    assert closed.returncode == 0 and "Traceback" not in closed.stderr, closed.stderr
    bad = subprocess.run([sys.executable, "-m", "stepper", "derive", str(tmp_path / "missing.toml"), "-o",
                          str(tmp_path / "c")], capture_output=True, text=True, timeout=TIMEOUT)
    assert bad.returncode == 2 and bad.stderr.startswith("stepper: error:")
    reader = subprocess.Popen(command + ["-o", str(tmp_path / "d")], stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    reader.stdout.close()  # the reader goes away before stepper writes its lines
    _, err = reader.communicate(timeout=TIMEOUT)
    assert reader.returncode in (0, 141) and b"Traceback" not in err, err
