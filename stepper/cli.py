"""Command line: ``stepper derive FILE``, ``stepper audit CLAIMS``, ``stepper render TRACE``.

Bad input prints one line, ``stepper: error: ...``, and exits with status 2.
A run's outputs replace the previous set in its folder all at once
(:mod:`stepper.outputs`); whatever stops a run before that (bad input, the
time limit, a signal, a full disk, a TeX failure) leaves the previous set as
it was.
"""

from __future__ import annotations

import argparse
import math
import os
import signal
import sys
import time
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator, Sequence

from .version import __version__
from .chain import default_jobs, derive
from .quantities import VERDICTS
from .record import CONDITION_WORDS, HOLDS_WORDS, Derivation
from .errors import InputError, Stopped, TimeLimitReached
from .metricfile import load_metric
from .outputs import SwapState, check_output_folder, replace_output_set, what_is_kept


#: Exit status of a bug in stepper (distinct from 1, a disagreement, and 2, bad input).
INTERNAL_ERROR = 4


class _ArgumentParser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # one line, status 2
        self.exit(2, f"stepper: error: {message} (see 'stepper --help')\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _ArgumentParser(
        prog="stepper",
        description="Curvature of a metric with every intermediate step recorded, so that "
                    "someone else can check the derivation line by line.")
    parser.add_argument("--version", action="version", version=f"stepper {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND")
    run = commands.add_parser("derive", help="run the curvature chain on a metric file and write the reports",
                              description="Run the whole curvature chain on a TOML metric file and write "
                                          "trace.json, report.tex, appendix.tex, report.pdf and derivation.ipynb "
                                          "into DIR (default: out/<file name without .toml>).")
    run.add_argument("file", metavar="FILE", help="metric file (TOML)")
    _add_output_options(run)
    check = commands.add_parser(
        "audit", help="check claimed results (a hand calculation) against the derivation",
        description="Read a claims file (TOML naming a metric file and listing claimed components in plain "
                    "syntax or LaTeX), derive the metric, and say for each claim whether it agrees, differs "
                    "(with the correct value and the likely slip) or cannot be decided; name the earliest "
                    "wrong claim. Exit status 0 only when every claim agrees.")
    check.add_argument("file", metavar="CLAIMS", help="claims file (TOML)")
    _add_output_options(check)
    render = commands.add_parser(
        "render", help="write the reports and the notebook of a saved trace.json, computing nothing",
        description="Read a trace.json written by 'stepper derive' or 'stepper audit' and write its outputs "
                    "again (the same bytes as the run that wrote it, unless templates are given) into DIR "
                    "(default: the trace's own folder).")
    render.add_argument("file", metavar="TRACE", help="trace.json written by stepper")
    render.add_argument("-o", "--output", metavar="DIR", help="folder for the outputs (default: the trace's folder)")
    render.add_argument("--quiet", action="store_true", help="print nothing but errors")
    render.add_argument("--formats", metavar="LIST", help="comma-separated outputs to write (as for derive)")
    render.add_argument("--templates", metavar="DIR",
                        help="folder of templates that override the project's templates/ (same file names)")
    _add_appendix_options(render)
    from . import batch, compare
    batch.add_parser(commands, _ArgumentParser)
    compare.add_parser(commands)
    return parser


def _add_appendix_options(run: argparse.ArgumentParser) -> None:
    from .exporters import DETAIL_LEVELS, HEADING_LEVELS
    run.add_argument("--detail", choices=DETAIL_LEVELS, default="full",
                     help="how much of the derivation report.tex, report.pdf and appendix.tex show: summary (the "
                          "metric, results, verdicts and checks, no steps), condensed (every step with its results, "
                          "no formulas or simplifications) or full (every line; the default)")
    run.add_argument("--appendix-heading", choices=HEADING_LEVELS, default="section",
                     help="top heading level of appendix.tex (default: section)")
    run.add_argument("--anchor-prefix", metavar="TEXT",
                     help="start of every link target in appendix.tex (letters, digits, - . :); default: made "
                          "from the metric's title and a hash of its line element, so that appendices of "
                          "different metrics can share one paper")


