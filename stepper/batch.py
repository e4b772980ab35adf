"""``stepper batch``: many metric files (and claims files) derived into one output folder, with an index.

Each input is one *member*.  A member runs as its own process, ``python -m stepper derive`` (or ``audit``)
in a temporary folder, so that the per-member time limit (the command line's SIGALRM watchdog) and a crash
stay inside it; its outputs come back as bytes, and only this coordinating process writes: each member's
folder with :func:`stepper.outputs.replace_output_set`, ``index.json`` and ``index.html`` atomically.

Members run on this machine (a pool of threads, each waiting on one member's process) or on a Dask cluster
(``dask.distributed``: a scheduler the user started, or a local cluster): the same function,
:func:`run_member`, runs on a Dask worker, which needs only stepper installed, since a member carries the
bytes of its input files with it.

A member whose input bytes, options and stepper (version and source) hash to an entry of the previous
index that finished (``ok`` or ``bad input``), with its trace still in place, is skipped: an interrupted
batch, run again, continues where it stopped.
"""

from __future__ import annotations

import hashlib
import html
import json
import os
import subprocess
import sys
import tempfile
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable
from urllib.parse import quote

from .errors import InputError, Stopped
from .outputs import check_output_folder, is_output_name, replace_output_set
from .version import __version__

INDEX_FORMAT = "stepper batch index"
INDEX_VERSION = 1

#: What a member's exit status means in the index (see the command line's exit statuses).
STATUS_OF_EXIT = {0: "ok", 1: "ok", 2: "bad input", 3: "timed out"}
#: Statuses a later run does not redo (the same input gives the same outcome).
FINISHED = ("ok", "bad input")
#: Seconds a member's process may run past its own time limit (start-up, TeX) before it is killed.
GRACE_SECONDS = 60.0
#: Largest input file a member carries (the readers refuse more than 1 MiB anyway).
MAX_INPUT_BYTES = 1 << 20


@dataclass
class Member:
    """One input of the batch: what to run, and the key that says whether it was run already."""

    name: str                  # its folder under OUT
    path: Path                 # the input file
    command: str               # "derive" or "audit"
    files: dict[str, bytes]    # relative path in the member's working folder -> bytes
    entry: str                 # the relative path of the input file among ``files``
    title: str = ""
    problem: str = ""          # why it cannot even be sent (unreadable); reported as bad input
    key: str = ""


@dataclass
class Options:
    """The options every member runs with (they enter the cache key)."""

    formats: tuple[str, ...] = ()
    time_limit: float | None = None
    skip_invariants: bool = False
    detail: str = "full"

    def arguments(self) -> list[str]:
        words = ["--quiet", "--jobs", "1", "--detail", self.detail]
        if self.formats:
            words += ["--formats", ",".join(self.formats)]
        if self.time_limit is not None:
            words += ["--time-limit", repr(self.time_limit)]
        if self.skip_invariants:
            words.append("--skip-invariants")
        return words

    def as_data(self) -> dict:
        return {"formats": list(self.formats) or "all", "time_limit": self.time_limit,
                "skip_invariants": self.skip_invariants, "detail": self.detail}


# ---------------------------------------------------------------------------
# Finding the inputs
# ---------------------------------------------------------------------------

def collect_members(arguments: Iterable[str]) -> list[Member]:
    """Every input the arguments name: a folder (its ``.toml`` files, sub-folders included, hidden ones
    not), a ``.toml`` file, or a list file (one path per line, relative to the list; ``#`` comments)."""
    found: list[tuple[str, Path]] = []
    for argument in arguments:
        path = Path(argument)
        if path.is_dir():
            files = sorted(p for p in path.rglob("*.toml")
                           if p.is_file() and not any(part.startswith(".") for part in p.relative_to(path).parts))
            found += [(_name_under(p, path), p) for p in files]
        elif path.is_file() and path.suffix == ".toml":
            found.append((path.stem, path))
        elif path.is_file():
            found += _read_list(path)
        else:
            raise InputError(f"{argument}: no such folder or file")
    if not found:
        raise InputError("no metric or claims files (*.toml) among the inputs")
    members, taken = [], set()
    for name, path in found:
        unique, number = name, 2
        while unique in taken:
            unique, number = f"{name}-{number}", number + 1
        taken.add(unique)
        members.append(_member(unique, path))
    return members


