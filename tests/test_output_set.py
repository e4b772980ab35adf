"""A run's outputs replace the previous set whole, or not at all.

Each test first writes a complete set (set A, from one example) into a
folder, then starts a second run into the same folder (set B, another
example) and stops it at a chosen moment: while the new files are being
written, at the moment of the swap itself, or just after it.  Afterwards the
folder must hold exactly set A or exactly set B (compared file by file,
byte for byte) and no staging folder may be left, except after SIGKILL,
which no program can catch: then the next run into the folder removes it.

The moments are reached by a small harness that wraps one function of
:mod:`stepper.outputs` to send the signal from inside the run, so the
interrupt lands exactly where it is meant to (common practice for testing
crash consistency: inject the fault at each step of the protocol).
"""

from __future__ import annotations

import errno
import hashlib
import os
import signal
import subprocess
import sys
import textwrap
import threading
import time
from pathlib import Path

import pytest

from conftest import ROTATING_DE_SITTER

from stepper import cli, outputs

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"
FIRST = EXAMPLES / "round_sphere.toml"
SECOND = EXAMPLES / "hyperbolic_plane.toml"

HARNESS = textwrap.dedent('''
    import os, signal, sys
    import stepper.outputs as outputs
    from stepper import cli

    moment, name = sys.argv[1], sys.argv[2]
    number = getattr(signal, name)
    real_exchange, real_write = outputs.exchange, outputs._write_file

    def fire():
        os.kill(os.getpid(), number)

    if moment == "writing":  # while the third file of the new set is written into the staging folder
        count = [0]
        def write(path, data):
            count[0] += 1
            if count[0] == 3:
                fire()
            real_write(path, data)
        outputs._write_file = write
    elif moment == "swap":  # the instant before the two folders trade places
        def exchange(first, second):
            fire()
            real_exchange(first, second)
        outputs.exchange = exchange
    elif moment == "after swap":  # the new set is in place, the previous one not yet removed
        def exchange(first, second):
            real_exchange(first, second)
            fire()
        outputs.exchange = exchange
    sys.exit(cli.main(sys.argv[3:]))
''')


def snapshot(folder: Path) -> dict[str, str]:
    """File name -> SHA-256 of every file in ``folder``."""
    return {path.name: hashlib.sha256(path.read_bytes()).hexdigest() for path in sorted(folder.iterdir())}


def staging_folders(parent: Path) -> list[str]:
    return sorted(name for name in os.listdir(parent) if name.startswith(outputs.STAGING_PREFIX))


def run_harness(moment: str, signal_name: str, metric: Path, folder: Path) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", HARNESS, moment, signal_name, "derive", str(metric),
                           "-o", str(folder), "--jobs", "1"], capture_output=True, text=True, timeout=300,
                          stdin=subprocess.DEVNULL, cwd=folder.parent)


@pytest.fixture(scope="module")
def reference_sets(tmp_path_factory) -> tuple[dict[str, str], dict[str, str]]:
    """Set A and set B as uninterrupted runs write them (the PDF is reproducible: SOURCE_DATE_EPOCH)."""
    base = tmp_path_factory.mktemp("reference")
    sets = []
    for metric, name in ((FIRST, "a"), (SECOND, "b")):
        assert cli.main(["derive", str(metric), "-o", str(base / name), "--quiet", "--jobs", "1"]) == 0
        sets.append(snapshot(base / name))
    assert set(sets[0]) == set(sets[1]) == {"trace.json", "report.tex", "appendix.tex", "report.pdf",
                                            "derivation.ipynb"}
    return sets[0], sets[1]


def previous_set(tmp_path: Path) -> Path:
    folder = tmp_path / "result"
    assert cli.main(["derive", str(FIRST), "-o", str(folder), "--quiet", "--jobs", "1"]) == 0
    return folder


# Each signal at each moment: which set must be there afterwards, and the exit status.
CASES = [
    ("writing", "SIGINT", "previous", 130),
    ("writing", "SIGTERM", "previous", 143),
    ("writing", "SIGHUP", "previous", 129),
    ("swap", "SIGINT", "new", 130),  # held back during the swap, delivered once it is done
    ("swap", "SIGTERM", "new", 143),
    ("swap", "SIGHUP", "new", 129),
    ("after swap", "SIGTERM", "new", 143),
]