def _add_output_options(run: argparse.ArgumentParser) -> None:
    run.add_argument("-o", "--output", metavar="DIR", help="folder for the outputs (default: out/<file stem>)")
    run.add_argument("--quiet", action="store_true", help="print nothing but errors")
    run.add_argument("--skip-invariants", action="store_true",
                     help="skip the Kretschmann scalar and the Weyl tensor")
    run.add_argument("--formats", metavar="LIST",
                     help="comma-separated outputs to write, from: trace (trace.json), tex (report.tex), "
                          "appendix (appendix.tex, to \\input into a paper), pdf (report.pdf), "
                          "notebook (derivation.ipynb); default: all")
    run.add_argument("--jobs", type=int, metavar="N",
                     help="processes for the largest stages (default: the cores of this machine; "
                          "the results are the same for every N)")
    run.add_argument("--time-limit", type=float, metavar="SECONDS",
                     help="stop cleanly, keeping the previous outputs, when the run (reading, deriving and "
                          "writing the reports) takes longer than this")
    run.add_argument("--templates", metavar="DIR",
                     help="folder of templates that override the project's templates/ (same file names)")
    _add_appendix_options(run)


class _Progress:
    """Shows which stage is running and how far it is: a live line on a
    terminal; otherwise, once a run has lasted two seconds, a line a second."""

    def __init__(self, quiet: bool) -> None:
        self.quiet = quiet
        self.start = time.perf_counter()
        self.live = sys.stderr.isatty()
        self.last = "reading the input"
        self.printed_at = 0.0

    def __call__(self, label: str, done: int, total: int) -> None:
        if label == self.last:
            return
        self.last = label
        if self.quiet:
            return
        elapsed = time.perf_counter() - self.start
        if self.live:
            sys.stderr.write(f"\r\033[K[{elapsed:6.1f}s] {label}")
            if label == "done":
                sys.stderr.write("\r\033[K")
            sys.stderr.flush()
        elif elapsed > 2 and label != "done" and elapsed - self.printed_at >= 1:
            self.printed_at = elapsed
            sys.stderr.write(f"[{elapsed:6.1f}s] {label}\n")


def summary(derivation: Derivation, out_dir: Path, written: Sequence[str]) -> str:
    """A short human summary: scalar curvature, verdicts with evidence, time."""
    m = derivation.metric
    lines = [f"{m.title} ({m.dimension} dimensions: {', '.join(m.names)})",
             f"  scalar curvature R = {derivation.results['scalar']}"]
    if "kretschmann" in derivation.results:
        lines.append(f"  Kretschmann scalar = {derivation.results['kretschmann']}")
    numeric = derivation.results.get("numeric_verification")
    if numeric:
        word = {True: "passed", False: "FAILED", None: "not done"}[numeric["passed"]]
        deviations = ", ".join(f"{q} {v}" for q, v in numeric["deviations"].items())
        lines.append(f"  numeric verification not done: {numeric['note']}" if numeric["passed"] is None else
                     f"  numeric verification {word}: largest relative deviations {deviations} "
                     f"at {len(numeric['points'])} random points")
    for key, verdict in derivation.results.get("verdicts", {}).items():
        word = HOLDS_WORDS[verdict["holds"]]
        if key == "einstein_space" and derivation.step("verdict/einstein_space").params.get("lambda_constant") is False:
            word += " only as the two-dimensional identity R_ij = (R/2) g_ij: lambda = R/2 is not constant"
        evidence = verdict["evidence"]
        if len(evidence) > 110:
            evidence = evidence[:107] + "..."
        fluid = derivation.results.get("perfect_fluid") if key == "perfect_fluid" and verdict["holds"] else None
        if fluid and not derivation.step("verdict/perfect_fluid").params.get("vacuum"):
            evidence += f"; density rho = {fluid['density']}, pressure p = {fluid['pressure']}"
        lines.append(f"  {VERDICTS[key].label}: {word} ({evidence})")
    lines += _matter_lines(derivation.results)
    slow = next((s.params["slow_path_because"] for s in derivation.steps
                 if s.quantity == "metric" and "slow_path_because" in s.params), None)
    if slow:
        lines.append(_short(f"  note: sympy's simplify was used (slower) because of {slow['reason']}"
                            + (f": {slow['expression']}" if "expression" in slow else "")))
    lines.append(f"  {len(derivation.steps)} steps recorded" +
                 (f" in {derivation.seconds:.2f} s" if derivation.seconds else " (read from a saved trace)"))
    lines.append(f"  written to {out_dir}: {', '.join(written) if written else 'nothing'}")
    return "\n".join(lines)


def _short(text: str, limit: int = 110) -> str:
    return text if len(text) <= limit else text[:limit - 3] + "..."