def _name_under(path: Path, folder: Path) -> str:
    parts = path.relative_to(folder).with_suffix("").parts
    return "--".join(parts)


def _read_list(path: Path) -> list[tuple[str, Path]]:
    try:
        raw = path.read_bytes()
        if len(raw) > MAX_INPUT_BYTES:
            raise InputError(f"{path}: a list of inputs may be at most 1 MiB")
        text = raw.decode("utf-8")
    except OSError as err:
        raise InputError(f"{path}: cannot be read ({err.strerror or err})") from None
    except UnicodeDecodeError:
        raise InputError(f"{path} is not UTF-8 text (a list of inputs has one file name a line)") from None
    found = []
    for number, line in enumerate(text.splitlines(), start=1):
        line = line.split("#", 1)[0].strip()
        if not line:
            continue
        item = Path(line) if Path(line).is_absolute() else path.parent / line
        if not item.is_file() or item.suffix != ".toml":
            raise InputError(f"{path}, line {number}: '{_printable(line)}' is not a .toml file")
        relative = os.path.relpath(item, path.parent)
        name = _name_under(item, path.parent) if not relative.startswith("..") else item.stem
        found.append((name, item))
    return found


def _printable(text: str, limit: int = 80) -> str:
    text = "".join(ch for ch in text if ch >= " " and not 0x7f <= ord(ch) <= 0x9f)
    return text if len(text) <= limit else text[:limit - 3] + "..."


def _member(name: str, path: Path) -> Member:
    """Read the input's bytes (and, for a claims file, its metric file's) and decide derive or audit."""
    import tomllib
    base = path.name
    try:
        raw = _read_input(path)
    except InputError as err:
        return Member(name, path, "derive", {}, base, problem=err.message)
    try:
        data = tomllib.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, tomllib.TOMLDecodeError):
        data = {}  # the member's own run says what is wrong with it
    title = data.get("title") if isinstance(data.get("title"), str) else ""
    metric_name = data.get("metric")
    if "claim" not in data and not isinstance(metric_name, str):
        return Member(name, path, "derive", {base: raw}, base, title=title)
    # A claims file: its metric file goes with it, at the same place relative to it.
    if not isinstance(metric_name, str) or not metric_name:
        return Member(name, path, "audit", {base: raw}, base, title=title)
    relative = os.path.normpath(metric_name)
    if os.path.isabs(relative):
        return Member(name, path, "audit", {base: raw}, base, title=title,
                      problem=f"{path}: a claims file in a batch must name its metric file by a relative path")
    ups = 0
    parts = Path(relative).parts
    while ups < len(parts) and parts[ups] == "..":
        ups += 1
    padding = "/".join(f"up{i}" for i in range(ups))
    entry = f"{padding}/{base}" if padding else base
    metric_at = os.path.normpath(os.path.join(os.path.dirname(entry), relative))
    files = {entry: raw}
    metric_path = path.parent / metric_name
    try:
        files[metric_at] = _read_input(metric_path)
    except InputError:
        pass  # the audit itself reports the missing metric file
    return Member(name, path, "audit", files, entry, title=title)


def _read_input(path: Path) -> bytes:
    try:
        if not path.is_file():
            raise InputError(f"{path} is not a regular file")
        if path.stat().st_size > MAX_INPUT_BYTES:
            raise InputError(f"{path} is larger than 1 MiB")
        return path.read_bytes()
    except OSError as err:
        raise InputError(f"{path}: cannot be read ({err.strerror or err})") from None


def stepper_fingerprint() -> str:
    """stepper's version and sympy's: a new release of either gives new keys, so nothing it would compute
    differently is skipped (``--rerun`` runs every member again regardless)."""
    import sympy
    return f"stepper {__version__}, sympy {sympy.__version__}"