@pytest.mark.slow
@pytest.mark.parametrize(("moment", "signal_name", "expected", "status"), CASES)
def test_a_signal_leaves_one_whole_set_and_no_staging_folder(tmp_path, reference_sets, moment, signal_name,
                                                             expected, status):
    folder = previous_set(tmp_path)
    proc = run_harness(moment, signal_name, SECOND, folder)
    assert proc.returncode == status, proc.stderr
    assert "Traceback" not in proc.stderr
    message = proc.stderr.strip().splitlines()[-1]
    assert message.startswith("stepper: stopped by")
    first, second = reference_sets
    if expected == "previous":
        assert snapshot(folder) == first
        assert "the previous outputs in" in message and "are kept" in message
    else:
        assert snapshot(folder) == second
        assert "the new outputs were already complete" in message
    assert staging_folders(tmp_path) == []


@pytest.mark.slow
@pytest.mark.parametrize(("moment", "expected"), [("writing", "previous"), ("swap", "previous"),
                                                  ("after swap", "new")])
def test_sigkill_leaves_one_whole_set_and_the_next_run_clears_its_staging_folder(tmp_path, reference_sets,
                                                                               moment, expected):
    folder = previous_set(tmp_path)
    proc = run_harness(moment, "SIGKILL", SECOND, folder)
    assert proc.returncode == -signal.SIGKILL
    first, second = reference_sets
    assert snapshot(folder) == (first if expected == "previous" else second)
    assert len(staging_folders(tmp_path)) == 1  # what SIGKILL cannot let a program clean up
    assert cli.main(["derive", str(FIRST), "-o", str(folder), "--quiet", "--jobs", "1"]) == 0
    assert snapshot(folder) == first
    assert staging_folders(tmp_path) == []