def _matter_lines(results: dict) -> list[str]:
    """Summary lines for the energy density and pressures, energy conditions and the ansatz."""
    lines = []
    if "energy_density" in results and results.get("frame_diagonal", True):
        lines.append(f"  energy density rho = {results['energy_density']}")
        for direction, p in results.get("pressures", {}).items():
            lines.append(f"  pressure along {direction} = {p}")
    elif "energy_density" in results:
        lines.append("  the stress-energy tensor is not diagonal in the frame: its diagonal entries are not the "
                     "energy density and principal pressures")
    frame = results.get("frame")
    if frame and not frame.get("built"):
        lines.append(f"  frame: {frame.get('reason')}")
    for name, row in results.get("energy_conditions", {}).items():
        word = CONDITION_WORDS[row["holds"]]
        lines.append(f"  {name} energy condition: {word} ({_short(row['evidence'])})")
    ansatz = results.get("ansatz")
    if ansatz:
        for unknown, value in ansatz.get("solution", {}).items():
            lines.append(f"  ansatz solution {unknown} = {value}")
        if ansatz.get("other_branches"):
            lines.append(f"  (dsolve also gave {ansatz['other_branches']} other branch(es), not followed; "
                         "see the ansatz/solve steps)")
        if "unsolved" in ansatz:
            lines.append(f"  ansatz not fully solved: {ansatz['unsolved']}")
        if "check" in ansatz:
            word = HOLDS_WORDS[ansatz["check"]["holds"]]
            lines.append(f"  solution substituted into every field equation: {word} "
                         f"({_short(ansatz['check']['evidence'])})")
        properties = ansatz.get("properties")
        if properties:
            kind = "Ricci-flat" if properties["einstein_constant"] == 0 else \
                f"an Einstein space, R_ij = {properties['einstein_constant']} g_ij"
            invariants = ", ".join(f"{name} = {properties[key]}" for name, key in (("R", "scalar"), ("K", "kretschmann"))
                                   if key in properties)
            lines.append(f"  the solved metric: {kind}" + (f"; {invariants}" if invariants else ""))
    return lines


def run_derive(args: argparse.Namespace) -> int:
    out_dir = Path(args.output) if args.output else _default_folder(args.file)
    formats, templates = _output_options(args, out_dir)
    args.folder = out_dir
    metric = load_metric(args.file)
    return _derive_and_export(args, metric, out_dir, formats, templates)


def run_audit(args: argparse.Namespace) -> int:
    from .claims import load_claims
    out_dir = Path(args.output) if args.output else _default_folder(args.file)
    formats, templates = _output_options(args, out_dir)
    args.folder = out_dir
    metric, title, claims = load_claims(args.file)
    return _derive_and_export(args, metric, out_dir, formats, templates, title=title, claims=claims)


def run_render(args: argparse.Namespace) -> int:
    """Write the outputs of a saved trace, computing nothing."""
    from .trace import read_trace_file
    trace_path = Path(args.file)
    out_dir = Path(args.output) if args.output else trace_path.parent
    record = read_trace_file(trace_path)
    formats, templates = _output_options(args, out_dir)
    args.folder = out_dir
    status = 1 if "audit" in record.results and not record.results["audit"]["all_agree"] else 0
    return _export_and_write(args, record, out_dir, formats, templates, status,
                             keep=kept_beside_trace(trace_path, out_dir))


def kept_beside_trace(trace_path: Path, out_dir: Path) -> tuple[str, ...]:
    """Rendering into the trace's own folder rewrites part of a set that came from the same trace: the
    files of that set to keep (none when rendering elsewhere)."""
    if os.path.abspath(out_dir) != os.path.abspath(trace_path.parent):
        return ()
    keep = ("trace.json", "report.tex", "appendix.tex", "report.pdf", "derivation.ipynb")
    from .outputs import PLOT_NAME  # and the plots' figure files beside report.tex
    return keep + tuple(sorted(n for n in os.listdir(out_dir) if PLOT_NAME.fullmatch(n)))


def _default_folder(input_file: str) -> Path:
    """out/<file name without its extension>; a name that would not make a visible folder of its own
    (``...toml`` has the stem ``..``, ``.toml`` the stem ``.toml``) is refused."""
    stem = Path(input_file).stem
    if stem.startswith(".") or not stem.strip():
        raise InputError(f"cannot name an output folder after '{Path(input_file).name}'; give one with -o")
    return Path("out") / stem


def _output_options(args: argparse.Namespace, out_dir: Path) -> tuple[list[str], list[Path]]:
    return output_options(args.formats, args.anchor_prefix, args.templates, out_dir)