def member_key(member: Member, options: Options, fingerprint: str) -> str:
    data = {"command": member.command, "entry": member.entry, "options": options.as_data(),
            "stepper": fingerprint,
            "files": {name: hashlib.sha256(content).hexdigest() for name, content in sorted(member.files.items())}}
    return hashlib.sha256(json.dumps(data, sort_keys=True).encode()).hexdigest()


# ---------------------------------------------------------------------------
# Running one member (on this machine or on a Dask worker)
# ---------------------------------------------------------------------------

_running: set[subprocess.Popen] = set()
_running_lock = threading.Lock()


def run_member(task: dict) -> dict:
    """Run one member in its own process in a temporary folder and return its exit status, its last
    message, its outputs' bytes and its wall time.  Needs only stepper installed; touches no shared files."""
    start = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="stepper-batch-") as work:
        for name, content in task["files"].items():
            target = Path(work, "input", name)
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_bytes(content)
        command = [sys.executable, "-m", "stepper", task["command"], str(Path("input", task["entry"])),
                   "-o", "result", *task["arguments"]]
        limit = task.get("time_limit")
        try:
            process = subprocess.Popen(command, cwd=work, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE,
                                       stderr=subprocess.PIPE, start_new_session=True)
        except OSError as err:
            return {"exit_status": 4, "message": f"cannot start stepper: {err}", "files": {},
                    "seconds": time.perf_counter() - start}
        with _running_lock:
            _running.add(process)
        try:
            _, stderr = process.communicate(timeout=None if limit is None else limit + GRACE_SECONDS)
            status = process.returncode
            message = _last_line(stderr)
        except subprocess.TimeoutExpired:
            process.kill()
            process.communicate()
            status, message = 3, f"killed {GRACE_SECONDS:g} s after its time limit of {limit:g} s"
        finally:
            with _running_lock:
                _running.discard(process)
        outputs: dict[str, bytes] = {}
        folder = Path(work, "result")
        if status in (0, 1) and folder.is_dir():
            for path in sorted(folder.iterdir()):
                if path.is_file() and is_output_name(path.name):
                    outputs[path.name] = path.read_bytes()
        return {"exit_status": status, "message": message, "files": outputs,
                "seconds": time.perf_counter() - start}


def _last_line(stderr: bytes) -> str:
    lines = [line.strip() for line in stderr.decode("utf-8", "replace").splitlines() if line.strip()]
    for line in reversed(lines):  # the error line, or else the last warning
        if line.startswith("stepper:"):
            return _printable(line.removeprefix("stepper: ").removeprefix("error: "), 400)
    return _printable(lines[-1], 400) if lines else ""


def stop_running_members() -> None:
    """End the member processes this process started (on Ctrl-C or SIGTERM of the coordinator)."""
    with _running_lock:
        processes = list(_running)
    for process in processes:
        try:
            os.killpg(process.pid, 15)
        except (ProcessLookupError, PermissionError):
            pass


# ---------------------------------------------------------------------------
# The index
# ---------------------------------------------------------------------------

def _plain(value: Any) -> Any:
    """A trace value with its tagged expressions as their text."""
    if isinstance(value, dict):
        if set(value) == {"expr"}:
            return value["expr"]
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_plain(v) for v in value]
    return value


def headline(trace_bytes: bytes) -> dict:
    """Title, dimension and the headline results and verdicts of a trace (read as plain JSON)."""
    data = json.loads(trace_bytes)
    results = data.get("results", {})
    metric = data.get("metric", {})
    out: dict[str, Any] = {"title": metric.get("title", ""), "dimension": metric.get("dimension"),
                           "results": {}, "verdicts": {}}
    for key in ("scalar", "kretschmann", "einstein_constant", "energy_density"):
        if key in results:
            out["results"][key] = _plain(results[key])
    for key, verdict in results.get("verdicts", {}).items():
        out["verdicts"][key] = verdict.get("holds")
    for key, row in results.get("energy_conditions", {}).items():
        out["verdicts"][f"{key} energy condition"] = row.get("holds")
    numeric = results.get("numeric_verification")
    if numeric:
        out["numeric_verification"] = numeric.get("passed")
    audit = results.get("audit")
    if audit:
        claims = audit.get("claims", [])
        out["audit"] = {"title": audit.get("title", ""), "claims": len(claims), "agree": sum(1 for c in claims if c.get("outcome") == "agrees"),
                        "earliest_wrong": audit.get("earliest_wrong", [])}
    if "algebraic_type" in results:
        out["algebraic_type"] = _plain(results["algebraic_type"])
    return out


