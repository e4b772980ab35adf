"""Every command the README shows, run as a new user would, with default outputs.

The README's shell blocks are read from README.md itself, so a command added
there is run here too.  Placeholders (FILE.toml, DIR, MYDIR, TRACE.json) are
given real values; ``./setup.sh &&`` is dropped (the suite runs after it);
the test command itself is not run again from inside the tests.  Then every
example metric is derived and every claims file audited with default outputs,
and each exit status is checked against what the README documents.
"""

from __future__ import annotations

import json
import re
import shlex
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
README = (ROOT / "README.md").read_text(encoding="utf-8")
EXAMPLE_FILES = sorted((ROOT / "examples").glob("*.toml"))
CLAIM_FILES = sorted((ROOT / "examples" / "claims").glob("*.toml"))
DEFAULT_OUTPUTS = ("trace.json", "report.tex", "appendix.tex", "report.pdf", "derivation.ipynb")
TIMEOUT = 300

pytestmark = pytest.mark.slow

#: Commands of the README not run here, with the reason.
NOT_RUN = {
    "python3 -m pytest": "the test command itself: it is what runs this file",
    # A Dask scheduler and worker run until stopped: tests/test_batch.py starts both (on a free port) with these
    # commands and runs `stepper batch --scheduler` against them.
    "dask scheduler": "a server: started by tests/test_batch.py",
    "dask worker tcp://SCHEDULER:8786": "a server: started by tests/test_batch.py",
    "stepper batch examples -o catalogue --scheduler tcp://SCHEDULER:8786": "run by tests/test_batch.py",
}


def fenced_blocks() -> list[tuple[str, str]]:
    """(language, text) of every fenced block of the README, in order."""
    blocks, language, lines = [], None, []
    for line in README.splitlines():
        if line.startswith("```"):
            if language is None:
                language, lines = line[3:].strip(), []
            else:
                blocks.append((language, "\n".join(lines) + "\n"))
                language = None
        elif language is not None:
            lines.append(line)
    return blocks


def readme_blocks(language: str) -> list[str]:
    return [text for lang, text in fenced_blocks() if lang == language]


def readme_commands() -> list[str]:
    """Each command line of the README's sh blocks, comments and setup prefix removed."""
    commands = []
    for block in readme_blocks("sh"):
        for line in block.splitlines():
            line = line.split(" #", 1)[0].strip()
            line = line.removeprefix("./setup.sh && ").strip()
            if line and not line.startswith("#"):
                commands.append(line)
    return commands


def concrete(command: str) -> list[str]:
    """The command with its placeholders given real values (a working folder prepared by the fixture)."""
    words = shlex.split(command)
    values = {"FILE.toml": "examples/round_sphere.toml", "DIR": "chosen_folder", "MYDIR": "my_templates",
              "TRACE.json": "out/round_sphere/trace.json"}
    return [values.get(w, w) for w in words]


def run(words: list[str], cwd: Path) -> subprocess.CompletedProcess:
    if words[0] == "stepper":
        words = [sys.executable, "-m", "stepper", *words[1:]]
    elif words[0] == "python3":
        words = [sys.executable, *words[1:]]
    return subprocess.run(words, cwd=cwd, capture_output=True, text=True, timeout=TIMEOUT,
                          stdin=subprocess.DEVNULL)


def working_copy(tmp: Path) -> Path:
    """A folder laid out like the checkout as far as the README's commands need it."""
    shutil.copytree(ROOT / "examples", tmp / "examples")
    shutil.copytree(ROOT / "templates", tmp / "my_templates")
    return tmp


def test_the_readme_shows_commands():
    commands = readme_commands()
    assert any(c.startswith("stepper derive examples/") for c in commands)
    assert any(c.startswith("stepper audit examples/claims/") for c in commands)
    assert "python3 -m pytest" in commands  # the test command is documented


@pytest.fixture(scope="module")
def readme_runs(tmp_path_factory):
    cwd = working_copy(tmp_path_factory.mktemp("readme"))
    runs = {}
    for command in readme_commands():
        if command in NOT_RUN:
            continue
        runs[command] = run(concrete(command), cwd)
    return cwd, runs


@pytest.mark.parametrize("command", [c for c in readme_commands() if c not in NOT_RUN])
def test_readme_command_runs_with_its_documented_status(readme_runs, command):
    cwd, runs = readme_runs
    proc = runs[command]
    assert "Traceback" not in proc.stderr, proc.stderr
    assert "internal error" not in proc.stderr, proc.stderr
    words = concrete(command)
    if words[:2] == ["stepper", "audit"]:
        # 0 when every claim agrees, 1 when one does not (the examples hold deliberate slips)
        assert proc.returncode in (0, 1), proc.stderr
        agreed = re.search(r"(\d+) of (\d+) claims agree", proc.stdout)
        assert agreed, proc.stdout
        assert (proc.returncode == 0) == (agreed.group(1) == agreed.group(2))
    elif words[:2] == ["stepper", "batch"]:
        # 0 when every member's run ended with 0, 1 otherwise (the claims files hold deliberate slips)
        index = json.loads((cwd / words[words.index("-o") + 1] / "index.json").read_text(encoding="utf-8"))
        assert all(e["status"] == "ok" for e in index["entries"]), index["entries"]
        assert proc.returncode == (0 if all(e["exit_status"] == 0 for e in index["entries"]) else 1), proc.stderr
    else:
        assert proc.returncode == 0, proc.stderr


