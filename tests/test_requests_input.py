"""Bad [matter], [ansatz] and [orbit] tables on the command line.

Each bad table must give exit status 2, exactly one line on stderr starting
with ``stepper: error:``, no traceback, a message naming the problem, and
nothing written to the output folder (common practice for stepper's input
errors; see tests/test_cli.py and the README's "Exit status").

Each bad file is a good file (checked below to load) with one thing broken.
The runs start together in a module-scoped fixture, a few at a time, because
starting the interpreter costs most of a second.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tomllib
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import pytest

from stepper.metricfile import metric_from_data

TIMEOUT = 180
WORKERS = max(2, os.cpu_count() or 2)

SCHWARZSCHILD = '''coordinates = ["t", "r", "theta", "phi"]
line_element = "-(1 - 2*M/r)*dt^2 + dr^2/(1 - 2*M/r) + r^2*dtheta^2 + r^2*sin(theta)^2*dphi^2"
[symbols]
M = "positive"
r = "positive"
Lambda = "real"
'''

ANSATZ_METRIC = '''coordinates = ["t", "r", "theta", "phi"]
line_element = "-A(r)*dt^2 + B(r)*dr^2 + r^2*dtheta^2 + r^2*sin(theta)^2*dphi^2"
[symbols]
r = "positive"
Lambda = "real"
[functions]
A = ["r"]
B = ["r"]
C = ["r"]
'''

START = 'start = { t = "0", r = "10", theta = "pi/2", phi = "0" }\n'
VELOCITY = 'velocity = { r = "0", theta = "0", phi = "1/30" }\n'

# the good tables each bad case breaks in one place
GOOD = {
    "matter": SCHWARZSCHILD + '[matter]\nunits = "geometric"\ncosmological_constant = "Lambda"\ntime = "t"\n'
                              '[matter.region]\nr = ["3", "20"]\nM = ["1", "1"]\n',
    "ansatz": ANSATZ_METRIC + '[ansatz]\nunknowns = ["A", "B"]\ncosmological_constant = "Lambda"\n',
    "orbit": SCHWARZSCHILD + '[orbit]\nkind = "timelike"\nvalues = { M = "1" }\n' + START + VELOCITY + 'span = "100"\n',
}


@dataclass
class Bad:
    id: str
    content: str
    needles: tuple[str, ...]


BAD = [
    # [matter]
    Bad("matter_unknown_key", SCHWARZSCHILD + '[matter]\nunits = "geometric"\ncolour = "red"\n',
        ("'colour'", "[matter]")),
    Bad("matter_bad_units", SCHWARZSCHILD + '[matter]\nunits = "cgs"\n', ("units", "'cgs'")),
    Bad("matter_lambda_uses_coordinate", SCHWARZSCHILD + '[matter]\ncosmological_constant = "Lambda/r^2"\n',
        ("cosmological_constant", "'r'")),
    Bad("matter_lambda_undeclared_name", SCHWARZSCHILD + '[matter]\ncosmological_constant = "Lam"\n',
        ("'Lam'", "cosmological_constant")),
    Bad("matter_lambda_is_a_function", ANSATZ_METRIC + '[matter]\ncosmological_constant = "A"\n',
        ("'A'", "cosmological_constant")),
    Bad("matter_region_low_above_high", SCHWARZSCHILD + '[matter]\n[matter.region]\nr = ["20", "3"]\n',
        ("region", "r", "20", "3")),
    Bad("matter_region_undeclared_name", SCHWARZSCHILD + '[matter]\n[matter.region]\nq = ["1", "2"]\n',
        ("region", "'q'")),
    Bad("matter_region_not_a_pair", SCHWARZSCHILD + '[matter]\n[matter.region]\nr = ["1", "2", "3"]\n',
        ("region", "r")),
    Bad("matter_region_bound_not_a_number", SCHWARZSCHILD + '[matter]\n[matter.region]\nr = ["2*M", "10"]\n',
        ("region", "'M'")),
    Bad("matter_time_not_a_coordinate", SCHWARZSCHILD + '[matter]\ntime = "tau"\n', ("time",)),
    Bad("matter_physical_units_G_is_a_coordinate",
        'coordinates = ["t", "G"]\nline_element = "-dt^2 + dG^2"\n[matter]\nunits = "physical"\n',
        ("physical", "'G'")),
    # [ansatz]
    Bad("ansatz_unknown_key", ANSATZ_METRIC + '[ansatz]\nunknowns = ["A", "B"]\nmethod = "fast"\n',
        ("'method'", "[ansatz]")),
    Bad("ansatz_lambda_uses_coordinate", ANSATZ_METRIC + '[ansatz]\nunknowns = ["A", "B"]\ncosmological_constant = "r"\n',
        ("cosmological_constant", "'r'")),
    Bad("ansatz_unknown_not_declared", ANSATZ_METRIC + '[ansatz]\nunknowns = ["A", "F"]\n', ("unknowns", "'F'")),
    Bad("ansatz_unknown_not_in_metric", ANSATZ_METRIC + '[ansatz]\nunknowns = ["A", "C"]\n', ("unknowns", "'C'")),
    Bad("ansatz_no_unknowns", ANSATZ_METRIC + '[ansatz]\nunknowns = []\n', ("unknowns",)),
    # [orbit]
    Bad("orbit_unknown_key",
        SCHWARZSCHILD + '[orbit]\nvalues = { M = "1" }\n' + START + VELOCITY + 'steps = "5"\n',
        ("'steps'", "[orbit]")),
    Bad("orbit_missing_parameter_value", SCHWARZSCHILD + '[orbit]\nvalues = {}\n' + START + VELOCITY,
        ("orbit.values", "'M'")),
    Bad("orbit_missing_start_coordinate",
        SCHWARZSCHILD + '[orbit]\nvalues = { M = "1" }\nstart = { t = "0", r = "10", theta = "pi/2" }\n' + VELOCITY,
        ("orbit.start", "'phi'")),
    Bad("orbit_missing_velocity",
        SCHWARZSCHILD + '[orbit]\nvalues = { M = "1" }\n' + START + 'velocity = { r = "0", phi = "1/30" }\n',
        ("orbit.velocity", "'theta'")),
    Bad("orbit_velocity_of_time_coordinate",
        SCHWARZSCHILD + '[orbit]\nvalues = { M = "1" }\n' + START
        + 'velocity = { t = "1", r = "0", theta = "0", phi = "1/30" }\n', ("orbit.velocity", "'t'")),
    Bad("orbit_start_not_a_number",
        SCHWARZSCHILD + '[orbit]\nvalues = { M = "1" }\nstart = { t = "0", r = "10*M", theta = "pi/2", phi = "0" }\n'
        + VELOCITY, ("orbit.start.r", "'M'")),
    Bad("orbit_bad_kind", SCHWARZSCHILD + '[orbit]\nkind = "spacelike"\nvalues = { M = "1" }\n' + START + VELOCITY,
        ("kind", "'spacelike'")),
    Bad("orbit_with_free_functions", ANSATZ_METRIC + '[orbit]\nvalues = { }\n' + START + VELOCITY,
        ("[orbit]", "free functions")),
]


def run_stepper(args: list[str], cwd: Path) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "stepper", *args], cwd=cwd, capture_output=True,
                          text=True, timeout=TIMEOUT, stdin=subprocess.DEVNULL)


@pytest.fixture(scope="module")
def bad_runs(tmp_path_factory):
    folders = {}
    for case in BAD:
        cwd = tmp_path_factory.mktemp(case.id)
        (cwd / "metric.toml").write_text(case.content, encoding="utf-8")
        folders[case.id] = cwd
    with ThreadPoolExecutor(max_workers=WORKERS) as pool:
        futures = {case.id: pool.submit(run_stepper, ["derive", "metric.toml", "-o", "result"], folders[case.id])
                   for case in BAD}
        return {key: (future.result(), folders[key]) for key, future in futures.items()}


@pytest.mark.parametrize("table", sorted(GOOD))
def test_the_good_tables_load(table):
    # Control: the files the bad cases break are themselves good, so each error below comes
    # from the one broken thing.
    metric = metric_from_data(tomllib.loads(GOOD[table]))
    assert getattr(metric, table) is not None


def test_the_bad_cases_are_all_different():
    assert len({case.content for case in BAD}) == len(BAD)
    assert len({case.id for case in BAD}) == len(BAD)


@pytest.mark.slow
@pytest.mark.parametrize("case", BAD, ids=[c.id for c in BAD])
def test_bad_request_gives_one_line_and_writes_nothing(bad_runs, case):
    proc, cwd = bad_runs[case.id]
    assert proc.returncode == 2, (proc.returncode, proc.stderr[-2000:])
    assert "Traceback" not in proc.stderr, proc.stderr
    assert proc.stderr.startswith("stepper: error: "), proc.stderr
    assert proc.stderr.endswith("\n") and proc.stderr.count("\n") == 1, repr(proc.stderr)
    assert proc.stdout == "", proc.stdout
    line = proc.stderr.strip().lower()
    for needle in case.needles:
        assert needle.lower() in line, f"{needle!r} not in {line!r}"
    result = cwd / "result"
    assert not result.exists() or not any(result.iterdir()), sorted(result.rglob("*"))
    assert not (cwd / "out").exists()
    assert not [p for p in cwd.rglob("*") if p.name.endswith(".part") or p.name == "trace.json"]