def read_index(out: Path) -> dict:
    """The index a previous run left in ``out`` (empty when there is none)."""
    path = out / "index.json"
    if not path.is_file():
        return {}
    try:
        data = json.loads(path.read_bytes())
    except (OSError, ValueError):
        raise InputError(f"{path} is not a batch index stepper wrote; give another output folder") from None
    if not isinstance(data, dict) or data.get("format") != INDEX_FORMAT:
        raise InputError(f"{path} is not a batch index stepper wrote; give another output folder")
    return data


def index_entries(data: dict) -> dict[str, dict]:
    entries = data.get("entries", [])
    if not isinstance(entries, list):
        raise InputError("the batch index has no list of entries")
    return {e["name"]: e for e in entries if isinstance(e, dict) and isinstance(e.get("name"), str)}


def trace_hash(folder: Path) -> str | None:
    path = folder / "trace.json"
    return hashlib.sha256(path.read_bytes()).hexdigest() if path.is_file() else None


def write_index(out: Path, entries: list[dict], options: Options, fingerprint: str) -> None:
    from .trace import write_atomically
    data = {"format": INDEX_FORMAT, "version": INDEX_VERSION, "stepper": fingerprint,
            "options": options.as_data(), "entries": sorted(entries, key=lambda e: e["name"])}
    write_atomically(out / "index.json", json.dumps(data, indent=1, ensure_ascii=True) + "\n")
    write_atomically(out / "index.html", index_html(data))


_HOLDS = {True: "yes", False: "no", None: "undecided"}


def index_html(data: dict) -> str:
    """The index as a page: one row per member, every value escaped, links to each member's outputs."""
    e = html.escape
    entries = data["entries"]
    counts: dict[str, int] = {}
    for entry in entries:
        counts[entry["status"]] = counts.get(entry["status"], 0) + 1
    rows = []
    for entry in entries:
        folder = quote(entry["name"])
        links = " ".join(f'<a href="{folder}/{quote(name)}">{e(name)}</a>' for name in entry.get("outputs", ())
                         if name in ("report.pdf", "trace.json", "derivation.ipynb"))
        results = "<br>".join(f"{e(k)} = <code>{e(str(v))}</code>" for k, v in entry.get("results", {}).items())
        verdicts = "<br>".join(f"{e(k.replace('_', ' '))}: {_HOLDS.get(v, e(str(v)))}"
                               for k, v in entry.get("verdicts", {}).items())
        checks = []
        if "numeric_verification" in entry:
            checks.append(f"numeric check: {_HOLDS.get(entry['numeric_verification'], '?')}")
        if "audit" in entry:
            checks.append(f"claims agreeing: {entry['audit']['agree']} of {entry['audit']['claims']}")
        if entry.get("message"):
            checks.append(e(entry["message"]))
        kind = entry.get("algebraic_type")
        audit_title = f"<br><small>audit: {e(entry['audit'].get('title', ''))}</small>" if "audit" in entry else ""
        rows.append(
            "<tr>"
            f"<td>{e(entry['name'])}<br><small>{e(entry.get('file', ''))}</small></td>"
            f"<td>{e(entry.get('title') or '')}{audit_title}</td><td>{e(str(entry.get('dimension') or ''))}</td>"
            f"<td class=\"{e(entry['status'].replace(' ', '-'))}\">{e(entry['status'])}</td>"
            f"<td>{results}</td><td>{verdicts}</td><td>{'<br>'.join(checks)}</td>"
            f"<td>{e(json.dumps(kind) if kind is not None and not isinstance(kind, str) else kind or '')}</td>"
            f"<td>{entry.get('seconds', 0):.2f}</td><td><code>{e((entry.get('trace_sha256') or '')[:12])}</code></td>"
            f"<td>{links}</td></tr>")
    summary = ", ".join(f"{n} {e(s)}" for s, n in sorted(counts.items()))
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>stepper batch index</title>\n"
        "<style>body{font-family:sans-serif;margin:1em}table{border-collapse:collapse}"
        "td,th{border:1px solid #bbb;padding:4px;vertical-align:top;font-size:90%}"
        "code{word-break:break-all}.bad-input,.timed-out,.internal-error{background:#fdd}</style></head>\n"
        f"<body><h1>stepper batch index</h1>\n<p>{len(entries)} members: {summary}. "
        f"Made with {e(str(data.get('stepper', '')))}; options {e(json.dumps(data.get('options', {})))}.</p>\n"
        "<table><tr><th>member</th><th>title</th><th>n</th><th>status</th><th>results</th><th>verdicts</th>"
        "<th>checks</th><th>algebraic type</th><th>seconds</th><th>trace hash</th><th>outputs</th></tr>\n"
        + "\n".join(rows) + "\n</table></body></html>\n")


