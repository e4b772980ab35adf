"""stepper batch: inputs found, members keyed and skipped, the index, resuming, one machine and Dask.

The quick tests replace the member run (a subprocess) by a stand-in and check the coordinator: what is
run, what is skipped, what is written.  The slow ones run the real command: the examples with a generated
family and one broken file, again (everything skipped), through a local Dask cluster and through a
scheduler and a worker started with Dask's own commands (byte-identical traces), and with a time limit.
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import os
import shutil
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest
import sympy

from stepper import batch
from stepper.batch import Member, Options, collect_members, index_html, member_key, run_batch
from stepper.cli import main
from stepper.errors import InputError

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"


def _catalogue_module():
    spec = importlib.util.spec_from_file_location("catalogue", ROOT / "bench" / "catalogue.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _inputs(folder: Path) -> Path:
    """A few small examples, a claims file in a sub-folder naming its metric as ../, and a broken file."""
    folder.mkdir()
    for name in ("round_sphere", "hyperbolic_plane", "compact_star_exterior"):
        shutil.copy(EXAMPLES / f"{name}.toml", folder / f"{name}.toml")
    (folder / "claims").mkdir()
    shutil.copy(EXAMPLES / "claims" / "seminar_notes.toml", folder / "claims" / "seminar_notes.toml")
    (folder / "broken.toml").write_text('title = "broken"\ncoordinates = ["x", "y"]\nline_element = "dx^2 +"\n')
    return folder


# ---------------------------------------------------------------------------
# Quick: the coordinator with a stand-in for the member processes
# ---------------------------------------------------------------------------

def test_inputs_are_found_in_folders_and_lists_and_claims_carry_their_metric(tmp_path):
    folder = _inputs(tmp_path / "in")
    members = {m.name: m for m in collect_members([str(folder)])}
    assert set(members) == {"round_sphere", "hyperbolic_plane", "compact_star_exterior", "claims--seminar_notes",
                            "broken"}
    assert members["round_sphere"].command == "derive"
    claims = members["claims--seminar_notes"]
    assert claims.command == "audit"
    # The metric file sits where the claims file names it ("../compact_star_exterior.toml"), relative to it.
    metric_at = os.path.normpath(os.path.join(os.path.dirname(claims.entry), "../compact_star_exterior.toml"))
    assert claims.files[metric_at] == (folder / "compact_star_exterior.toml").read_bytes()
    listing = tmp_path / "list.txt"
    listing.write_text("# two files, one twice\nin/round_sphere.toml\nin/round_sphere.toml\n\n")
    assert [m.name for m in collect_members([str(listing)])] == ["in--round_sphere", "in--round_sphere-2"]


@pytest.mark.parametrize("arguments, words", [
    (["nowhere"], "no such folder"),
    (["LIST"], "is not a .toml file"),
    (["EMPTY"], "no metric or claims files"),
])
def test_bad_inputs_are_one_line_errors(tmp_path, arguments, words):
    listing = tmp_path / "list.txt"
    listing.write_text("missing.toml\n")
    (tmp_path / "empty").mkdir()
    arguments = [{"LIST": str(listing), "EMPTY": str(tmp_path / "empty")}.get(a, a) for a in arguments]
    with pytest.raises(InputError, match=words):
        collect_members(arguments)


def test_the_key_follows_content_and_options(tmp_path):
    member = Member("m", tmp_path / "m.toml", "derive", {"m.toml": b"a"}, "m.toml")
    other = Member("m", tmp_path / "m.toml", "derive", {"m.toml": b"b"}, "m.toml")
    options = Options(formats=("trace",))
    key = member_key(member, options, "v1")
    assert key == member_key(member, Options(formats=("trace",)), "v1")
    assert key != member_key(other, options, "v1")
    assert key != member_key(member, Options(formats=("trace",), time_limit=5.0), "v1")
    assert key != member_key(member, options, "v2")


def _fake_trace(title: str) -> bytes:
    return json.dumps({"metric": {"title": title, "dimension": 2},
                       "results": {"scalar": {"expr": "2/rho**2"}, "verdicts": {"ricci_flat": {"holds": False}},
                                   "algebraic_type": "O"}}).encode()


class FakeRuns:
    """Stands in for run_member: records what was run; ``fail`` names inputs that crash or are bad."""

    def __init__(self, stop_after: int | None = None, bad=(), crash=()) -> None:
        self.ran: list[str] = []
        self.stop_after, self.bad, self.crash = stop_after, bad, crash

    def __call__(self, task: dict) -> dict:
        name = Path(task["entry"]).stem
        if self.stop_after is not None and len(self.ran) >= self.stop_after:
            raise KeyboardInterrupt
        self.ran.append(name)
        if name in self.crash:
            raise RuntimeError("a worker fell over")
        if name in self.bad:
            return {"exit_status": 2, "message": "error: broken", "files": {}, "seconds": 0.1}
        return {"exit_status": 0, "message": "", "files": {"trace.json": _fake_trace(name)}, "seconds": 0.2}


def _members(folder: Path, count: int) -> list[Member]:
    folder.mkdir(exist_ok=True)
    for number in range(count):
        if not (folder / f"m{number}.toml").exists():
            (folder / f"m{number}.toml").write_text(f'title = "m{number}"\n')
    return collect_members([str(folder)])


def test_an_interrupted_batch_continues_where_it_stopped(tmp_path, monkeypatch):
    out = tmp_path / "out"
    fake = FakeRuns(stop_after=2)
    monkeypatch.setattr(batch, "run_member", fake)
    first = run_batch(_members(tmp_path / "in", 5), out, Options(), workers=1, quiet=True)
    assert isinstance(first.interrupted, KeyboardInterrupt)
    index = json.loads((out / "index.json").read_text())
    assert [e["name"] for e in index["entries"]] == ["m0", "m1"]  # written although the run was stopped
    again = FakeRuns()
    monkeypatch.setattr(batch, "run_member", again)
    second = run_batch(_members(tmp_path / "in", 5), out, Options(), workers=2, quiet=True)
    assert sorted(again.ran) == ["m2", "m3", "m4"] and second.skipped == 2
    third = FakeRuns()
    monkeypatch.setattr(batch, "run_member", third)
    run_batch(_members(tmp_path / "in", 5), out, Options(), workers=2, quiet=True)
    assert third.ran == []
    # A changed input, or a member whose trace was removed, runs again; the others stay skipped.
    (tmp_path / "in" / "m3.toml").write_text('title = "m3, changed"\n')
    (out / "m4" / "trace.json").unlink()
    run_batch(_members(tmp_path / "in", 5), out, Options(), workers=2, quiet=True)
    assert sorted(third.ran) == ["m3", "m4"]
    # Other options are another key: everything runs.
    fourth = FakeRuns()
    monkeypatch.setattr(batch, "run_member", fourth)
    run_batch(_members(tmp_path / "in", 5), out, Options(skip_invariants=True), workers=2, quiet=True)
    assert len(fourth.ran) == 5


def test_one_failing_member_never_stops_the_others(tmp_path, monkeypatch):
    out = tmp_path / "out"
    fake = FakeRuns(bad=("m1",), crash=("m2",))
    monkeypatch.setattr(batch, "run_member", fake)
    result = run_batch(_members(tmp_path / "in", 4), out, Options(), workers=2, quiet=True)
    status = {e["name"]: e["status"] for e in result.entries}
    assert status == {"m0": "ok", "m1": "bad input", "m2": "internal error", "m3": "ok"}
    assert batch.batch_exit_status(result) == 1
    entry = next(e for e in result.entries if e["name"] == "m0")
    assert entry["trace_sha256"] == hashlib.sha256((out / "m0" / "trace.json").read_bytes()).hexdigest()
    assert entry["algebraic_type"] == "O" and entry["results"]["scalar"] == "2/rho**2"
    assert sorted(os.listdir(out / "m0")) == ["trace.json"]
    # A bad input is finished (the same input is bad again); a crash is tried again.
    again = FakeRuns()
    monkeypatch.setattr(batch, "run_member", again)
    run_batch(_members(tmp_path / "in", 4), out, Options(), workers=2, quiet=True)
    assert again.ran == ["m2"]


def test_an_output_folder_with_other_files_is_refused(tmp_path, monkeypatch):
    monkeypatch.setattr(batch, "run_member", FakeRuns())
    out = tmp_path / "out"
    out.mkdir()
    (out / "thesis.tex").write_text("mine")
    with pytest.raises(InputError, match="no batch index"):
        run_batch(_members(tmp_path / "in", 1), out, Options(), quiet=True)
    (out / "thesis.tex").unlink()
    run_batch(_members(tmp_path / "in", 1), out, Options(), quiet=True)
    (out / "m0" / "notes.txt").write_text("mine")
    with pytest.raises(InputError, match="did not write"):
        run_batch(_members(tmp_path / "in", 1), out, Options(), quiet=True)


def test_the_html_index_escapes_everything():
    hostile = '<script>alert("x")</script> & "quotes"'
    data = {"stepper": "v", "options": {}, "entries": [
        {"name": "a<b>", "file": hostile, "title": hostile, "dimension": 2, "status": "bad input",
         "message": hostile, "results": {"scalar": "x<y"}, "verdicts": {"ricci_flat": True},
         "seconds": 1.0, "outputs": ["trace.json"], "algebraic_type": hostile}]}
    page = index_html(data)
    assert "<script>" not in page and "a<b>" not in page and "x<y" not in page
    assert "&lt;script&gt;" in page and 'href="a%3Cb%3E/trace.json"' in page


def test_bad_options_exit_2_with_one_line(tmp_path, capsys):
    folder = _inputs(tmp_path / "in")
    for argv in (["batch", str(folder), "-o", str(tmp_path / "o"), "--workers", "0"],
                 ["batch", str(folder), "-o", str(tmp_path / "o"), "--time-limit", "-1"],
                 ["batch", str(folder), "-o", str(tmp_path / "o"), "--formats", "trace,poster"],
                 ["batch", str(tmp_path / "nowhere"), "-o", str(tmp_path / "o")],
                 ["batch", str(folder)],
                 ["batch", str(folder), "-o", str(tmp_path / "o"), "--scheduler", "x", "--local-cluster", "2"]):
        with pytest.raises(SystemExit) if "-o" not in argv or "--scheduler" in argv else _no_raise():
            assert main(argv) == 2
        err = capsys.readouterr().err
        assert len(err.strip().splitlines()) == 1 and "Traceback" not in err, err


class _no_raise:
    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False


# ---------------------------------------------------------------------------
# Slow: the real command, on this machine and on Dask
# ---------------------------------------------------------------------------

def _stepper(*words: str, cwd: Path, timeout: float = 600) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "stepper", *words], cwd=cwd, capture_output=True, text=True,
                          timeout=timeout, stdin=subprocess.DEVNULL)


def _traces(out: Path) -> dict[str, bytes]:
    index = json.loads((out / "index.json").read_text())
    return {e["name"]: (out / e["name"] / "trace.json").read_bytes() for e in index["entries"] if e["status"] == "ok"}


@pytest.fixture(scope="module")
def catalogue_run(tmp_path_factory):
    """The examples with a generated family (round 2- and 3-spheres, an FLRW universe, free scale factors)
    and one broken file, run once with two workers on this machine."""
    cwd = tmp_path_factory.mktemp("batch")
    folder = _inputs(cwd / "in")
    catalogue = _catalogue_module()
    family = dict(catalogue.spheres()[:2] + [catalogue.flrw()[2]] + catalogue.scale_factors()[:1])
    (folder / "family").mkdir()
    for name, text in family.items():
        (folder / "family" / f"{name}.toml").write_text(text)
    proc = _stepper("batch", "in", "-o", "here", "--formats", "trace", "--workers", "2", cwd=cwd)
    return cwd, proc, sorted(family)


@pytest.mark.slow
def test_a_batch_finishes_with_a_bad_file_among_its_members(catalogue_run):
    cwd, proc, family = catalogue_run
    assert "Traceback" not in proc.stderr, proc.stderr
    assert proc.returncode == 1, proc.stderr  # a broken file and a claims file with deliberate slips
    index = json.loads((cwd / "here" / "index.json").read_text())
    status = {e["name"]: e for e in index["entries"]}
    assert status["broken"]["status"] == "bad input" and "in/broken.toml" in proc.stdout
    for name in ["round_sphere", "hyperbolic_plane", "compact_star_exterior", "claims--seminar_notes",
                 *(f"family--{n}" for n in family)]:
        assert status[name]["status"] == "ok", status[name]
        assert status[name]["trace_sha256"] == hashlib.sha256(
            (cwd / "here" / name / "trace.json").read_bytes()).hexdigest()
    assert status["claims--seminar_notes"]["exit_status"] == 1 and status["claims--seminar_notes"]["audit"]["claims"]
    assert (cwd / "here" / "index.html").is_file()
    # A round 2-sphere of radius rho has R = 2/rho^2 (from memory: K = 1/rho^2, R = 2K), read back from the trace.
    from stepper.trace import read_trace_file
    sphere = read_trace_file(cwd / "here" / "round_sphere" / "trace.json")
    rho = sympy.Symbol("rho", positive=True)
    assert sympy.simplify(sphere.results["scalar"] - 2 / rho**2) == 0
    # The member's trace is the one `stepper derive` writes for the same file.
    direct = _stepper("derive", "in/round_sphere.toml", "-o", "direct", "--formats", "trace", "--quiet", cwd=cwd)
    assert direct.returncode == 0, direct.stderr
    assert (cwd / "direct" / "trace.json").read_bytes() == (cwd / "here" / "round_sphere" / "trace.json").read_bytes()


@pytest.mark.slow
def test_a_second_run_skips_everything_already_done(catalogue_run):
    cwd, _, _ = catalogue_run
    before = _traces(cwd / "here")
    proc = _stepper("batch", "in", "-o", "here", "--formats", "trace", "--workers", "2", cwd=cwd)
    assert proc.returncode == 1 and "0 run, 9 already done" in proc.stdout, proc.stdout + proc.stderr
    assert _traces(cwd / "here") == before


@pytest.mark.slow
def test_a_local_dask_cluster_writes_the_same_traces(catalogue_run):
    cwd, _, _ = catalogue_run
    proc = _stepper("batch", "in", "-o", "dask", "--formats", "trace", "--local-cluster", "2", cwd=cwd)
    assert proc.returncode == 1 and "Traceback" not in proc.stderr, proc.stderr
    assert _traces(cwd / "dask") == _traces(cwd / "here") and len(_traces(cwd / "here")) == 8
    same = _stepper("compare", "here", "dask", cwd=cwd)
    assert same.returncode == 0 and "0 changed" in same.stdout, same.stdout + same.stderr


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.mark.slow
def test_a_scheduler_and_a_worker_started_with_dasks_commands(catalogue_run):
    """The README's `dask scheduler` and `dask worker ADDRESS`, then `stepper batch --scheduler ADDRESS`."""
    cwd, _, _ = catalogue_run
    dask = shutil.which("dask") or pytest.fail("the dask command is missing: pip install 'dask[distributed]'")
    address = f"tcp://127.0.0.1:{_free_port()}"
    logs = cwd / "dask-logs"
    logs.mkdir(exist_ok=True)
    started = []
    try:
        started.append(subprocess.Popen([dask, "scheduler", "--host", "127.0.0.1", "--port", address.rsplit(":", 1)[1],
                                         "--no-dashboard"], cwd=cwd, stdout=subprocess.DEVNULL,
                                        stderr=open(logs / "scheduler.log", "w"), stdin=subprocess.DEVNULL))
        started.append(subprocess.Popen([dask, "worker", address, "--nthreads", "2", "--no-dashboard"], cwd=cwd,
                                        stdout=subprocess.DEVNULL, stderr=open(logs / "worker.log", "w"),
                                        stdin=subprocess.DEVNULL))
        proc = _stepper("batch", "in", "-o", "cluster", "--formats", "trace", "--scheduler", address, cwd=cwd)
        assert proc.returncode == 1 and "Traceback" not in proc.stderr, proc.stderr
        assert _traces(cwd / "cluster") == _traces(cwd / "here")
    finally:
        for process in reversed(started):
            process.terminate()
        for process in reversed(started):
            try:
                process.wait(timeout=30)
            except subprocess.TimeoutExpired:
                process.kill()
                process.wait()
    unreachable = _stepper("batch", "in", "-o", "nowhere", "--scheduler", f"tcp://127.0.0.1:{_free_port()}", cwd=cwd)
    assert unreachable.returncode == 2 and len(unreachable.stderr.strip().splitlines()) == 1, unreachable.stderr


