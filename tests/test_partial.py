"""A run stopped by its time limit (or Ctrl-C) keeps the stages it finished: a partial derivation, marked
partial in the trace, the report and the notebook, never mixed with a previous run's files."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
import sympy

from conftest import ROTATING_DE_SITTER
from stepper import chain
from stepper.cli import output_files
from stepper.errors import TimeLimitReached
from stepper.metricfile import load_metric
from stepper.trace import load_trace, trace_json

ROOT = Path(__file__).resolve().parent.parent
EXTERIOR = ROOT / "examples" / "compact_star_exterior.toml"


def stage_names(metric) -> list[str]:
    seen = []

    def note(label, done, total):
        if " (stage " in label:
            seen.append(label.split(" (stage ")[0].replace(" ", "_"))
    chain.derive(metric, progress=note)
    return seen


def stopped_in(metric, stage: str, kind=TimeLimitReached):
    def stop(label, done, total):
        if label.startswith(stage.replace("_", " ") + " (stage "):
            raise kind(label)
    with pytest.raises(kind) as caught:
        chain.derive(metric, progress=stop)
    return getattr(caught.value, "partial", None)


def test_a_stopped_run_keeps_exactly_the_stages_it_finished():
    metric = load_metric(EXTERIOR)
    whole = chain.derive(metric)
    stages = stage_names(metric)
    assert stopped_in(metric, stages[0]) is None  # nothing finished: nothing to keep
    for number, stage in enumerate(stages[1:], start=1):
        partial = stopped_in(metric, stage)
        assert partial.stopped == {"reason": "time limit", "during": stage, "finished": stages[:number]}
        assert partial.steps == whole.steps[:len(partial.steps)], stage
        for key, value in partial.results.items():  # every result kept is the whole run's result
            if key == "verdicts":
                assert all(whole.results["verdicts"][name] == v for name, v in value.items())
            else:
                assert whole.results[key] == value, (stage, key)
        assert len(partial.steps) < len(whole.steps)
        assert load_trace(trace_json(partial)).stopped == partial.stopped
        assert trace_json(load_trace(trace_json(partial))) == trace_json(partial)


def test_ctrl_c_keeps_the_finished_stages_too():
    partial = stopped_in(load_metric(EXTERIOR), "kretschmann", KeyboardInterrupt)
    assert partial.stopped["reason"] == "interrupted"
    assert partial.stopped["finished"][-1] == "verdict_constant_curvature"
    assert "verdicts" in partial.results and "kretschmann" not in partial.results


def test_the_report_and_notebook_say_partial():
    partial = load_trace(trace_json(stopped_in(load_metric(EXTERIOR), "weyl")))
    files, _ = output_files(partial, ROOT / "out" / "unused", ["trace", "tex", "notebook"])
    assert "Partial derivation." in files["report.tex"] and "the Kretschmann scalar" in files["report.tex"]
    assert "while computing the Weyl tensor" in files["report.tex"]
    notebook = json.loads(files["derivation.ipynb"])
    assert "**Partial derivation.**" in "".join(notebook["cells"][0]["source"])
    whole = load_trace(trace_json(chain.derive(load_metric(EXTERIOR))))
    assert "Partial derivation" not in output_files(whole, ROOT / "out" / "unused", ["tex"])[0]["report.tex"]




@pytest.mark.slow
def test_time_limit_writes_a_partial_set_in_place_of_the_previous_one(tmp_path):
    (tmp_path / "hole.toml").write_text(ROTATING_DE_SITTER)
    out = tmp_path / "out"
    first = subprocess.run([sys.executable, "-m", "stepper", "derive", str(EXTERIOR), "-o", str(out), "--quiet"],
                           capture_output=True, text=True, timeout=600)
    assert first.returncode == 0, first.stderr
    assert any(name.startswith("plot-") for name in (p.name for p in out.iterdir()))  # the exterior has plots
    run = subprocess.run([sys.executable, "-m", "stepper", "derive", str(tmp_path / "hole.toml"), "-o", str(out),
                          "--time-limit", "2.5", "--jobs", "1"], capture_output=True, text=True, timeout=600)
    assert run.returncode == 3, run.stderr
    last = run.stderr.strip().splitlines()[-1]
    assert last.startswith("stepper: stopped: the time limit of 2.5 s was reached during ") and "partial" in last, last
    assert "Traceback" not in run.stderr
    assert sorted(p.name for p in out.iterdir()) == ["appendix.tex", "derivation.ipynb", "report.pdf", "report.tex",
                                                    "trace.json"]  # nothing of the previous set is left
    trace = load_trace((out / "trace.json").read_bytes())
    assert trace.metric.title == "rotating hole in a de Sitter background"
    assert trace.stopped["reason"] == "time limit" and trace.stopped["finished"][:4] == [
        "metric_step", "metric_derivatives", "determinant", "inverse_metric"]
    text = subprocess.run(["pdftotext", str(out / "report.pdf"), "-"], capture_output=True, text=True).stdout
    assert "Partial derivation." in text and "A partial curvature derivation" in text
    import nbformat
    from nbclient import NotebookClient
    notebook = nbformat.read(out / "derivation.ipynb", as_version=4)
    NotebookClient(notebook, timeout=600, kernel_name="python3").execute()  # every kept step rechecks


@pytest.mark.slow
def test_a_partial_report_compiles_wherever_the_run_stopped(tmp_path):
    """Stopped before any verdict or check, the summary and the checks section have nothing to list: the
    PDF must still compile (an empty list is a LaTeX error)."""
    metric = load_metric(EXTERIOR)
    for stage in ("inverse_metric", "christoffel", "verdict_ricci_flat"):
        partial = load_trace(trace_json(stopped_in(metric, stage)))
        files, problems = output_files(partial, tmp_path / stage, ["pdf"])
        assert not problems and files["report.pdf"].startswith(b"%PDF"), (stage, problems)


def test_rotating_black_hole_stopped_in_the_kretschmann_stage_keeps_curvature_and_verdicts(tmp_path):
    """The case the time limit is for: a rotating black hole with a cosmological constant stopped while its
    Kretschmann scalar is computed keeps Christoffel, Riemann, Ricci, Einstein and the four verdicts reached
    before it, in the trace, the report and the notebook."""
    (tmp_path / "hole.toml").write_text(ROTATING_DE_SITTER)
    partial = stopped_in(load_metric(tmp_path / "hole.toml"), "kretschmann")
    assert partial.stopped["during"] == "kretschmann"
    assert {"christoffel", "riemann", "ricci", "scalar", "einstein"} <= set(partial.stopped["finished"])
    assert "kretschmann" not in partial.results and "weyl" not in partial.results
    verdicts = partial.results["verdicts"]
    # Kerr-de Sitter is an Einstein space, R_ij = Lambda g_ij, not Ricci-flat (Griffiths & Podolsky, Exact
    # Space-Times, section 11.1)
    assert verdicts["ricci_flat"]["holds"] is False and verdicts["einstein_space"]["holds"] is True
    scalar = partial.results["scalar"]
    L = next(s for s in scalar.free_symbols if s.name == "L")
    assert sympy.simplify(scalar - 4 * L) == 0  # R = 4 Lambda for R_ij = Lambda g_ij in four dimensions
    files, _ = output_files(load_trace(trace_json(partial)), tmp_path / "out", ["trace", "tex", "notebook"])
    assert json.loads(files["trace.json"])["stopped"]["during"] == "kretschmann"
    assert "Partial derivation." in files["report.tex"] and "Kretschmann" in files["report.tex"]
    assert "**Partial derivation.**" in "".join(json.loads(files["derivation.ipynb"])["cells"][0]["source"])