def test_readme_main_example_writes_every_default_output(readme_runs):
    cwd, runs = readme_runs
    folder = cwd / "out" / "spinning_black_hole"
    for name in DEFAULT_OUTPUTS:
        assert (folder / name).is_file() and (folder / name).stat().st_size > 0, name


def test_readme_quoted_wormhole_lines_are_what_stepper_prints(readme_runs):
    """The block of lines the README quotes from the wormhole example appears in its output."""
    cwd, runs = readme_runs
    proc = run(["stepper", "derive", "examples/wormhole_passage.toml", "--formats", "trace"], cwd)
    assert proc.returncode == 0, proc.stderr
    quoted = next(b for b in readme_blocks("") if "energy density rho" in b)
    for line in quoted.splitlines():
        assert line.rstrip() in proc.stdout, line


def test_readme_python_example_runs(tmp_path):
    cwd = working_copy(tmp_path)
    for block in readme_blocks("python"):
        proc = subprocess.run([sys.executable, "-c", block], cwd=cwd, capture_output=True, text=True,
                              timeout=TIMEOUT)
        assert proc.returncode == 0, proc.stderr


def test_readme_jupyter_session_displays_typeset_math(tmp_path):
    """The README's Jupyter session, one cell per paragraph, executed in a kernel: each displayed value carries
    LaTeX (text/latex) with the physics of the sphere of radius a (from memory: R_ij = g_ij / a^2, so
    R_thetatheta = 1 and R = 2/a^2; constant sectional curvature k = 1/a^2), the audit finds the wrong claim,
    and the PDF is written."""
    import nbformat
    from nbclient import NotebookClient
    cwd = working_copy(tmp_path)
    session = next(block for block in readme_blocks("python") if block.startswith("# In Jupyter"))
    cells = [nbformat.v4.new_code_cell(part.strip()) for part in session.split("\n\n") if part.strip()]
    notebook = nbformat.v4.new_notebook(cells=cells)
    NotebookClient(notebook, timeout=TIMEOUT, kernel_name="python3",
                   resources={"metadata": {"path": str(cwd)}}).execute()
    shown = {}
    for cell in notebook.cells:
        results = [o for o in cell.outputs if o.output_type == "execute_result"]
        assert not [o for o in cell.outputs if o.output_type == "error"], cell.outputs
        if results:
            shown[cell.source.splitlines()[-1]] = results[0]["data"]
    latex = {line: data["text/latex"] for line, data in shown.items() if "text/latex" in data}
    assert len(latex) == 4, sorted(shown)  # the derivation, the Ricci tensor, a verdict, the audited claim
    assert r"R = \frac{2}{a^{2}}" in latex["d"]
    assert r"R_{{\theta}{\theta}} = 1" in latex['d.quantity("ricci")']
    verdict = latex['d.verdict("constant_curvature")']
    assert r"\textbf{holds}" in verdict and r"k = \frac{1}{a^{2}}" in verdict
    claim = latex["checked.verdict(2)"]
    assert r"\textbf{differs}" in claim and r"\text{correct: }R_{{\theta}{\theta}} = 1" in claim
    assert "report.pdf" in next(data["text/plain"] for line, data in shown.items() if "stepper.render" in line)
    assert (cwd / "out" / "sphere" / "report.pdf").read_bytes().startswith(b"%PDF")


@pytest.fixture(scope="module")
def example_runs(tmp_path_factory):
    cwd = working_copy(tmp_path_factory.mktemp("examples"))
    runs = {}
    for path in EXAMPLE_FILES:
        runs["derive", path.stem] = run(["stepper", "derive", f"examples/{path.name}"], cwd)
    for path in CLAIM_FILES:
        runs["audit", path.stem] = run(["stepper", "audit", f"examples/claims/{path.name}"], cwd)
    return cwd, runs


@pytest.mark.parametrize("stem", [p.stem for p in EXAMPLE_FILES])
def test_every_example_derives_with_default_outputs(example_runs, stem):
    cwd, runs = example_runs
    proc = runs["derive", stem]
    assert proc.returncode == 0, proc.stderr
    assert "error" not in proc.stderr, proc.stderr  # progress lines may appear there on a slow machine
    for name in DEFAULT_OUTPUTS:
        assert (cwd / "out" / stem / name).is_file(), name


@pytest.mark.parametrize("stem", [p.stem for p in CLAIM_FILES])
def test_every_claims_file_audits_with_default_outputs(example_runs, stem):
    """Status 1 exactly when a claim does not agree (README, 'Exit status'); the audit lands in every output."""
    cwd, runs = example_runs
    proc = runs["audit", stem]
    assert "internal error" not in proc.stderr and "Traceback" not in proc.stderr, proc.stderr
    folder = cwd / "out" / stem
    for name in DEFAULT_OUTPUTS:
        assert (folder / name).is_file(), name
    audit = json.loads((folder / "trace.json").read_text(encoding="utf-8"))["results"]["audit"]
    assert proc.returncode == (0 if audit["all_agree"] else 1), proc.stderr
    notebook = json.loads((folder / "derivation.ipynb").read_text(encoding="utf-8"))
    claim_cells = [c for c in notebook["cells"] if c["cell_type"] == "code" and "# Claim " in "".join(c["source"])]
    assert len(claim_cells) == len(audit["claims"])