def output_options(formats_text: str | None, anchor_prefix: str | None, templates_folder: str | Path | None,
                   out_dir: Path) -> tuple[list[str], list[Path]]:
    """The checked output options (as for --formats, --anchor-prefix, --templates) and output folder."""
    formats = _formats(formats_text)
    from .exporters import valid_anchor_prefix
    if anchor_prefix is not None and not valid_anchor_prefix(anchor_prefix):
        raise InputError("--anchor-prefix may hold only letters, digits, '-', '.' and ':' (at most 64)")
    check_output_folder(out_dir)
    templates = [Path(templates_folder)] if templates_folder else []
    if templates and not templates[0].is_dir():
        raise InputError(f"template folder {templates[0]} does not exist")
    return formats, templates


def _derive_and_export(args: argparse.Namespace, metric, out_dir: Path, formats: list[str],
                       templates: list[Path], title: str = "", claims=None) -> int:
    if args.jobs is not None and args.jobs < 1:
        raise InputError("--jobs must be at least 1")
    jobs = args.jobs if args.jobs is not None else default_jobs()
    try:
        derivation = derive(metric, progress=args.progress, curvature_invariants=not args.skip_invariants,
                            jobs=jobs)
    except (TimeLimitReached, KeyboardInterrupt) as stop:
        if getattr(stop, "partial", None) is None or claims is not None:
            raise
        write_partial(args, stop, out_dir, formats, templates)
        raise
    status = 0
    if claims is not None:
        from .audit import audit, record_audit
        args.progress("checking the claims", 0, 1)
        verdicts, earliest = audit(derivation, claims)
        derivation = record_audit(derivation, title, verdicts, earliest)
        if not derivation.results["audit"]["all_agree"]:
            status = 1
    return _export_and_write(args, derivation, out_dir, formats, templates, status)


def write_partial(args: argparse.Namespace, stop: BaseException, out_dir: Path, formats: list[str],
                  templates: list[Path]) -> None:
    """Write the stages a stopped run finished as the output set, marked partial in every output; the
    time limit or the interrupt has already happened, so writing them is not cut short by it.  Marks
    ``stop.written`` for the one-line message."""
    _cancel_time_limit()
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)  # a second Ctrl-C does not cut the swap
    try:
        args.quiet = True
        _export_and_write(args, stop.partial, out_dir, formats, templates, 0)
        stop.written = out_dir
    finally:
        signal.signal(signal.SIGINT, previous)


def _export_and_write(args: argparse.Namespace, derivation: Derivation, out_dir: Path, formats: list[str],
                      templates: list[Path], status: int, keep: tuple[str, ...] = ()) -> int:
    """Write the asked outputs of a derivation, all made from its trace as ``stepper render`` would."""
    contents, problems = output_files(derivation, out_dir, formats, templates, args.detail, args.appendix_heading,
                                      args.anchor_prefix, args.progress)
    if problems and args.formats:  # no report.pdf although it was asked for
        status = 1
    _cancel_time_limit()
    replace_output_set(out_dir, contents, keep=tuple(name for name in keep if name not in contents),
                       state=args.swap)
    written = list(contents)
    if not args.quiet:
        print(terminal_text(summary(derivation, out_dir, written)))
        if "audit" in derivation.results:
            print(terminal_text(audit_summary(derivation)))
    numeric = derivation.results.get("numeric_verification", {})
    if numeric and numeric["passed"] is False:
        problems.append("stepper: error: the numeric verification disagrees with the symbolic results "
                        f"(deviations {numeric['deviations']}); do not rely on this derivation")
        status = 1
    elif numeric and numeric["passed"] is None:
        problems.append(f"stepper: warning: no numeric verification: {numeric['note']}")
    for line in problems:
        sys.stderr.write(terminal_text(line) + "\n")
    return status