@pytest.mark.slow
def test_the_time_limit_applies_to_each_member(tmp_path):
    folder = tmp_path / "in"
    folder.mkdir()
    for name in ("round_sphere", "hyperbolic_plane"):
        shutil.copy(EXAMPLES / f"{name}.toml", folder / f"{name}.toml")
    proc = _stepper("batch", "in", "-o", "out", "--formats", "trace", "--time-limit", "0.01", "--workers", "2",
                    cwd=tmp_path)
    assert proc.returncode == 1, proc.stderr
    index = json.loads((tmp_path / "out" / "index.json").read_text())
    assert [e["status"] for e in index["entries"]] == ["timed out", "timed out"]
    assert not (tmp_path / "out" / "round_sphere").exists()


@pytest.mark.slow
def test_the_catalogue_benchmark_runs_at_a_tiny_size(tmp_path):
    """bench/catalogue.py as the README shows it, at a size CI can afford."""
    proc = subprocess.run([sys.executable, str(ROOT / "bench" / "catalogue.py"), "--size", "4",
                           "--modes", "here-1,dask-1"], cwd=tmp_path, capture_output=True, text=True, timeout=600)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "traces byte-identical across here-1, dask-1: yes" in proc.stdout, proc.stdout


@pytest.mark.slow
def test_a_batch_stopped_by_sigterm_continues_where_it_stopped(tmp_path):
    folder = tmp_path / "in"
    folder.mkdir()
    catalogue = _catalogue_module()
    for name, text in catalogue.spheres()[:4]:
        (folder / f"{name}.toml").write_text(text)
    command = [sys.executable, "-m", "stepper", "batch", "in", "-o", "out", "--formats", "trace", "--workers", "1"]
    process = subprocess.Popen(command, cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                               stdin=subprocess.DEVNULL)
    index = tmp_path / "out" / "index.json"
    try:
        for _ in range(1200):  # until the first member is in the index (at most two minutes)
            if index.is_file() and json.loads(index.read_text())["entries"]:
                break
            time.sleep(0.1)
        process.terminate()
        _, err = process.communicate(timeout=60)
    finally:
        if process.poll() is None:
            process.kill()
            process.wait()
    assert process.returncode == 143, err
    assert len(err.strip().splitlines()) >= 1 and "run the same command again" in err.strip().splitlines()[-1], err
    finished = {e["name"] for e in json.loads(index.read_text())["entries"]}
    assert finished and len(finished) < 4
    again = _stepper("batch", "in", "-o", "out", "--formats", "trace", "--workers", "1", cwd=tmp_path)
    assert again.returncode == 0, again.stderr
    assert f"{4 - len(finished)} run, {len(finished)} already done" in again.stdout, again.stdout