def test_a_full_disk_keeps_the_previous_set(tmp_path, reference_sets, monkeypatch, capsys):
    folder = previous_set(tmp_path)
    real_write = outputs._write_file
    written = []

    def write_until_full(path, data):
        if len(written) == 2:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(path))
        written.append(path.name)
        real_write(path, data)
    monkeypatch.setattr(outputs, "_write_file", write_until_full)
    capsys.readouterr()
    assert cli.main(["derive", str(SECOND), "-o", str(folder), "--jobs", "1", "--quiet"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "No space left on device" in err[0] and f"the previous outputs in {folder} are kept" in err[0]
    assert snapshot(folder) == reference_sets[0]
    assert staging_folders(tmp_path) == []


def test_a_failed_exchange_keeps_the_previous_set(tmp_path, reference_sets, monkeypatch, capsys):
    folder = previous_set(tmp_path)

    def refuse(first, second):
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES), str(second))
    monkeypatch.setattr(outputs, "exchange", refuse)
    assert cli.main(["derive", str(SECOND), "-o", str(folder), "--quiet"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "Permission denied" in err[0], err
    assert snapshot(folder) == reference_sets[0]
    assert staging_folders(tmp_path) == []


def test_a_tex_failure_keeps_the_previous_set_and_names_the_log(tmp_path, reference_sets, capsys):
    folder = previous_set(tmp_path)
    templates = tmp_path / "broken"
    (templates / "latex").mkdir(parents=True)
    (templates / "latex" / "report.tex.j2").write_text(
        "\\documentclass{article}\\begin{document}\\undefinedcommandfromtemplate\\end{document}\n")
    capsys.readouterr()
    status = cli.main(["derive", str(SECOND), "-o", str(folder), "--templates", str(templates), "--quiet"])
    err = capsys.readouterr().err.strip().splitlines()
    assert status == 2  # the user's templates: bad input
    assert len(err) == 1 and "no report.pdf" in err[0] and "Undefined control sequence" in err[0], err
    log = Path(err[0].split("TeX's log: ")[1].split(")")[0])
    assert "undefinedcommandfromtemplate" in log.read_text(encoding="utf-8")
    log.unlink()
    assert snapshot(folder) == reference_sets[0]  # the previous PDF is still there, with its set
    assert staging_folders(tmp_path) == []


def test_render_of_part_of_a_set_into_its_own_folder_keeps_the_rest(tmp_path, reference_sets):
    folder = previous_set(tmp_path)
    (folder / "report.pdf").unlink()
    assert cli.main(["render", str(folder / "trace.json"), "--formats", "pdf", "--quiet"]) == 0
    assert snapshot(folder) == reference_sets[0]


def test_a_new_run_replaces_every_file_of_the_previous_set(tmp_path, reference_sets):
    folder = previous_set(tmp_path)
    assert cli.main(["derive", str(SECOND), "-o", str(folder), "--formats", "trace", "--quiet"]) == 0
    assert snapshot(folder) == {"trace.json": reference_sets[1]["trace.json"]}  # no report of the other metric


def test_the_folder_keeps_its_permissions(tmp_path):
    folder = previous_set(tmp_path)
    folder.chmod(0o750)
    assert cli.main(["derive", str(SECOND), "-o", str(folder), "--formats", "trace", "--quiet"]) == 0
    assert folder.stat().st_mode & 0o777 == 0o750


@pytest.mark.parametrize("content", ["my notes.txt", "data"])
def test_a_folder_holding_other_files_is_refused(tmp_path, capsys, content):
    folder = tmp_path / "mine"
    folder.mkdir()
    (folder / content).write_text("the user's own file")
    assert cli.main(["derive", str(FIRST), "-o", str(folder)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "holds files stepper did not write" in err[0] and content in err[0]
    assert os.listdir(folder) == [content]


def test_the_current_folder_is_refused(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    for folder in (".", str(tmp_path), ".."):
        assert cli.main(["derive", str(FIRST), "-o", folder]) == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and "output folder" in err[0], err
    assert os.listdir(tmp_path) == []


@pytest.mark.parametrize("name", ["...toml", "..toml", ".toml"])
def test_a_file_name_that_makes_no_folder_name_is_refused(tmp_path, capsys, monkeypatch, name):
    monkeypatch.chdir(tmp_path)
    (tmp_path / name).write_bytes(FIRST.read_bytes())
    assert cli.main(["derive", name]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and ("give one with -o" in err[0] or "output folder" in err[0]), err
    assert sorted(os.listdir(tmp_path)) == [name]


def test_jupyter_checkpoints_do_not_block_a_new_run(tmp_path, reference_sets):
    folder = previous_set(tmp_path)
    (folder / ".ipynb_checkpoints").mkdir()
    (folder / ".ipynb_checkpoints" / "derivation-checkpoint.ipynb").write_text("{}")
    assert cli.main(["derive", str(SECOND), "-o", str(folder), "--quiet", "--jobs", "1"]) == 0
    assert snapshot(folder) == reference_sets[1]




def children(pid: int) -> list[int]:
    found = []
    for entry in os.listdir("/proc"):
        if entry.isdigit():
            try:
                fields = Path(f"/proc/{entry}/stat").read_text().rsplit(")", 1)[1].split()
            except OSError:
                continue
            if int(fields[1]) == pid:
                found.append(int(entry))
    return found


@pytest.mark.slow
def test_workers_die_quietly_with_their_parent(tmp_path):
    """SIGTERM to the parent while its forked workers compute: one line, no traceback
    from any process, and no worker left running."""
    (tmp_path / "hole.toml").write_text(ROTATING_DE_SITTER)
    proc = subprocess.Popen([sys.executable, "-m", "stepper", "derive", "hole.toml", "-o", str(tmp_path / "out"),
                             "--jobs", "2", "--formats", "trace"], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, start_new_session=True, cwd=tmp_path)
    lines: list[str] = []
    reader = threading.Thread(target=lambda: lines.extend(iter(proc.stderr.readline, "")), daemon=True)
    reader.start()
    workers: list[int] = []
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and proc.poll() is None:  # wait for the forked workers themselves
        workers = children(proc.pid)
        if len(workers) == 2:
            break
        time.sleep(0.02)
    assert len(workers) == 2, (lines, workers)
    os.kill(proc.pid, signal.SIGTERM)
    proc.wait(timeout=60)
    reader.join(timeout=10)
    stderr = "".join(lines)
    assert proc.returncode == 143, stderr
    assert "Traceback" not in stderr and "Error" not in stderr, stderr
    assert stderr.strip().splitlines()[-1] == "stepper: stopped by SIGTERM; nothing was written"
    deadline = time.monotonic() + 10
    while any(Path(f"/proc/{pid}").exists() for pid in workers) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert not any(Path(f"/proc/{pid}").exists() for pid in workers)
    assert not (tmp_path / "out").exists()