def output_files(derivation: Derivation, out_dir: Path, formats: Sequence[str], templates: Sequence[Path] = (),
                 detail: str = "full", appendix_heading: str = "section", anchor_prefix: str | None = None,
                 progress=None) -> tuple[dict[str, str | bytes], list[str]]:
    """The files of a derivation's output set, all made from its trace as ``stepper render`` would (nothing is
    written), and a warning line when no report.pdf could be made for lack of TeX."""
    from .trace import trace_json
    progress = progress or (lambda label, done, total: None)
    if "trace" in formats:
        progress("writing trace.json", 0, 1)
    text = trace_json(derivation)
    if all(name == "trace" for name in formats):  # nothing reads the record back: no templates, no TeX
        return {"trace.json": text}, []
    import jinja2

    from .exporters import EXPORTERS, AppendixExporter, TexFailed, TexMissing
    from .trace import load_trace
    templates = list(templates)
    record = load_trace(text, validate=False)  # every exporter reads what the trace holds, nothing else
    contents: dict[str, str | bytes] = {}
    problems: list[str] = []
    for name in formats:
        exporter = (AppendixExporter(templates, appendix_heading, anchor_prefix, detail)
                    if name == "appendix" else EXPORTERS[name](templates, detail) if name in ("tex", "pdf")
                    else EXPORTERS[name](templates))
        if name != "trace":
            progress(f"writing {exporter.file_name}", 0, 1)
        try:
            contents[exporter.file_name] = text if name == "trace" else exporter.export(record)
        except TexMissing as err:
            problems.append(f"stepper: warning: no report.pdf: {err}")
        except TexFailed as err:
            raise _tex_failure(err, out_dir, bool(templates)) from None
        except jinja2.TemplateError as err:
            raise InputError(f"template problem in {name} output: {err}") from None
    if {"tex", "appendix", "pdf"} & set(formats):  # the plots' figures, which report.tex and appendix.tex include
        from .plots import plot_files
        progress("drawing the plots", 0, 1)
        contents.update(plot_files(record))
    return contents, problems


class _TexFailure(InputError):
    """pdflatex failed: the previous outputs are kept; status 4 for stepper's own templates (a bug), 2 for
    templates the user gave."""

    def __init__(self, message: str, exit_status: int) -> None:
        super().__init__(message)
        self.exit_status = exit_status


def _tex_failure(err, out_dir: Path, user_templates: bool) -> _TexFailure:
    """Keep TeX's log in the system's temporary folder (nothing is written into the output folder)."""
    import tempfile
    handle, log_path = tempfile.mkstemp(prefix="stepper-tex-", suffix=".log")
    with os.fdopen(handle, "w", encoding="utf-8") as log:
        log.write(err.log)
    return _TexFailure(f"no report.pdf: {err} (TeX's log: {log_path}); {what_is_kept(out_dir, SwapState())}",
                       2 if user_templates else INTERNAL_ERROR)


def audit_summary(derivation: Derivation) -> str:
    """One line per claim, then where the calculation first went wrong."""
    report = derivation.results["audit"]
    lines = [f"Audit: {report['title']}"]
    for row in report["claims"]:
        where = f" {row['component']}" if row["component"] else ""
        where += f", indices {row['indices']}" if row.get("indices") else ""
        label = f" [{row['label']}]" if row["label"] else ""
        line = f"  claim {row['number']} ({row['quantity']}{where}){label}: {row['outcome']}"
        if row["outcome"] == "differs":
            line += f"; {row['diagnosis']}; correct value {row.get('correct')}"
        elif row["outcome"] in ("cannot be decided", "unreadable"):
            line += f"; {row['evidence']}"
        lines.append(line)
    if report["earliest_wrong"]:
        numbers = ", ".join(str(n) for n in report["earliest_wrong"])
        lines.append(f"  earliest wrong claim{'s' if len(report['earliest_wrong']) > 1 else ''} along the chain "
                     f"of steps: {numbers} (later wrong claims depend on {'them' if len(report['earliest_wrong']) > 1 else 'it'})")
    agreed = sum(1 for row in report["claims"] if row["outcome"] == "agrees")
    lines.append(f"  {agreed} of {len(report['claims'])} claims agree")
    return "\n".join(lines)


def _formats(text: str | None) -> list[str]:
    from .exporters import EXPORTERS
    if not text:
        return list(EXPORTERS)
    chosen = [part.strip() for part in text.split(",") if part.strip()]
    unknown = [c for c in chosen if c not in EXPORTERS]
    if unknown or not chosen:
        raise InputError(f"unknown output format '{unknown[0] if unknown else text}' "
                         f"(choose from {', '.join(EXPORTERS)})")
    return [name for name in EXPORTERS if name in chosen]


def run() -> None:
    """The entry point of ``stepper`` and ``python -m stepper``: :func:`main`, then the end of the process.

    Every output file is closed and in place when main returns, so where no thread, child process or cluster
    connection is left (:func:`quick_exit_allowed`) the process ends at once: tearing down the interpreter's
    sympy objects and caches would cost about half a second more on every run."""
    status = main()
    if not quick_exit_allowed(sys.argv[1:]):
        sys.exit(status)
    for stream in (sys.stdout, sys.stderr):
        try:
            if stream is not None:
                stream.flush()
        except BrokenPipeError:
            status = status or 141
        except OSError:
            status = status or 1
    os._exit(status)