# ---------------------------------------------------------------------------
# The coordinator
# ---------------------------------------------------------------------------

class BatchProgress:
    """Counts, the members running now and the slowest finished ones: a live line on a terminal,
    otherwise a line every five seconds."""

    def __init__(self, total: int, quiet: bool, stream=None) -> None:
        self.total, self.quiet = total, quiet
        self.stream = stream or sys.stderr
        self.live = self.stream.isatty()
        self.start = time.perf_counter()
        self.counts: dict[str, int] = {}
        self.running: dict[str, float] = {}
        self.finished: list[tuple[float, str]] = []
        self.printed_at = 0.0

    def started(self, name: str) -> None:
        self.running[name] = time.perf_counter()
        self.show()

    def done(self, name: str, status: str, seconds: float | None) -> None:
        self.running.pop(name, None)
        self.counts[status] = self.counts.get(status, 0) + 1
        if seconds is not None:
            self.finished.append((seconds, name))
        self.show()

    def slowest(self, count: int = 3) -> list[tuple[float, str]]:
        return sorted(self.finished, reverse=True)[:count]

    def line(self) -> str:
        now = time.perf_counter()
        done = sum(self.counts.values())
        counts = ", ".join(f"{n} {s}" for s, n in sorted(self.counts.items()))
        text = f"[{now - self.start:6.1f}s] {done}/{self.total} done" + (f" ({counts})" if counts else "")
        if self.running:
            longest = max(self.running.items(), key=lambda item: now - item[1])
            text += (f"; {len(self.running)} running or queued, longest {_printable(longest[0], 40)} "
                     f"{now - longest[1]:.0f} s")
        slowest = self.slowest()
        if slowest:
            text += "; slowest " + ", ".join(f"{_printable(n, 30)} {s:.1f} s" for s, n in slowest)
        return text

    def show(self, final: bool = False) -> None:
        if self.quiet:
            return
        elapsed = time.perf_counter() - self.start
        if self.live:
            self.stream.write("\r\033[K" + ("" if final else self.line()[:200]))
            self.stream.flush()
        elif not final and elapsed - self.printed_at >= 5:
            self.printed_at = elapsed
            self.stream.write(self.line() + "\n")
            self.stream.flush()


@dataclass
class BatchResult:
    entries: list[dict]
    ran: int = 0
    skipped: int = 0
    interrupted: BaseException | None = None
    slowest: list[tuple[float, str]] = field(default_factory=list)


def _entry(member: Member, outcome: dict, out: Path) -> dict:
    status = STATUS_OF_EXIT.get(outcome["exit_status"], "internal error")
    entry: dict[str, Any] = {"name": member.name, "file": _shown_path(member.path), "command": member.command,
                             "title": member.title, "dimension": None, "status": status,
                             "exit_status": outcome["exit_status"], "seconds": round(outcome["seconds"], 3),
                             "key": member.key}
    if outcome.get("message"):  # naming the input as given, not the member's working copy
        entry["message"] = outcome["message"].replace(str(Path("input", member.entry)), entry["file"])
    files = outcome.get("files", {})
    if status == "ok" and "trace.json" in files:
        entry.update(headline(files["trace.json"]))
        entry["trace_sha256"] = hashlib.sha256(files["trace.json"]).hexdigest()
        entry["outputs"] = sorted(files)
    elif status == "ok":
        entry["status"], entry["message"] = "internal error", "the run wrote no trace.json"
    return entry


def _shown_path(path: Path) -> str:
    try:
        return os.path.relpath(path)
    except ValueError:
        return str(path)


def run_batch(members: list[Member], out: Path, options: Options, workers: int = 1,
              scheduler: str | None = None, local_cluster: int | None = None, quiet: bool = False,
              progress_stream=None, rerun: bool = False) -> BatchResult:
    """Run every member not already finished with the same key, write each finished member's folder and
    the index after each member (so an interruption loses no finished work), and return the entries."""
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise InputError(f"output folder {out} exists and is not a folder")
    previous = index_entries(read_index(out))
    if out.is_dir() and not previous and any(not n.startswith(".") for n in os.listdir(out)):
        raise InputError(f"output folder {out} holds files but no batch index; give a new or empty folder with -o")
    for member in members:
        check_output_folder(out / member.name)
    fingerprint = stepper_fingerprint()
    entries: dict[str, dict] = {}
    pending: list[Member] = []
    skipped = 0
    for member in members:
        member.key = member_key(member, options, fingerprint)
        old = previous.get(member.name)
        if (old and not rerun and old.get("key") == member.key and old.get("status") in FINISHED
                and (old["status"] != "ok" or trace_hash(out / member.name) == old.get("trace_sha256"))):
            entries[member.name] = old
            skipped += 1
        elif member.problem:
            entries[member.name] = _entry(member, {"exit_status": 2, "message": member.problem, "seconds": 0.0}, out)
        else:
            pending.append(member)
    # The longest members first, so that a large one does not start last and hold up the end: as the previous
    # run timed them, and members never timed before those, larger input files first.
    def expected(member: Member) -> tuple[float, int]:
        seconds = previous.get(member.name, {}).get("seconds")
        timed = float(seconds) if isinstance(seconds, (int, float)) else float("inf")
        return -timed, -sum(len(content) for content in member.files.values())
    pending.sort(key=expected)
    result = BatchResult(entries=[], skipped=skipped, ran=len(members) - len(pending) - skipped)
    out.mkdir(parents=True, exist_ok=True)
    write_index(out, list(entries.values()), options, fingerprint)
    progress = BatchProgress(len(pending), quiet, progress_stream)
    last_write = [time.perf_counter()]

    def record(member: Member, outcome: dict) -> None:
        entry = _entry(member, outcome, out)
        if entry["status"] == "ok":
            replace_output_set(out / member.name, {k: v for k, v in outcome["files"].items()})
        entries[member.name] = entry
        result.ran += 1
        progress.done(member.name, entry["status"], outcome.get("seconds"))
        if time.perf_counter() - last_write[0] >= 1.0:
            write_index(out, list(entries.values()), options, fingerprint)
            last_write[0] = time.perf_counter()

    try:
        if scheduler is not None or local_cluster is not None:
            _run_on_dask(pending, options, record, progress, scheduler, local_cluster)
        else:
            _run_here(pending, options, record, progress, workers)
    except (KeyboardInterrupt, Stopped) as stop:
        result.interrupted = stop
    finally:
        progress.show(final=True)
        write_index(out, list(entries.values()), options, fingerprint)
    result.entries = sorted(entries.values(), key=lambda e: e["name"])
    result.slowest = progress.slowest()
    return result


def _task(member: Member, options: Options) -> dict:
    return {"command": member.command, "entry": member.entry, "files": member.files,
            "arguments": options.arguments(), "time_limit": options.time_limit}