def quick_exit_allowed(argv: Sequence[str]) -> bool:
    """Whether :func:`run` may end the process at once after ``main`` returns: commands that leave
    no threads, child processes or cluster connections behind (``batch`` may leave a Dask client's)."""
    return "batch" not in argv


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 2
    args.progress = _Progress(args.quiet)
    args.swap = SwapState()
    args.folder = None
    try:
        time_limit = getattr(args, "time_limit", None)
        if time_limit is not None and not (math.isfinite(time_limit) and time_limit > 0):
            raise InputError("--time-limit must be a positive number of seconds")
        with _stopping_signals(), _time_limit(time_limit, args.progress):
            return {"audit": run_audit, "render": run_render, "batch": _run_batch,
                    "compare": _run_compare}.get(args.command, run_derive)(args)
    except InputError as err:
        _say_error(f"stepper: error: {err.message}")
        return getattr(err, "exit_status", 2)
    except TimeLimitReached as stop:
        _say_error(f"stepper: stopped: the time limit of {time_limit:g} s was reached during {stop}; "
                   f"{_partial_or_kept(args, stop)}")
        return 3
    except (KeyboardInterrupt, Stopped) as stop:
        name = stop.signal_name if isinstance(stop, Stopped) else "Ctrl-C"
        _say_error(f"stepper: stopped by {name}; {_partial_or_kept(args, stop)}")
        return stop.exit_status if isinstance(stop, Stopped) else 130
    except BrokenPipeError:  # the reader of our output went away (stepper ... | head): stop quietly
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 141
    except MemoryError:
        _say_error(f"stepper: error: out of memory while working on {args.file}; the input asks for more than "
                   f"this machine has ({_what_was_kept(args)})")
        return INTERNAL_ERROR
    except Exception as err:  # a bug in stepper, not in the input: one line, no traceback
        _say_error(f"stepper: internal error while working on {args.file}: {type(err).__name__}: "
                   f"{' '.join(str(err).split())[:300]} (please report it with that file; "
                   f"{_what_was_kept(args)})")
        return INTERNAL_ERROR


def _partial_or_kept(args: argparse.Namespace, stop: BaseException) -> str:
    written = getattr(stop, "written", None)
    if written is None:
        return _what_was_kept(args)
    finished = len(stop.partial.stopped["finished"])
    return (f"the {finished} stages it finished were written to {terminal_text(str(written))} "
            f"as a partial derivation, marked partial")


def _run_batch(args: argparse.Namespace) -> int:
    from .batch import command
    return command(args)


def _run_compare(args: argparse.Namespace) -> int:
    from .compare import command
    return command(args)


def _what_was_kept(args: argparse.Namespace) -> str:
    return what_is_kept(args.folder, args.swap)


@contextmanager
def _stopping_signals() -> Iterator[None]:
    """SIGTERM and SIGHUP stop a run as Ctrl-C does: by an exception, so that cleanup runs."""
    def stop(number, frame):
        raise Stopped(signal.Signals(number).name, 128 + number)
    previous = {number: signal.signal(number, stop) for number in (signal.SIGTERM, signal.SIGHUP)}
    try:
        yield
    finally:
        for number, handler in previous.items():
            signal.signal(number, handler)


@contextmanager
def _time_limit(seconds: float | None, progress: _Progress) -> Iterator[None]:
    """A watchdog over the whole run, reading included: SIGALRM interrupts whatever is running,
    inside sympy too, and names the stage the progress line last showed."""
    if seconds is None:
        yield
        return

    def expire(number, frame):
        raise TimeLimitReached(progress.last)
    previous = signal.signal(signal.SIGALRM, expire)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)


def _cancel_time_limit() -> None:
    """The outputs are made: the swap that follows is short and must not be cut."""
    signal.setitimer(signal.ITIMER_REAL, 0)


def terminal_text(text: str) -> str:
    """``text`` without control characters (terminal escape sequences, bells, carriage returns),
    newlines kept: what comes from an input file never drives the terminal."""
    return "".join(ch for ch in text if ch == "\n" or (ch >= " " and not 0x7f <= ord(ch) <= 0x9f))


def _say_error(line: str) -> None:
    line = terminal_text(line)
    sys.stderr.write(f"\n{line}\n" if sys.stderr.isatty() else f"{line}\n")


if __name__ == "__main__":
    sys.exit(main())