def _run_here(pending: list[Member], options: Options, record: Callable, progress: BatchProgress,
              workers: int) -> None:
    """At most ``workers`` member processes at a time on this machine."""
    from concurrent.futures import FIRST_COMPLETED, ThreadPoolExecutor, wait
    queue = list(pending)
    executor = ThreadPoolExecutor(max_workers=workers)
    running: dict = {}
    try:
        while queue or running:
            while queue and len(running) < workers:
                member = queue.pop(0)
                progress.started(member.name)
                running[executor.submit(run_member, _task(member, options))] = member
            done, _ = wait(list(running), timeout=1.0, return_when=FIRST_COMPLETED)
            progress.show()
            for future in done:
                member = running.pop(future)
                try:
                    outcome = future.result()
                except Exception as err:  # run_member catches what a member does; this is a bug here
                    outcome = {"exit_status": 4, "message": f"{type(err).__name__}: {err}", "seconds": 0.0}
                record(member, outcome)
    except BaseException:
        stop_running_members()
        executor.shutdown(wait=True, cancel_futures=True)
        raise
    executor.shutdown(wait=True)


def _run_on_dask(pending: list[Member], options: Options, record: Callable, progress: BatchProgress,
                 scheduler: str | None, local_cluster: int | None) -> None:
    """Every member as a Dask task on the cluster at ``scheduler``, or on a local cluster of
    ``local_cluster`` single-threaded worker processes; results come back to this process, which writes."""
    try:
        from distributed import Client, LocalCluster, as_completed
    except ImportError:
        raise InputError("running on a cluster needs Dask: pip install 'dask[distributed]'") from None
    cluster = None
    try:
        if scheduler is not None:
            try:
                client = Client(scheduler, timeout="10s")
            except (OSError, TimeoutError, ValueError) as err:
                raise InputError(f"cannot reach the Dask scheduler at {scheduler}: "
                                 f"{' '.join(str(err).split())[:200]}") from None
        else:
            cluster = LocalCluster(n_workers=local_cluster, threads_per_worker=1, processes=True,
                                   dashboard_address=None)
            client = Client(cluster)
    except InputError:
        raise
    except Exception as err:
        raise InputError(f"cannot start a Dask cluster: {type(err).__name__}: {err}") from None
    futures: dict = {}
    try:
        for member in pending:
            future = client.submit(run_member, _task(member, options), pure=False,
                                   key=f"stepper-{member.name}-{member.key[:16]}")
            futures[future] = member
            progress.started(member.name)
        for future in as_completed(list(futures)):
            member = futures[future]
            try:
                outcome = future.result()
            except Exception as err:  # a worker died twice over, or the task could not be run
                outcome = {"exit_status": 4, "message": f"on the cluster: {type(err).__name__}: {err}",
                           "seconds": 0.0}
            record(member, outcome)
            progress.show()
    except BaseException:
        client.cancel(list(futures))
        raise
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


def batch_summary(result: BatchResult, out: Path) -> str:
    counts: dict[str, int] = {}
    for entry in result.entries:
        counts[entry["status"]] = counts.get(entry["status"], 0) + 1
    lines = [f"batch: {len(result.entries)} members ({', '.join(f'{n} {s}' for s, n in sorted(counts.items()))}); "
             f"{result.ran} run, {result.skipped} already done"]
    for entry in result.entries:
        if entry["status"] != "ok":
            lines.append(f"  {entry['name']} ({entry.get('file', '')}): {entry['status']}: {entry.get('message', '')}")
        elif entry.get("exit_status") == 1:
            lines.append(f"  {entry['name']}: exit status 1: {entry.get('message') or 'a claim did not agree'}")
    if result.slowest:
        lines.append("  slowest: " + ", ".join(f"{name} {seconds:.1f} s" for seconds, name in result.slowest))
    lines.append(f"  index: {out / 'index.json'} and {out / 'index.html'}")
    return "\n".join(lines)


def batch_exit_status(result: BatchResult) -> int:
    """0 when every member's own run ended with status 0, otherwise 1 (the index says which did not)."""
    return 0 if all(e.get("exit_status") == 0 for e in result.entries) else 1


# ---------------------------------------------------------------------------
# The command line
# ---------------------------------------------------------------------------

def add_parser(commands, parser_class) -> None:
    """``stepper batch``'s options (called by :func:`stepper.cli.build_parser`)."""
    from .exporters import DETAIL_LEVELS
    batch = commands.add_parser(
        "batch", help="derive many metric files (and audit claims files) into one folder with an index",
        description="Derive every metric file and audit every claims file named (folders are searched for "
                    "*.toml, a list file names one file a line) into its own folder under OUT, and write "
                    "OUT/index.json and OUT/index.html. Members already finished with the same input, options "
                    "and stepper are skipped, so an interrupted batch continues where it stopped. Exit status 0 "
                    "when every member's run ended with 0, 1 otherwise, 2 for bad input to the batch itself.")
    batch.add_argument("file", nargs="+", metavar="DIR_OR_LIST", help="folders, .toml files or list files")
    batch.add_argument("-o", "--output", metavar="OUT", required=True, help="folder for the members and the index")
    batch.add_argument("--formats", metavar="LIST",
                       help="outputs of each member, as for derive (trace.json is always written); default: all")
    batch.add_argument("--time-limit", dest="member_time_limit", type=float, metavar="SECONDS",
                       help="stop a member that takes longer than this (each member on its own)")
    batch.add_argument("--skip-invariants", action="store_true", help="skip the Kretschmann scalar and the Weyl tensor")
    batch.add_argument("--detail", choices=DETAIL_LEVELS, default="full", help="detail of the reports (as for derive)")
    batch.add_argument("--workers", type=int, metavar="N",
                       help="members run at once on this machine (default: its cores)")
    where = batch.add_mutually_exclusive_group()
    where.add_argument("--scheduler", metavar="ADDRESS",
                       help="run the members on the Dask cluster whose scheduler is at ADDRESS (tcp://host:8786)")
    where.add_argument("--local-cluster", type=int, metavar="N",
                       help="run the members on a Dask cluster of N worker processes started on this machine")
    batch.add_argument("--rerun", action="store_true",
                       help="run every member again, even those finished with the same input and options")
    batch.add_argument("--quiet", action="store_true", help="print nothing but errors")


def command(args) -> int:
    """``stepper batch``: check the options, run, print the summary; the exit status."""
    import math
    from .exporters import EXPORTERS
    inputs = list(args.file)
    args.file = " ".join(inputs)  # for the command line's last-resort message
    formats: tuple[str, ...] = ()
    if args.formats:
        chosen = [part.strip() for part in args.formats.split(",") if part.strip()]
        unknown = [c for c in chosen if c not in EXPORTERS]
        if unknown or not chosen:
            raise InputError(f"unknown output format '{unknown[0] if unknown else args.formats}' "
                             f"(choose from {', '.join(EXPORTERS)})")
        formats = tuple(name for name in EXPORTERS if name in chosen or name == "trace")
    limit = args.member_time_limit
    if limit is not None and not (math.isfinite(limit) and limit > 0):
        raise InputError("--time-limit must be a positive number of seconds")
    for name in ("workers", "local_cluster"):
        value = getattr(args, name)
        if value is not None and not 1 <= value <= 4096:
            raise InputError(f"--{name.replace('_', '-')} must be between 1 and 4096")
    members = collect_members(inputs)
    out = Path(args.output)
    options = Options(formats=formats, time_limit=limit, skip_invariants=args.skip_invariants, detail=args.detail)
    workers = args.workers or max(1, os.cpu_count() or 1)
    result = run_batch(members, out, options, workers=workers, scheduler=args.scheduler,
                       local_cluster=args.local_cluster, quiet=args.quiet, rerun=args.rerun)
    from .cli import terminal_text
    if result.interrupted is not None:
        stop = result.interrupted
        name = stop.signal_name if isinstance(stop, Stopped) else "Ctrl-C"
        finished = sum(1 for e in result.entries if e["status"] in FINISHED)
        sys.stderr.write(terminal_text(
            f"stepper: stopped by {name}; {finished} of {len(members)} members are finished in {out} "
            "(index.json); run the same command again to continue") + "\n")
        return stop.exit_status if isinstance(stop, Stopped) else 130
    if not args.quiet:
        print(terminal_text(batch_summary(result, out)))
    return batch_exit_status(result)
