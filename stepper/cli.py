"""Command line: ``stepper derive FILE``, ``stepper audit CLAIMS``, ``stepper render TRACE``.

Bad input prints one line, ``stepper: error: ...``, and exits with status 2;
nothing is written unless the whole derivation succeeded.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import time
from pathlib import Path
from typing import Sequence

from .version import __version__
from .chain import TimeLimitReached, default_jobs, derive
from .quantities import VERDICTS
from .record import CONDITION_WORDS, HOLDS_WORDS, Derivation
from .errors import InputError
from .metricfile import load_metric
from .trace import write_atomically


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
    return parser


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
                     help="stop cleanly, writing nothing, when the derivation takes longer than this")
    run.add_argument("--templates", metavar="DIR",
                     help="folder of templates that override the project's templates/ (same file names)")


class _Progress:
    """Shows which stage is running and how far it is: a live line on a
    terminal; otherwise, once a run has lasted two seconds, a line a second."""

    def __init__(self, quiet: bool) -> None:
        self.quiet = quiet
        self.start = time.perf_counter()
        self.live = sys.stderr.isatty()
        self.last = ""
        self.printed_at = 0.0

    def __call__(self, label: str, done: int, total: int) -> None:
        if self.quiet or label == self.last:
            return
        self.last = label
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
        lines.append(f"  numeric verification {word}: largest relative deviations {deviations} "
                     f"at {len(numeric['points'])} random points")
    for key, verdict in derivation.results.get("verdicts", {}).items():
        word = HOLDS_WORDS[verdict["holds"]]
        evidence = verdict["evidence"]
        if len(evidence) > 110:
            evidence = evidence[:107] + "..."
        fluid = derivation.results.get("perfect_fluid") if key == "perfect_fluid" and verdict["holds"] else None
        if fluid and not derivation.step("verdict/perfect_fluid").params.get("vacuum"):
            evidence += f"; density rho = {fluid['density']}, pressure p = {fluid['pressure']}"
        lines.append(f"  {VERDICTS[key].label}: {word} ({evidence})")
    lines += _matter_lines(derivation.results)
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
    return lines


def run_derive(args: argparse.Namespace) -> int:
    metric = load_metric(args.file)
    out_dir = Path(args.output) if args.output else Path("out") / Path(args.file).stem
    return _derive_and_export(args, metric, out_dir)


def run_audit(args: argparse.Namespace) -> int:
    from .claims import load_claims
    metric, title, claims = load_claims(args.file)
    out_dir = Path(args.output) if args.output else Path("out") / Path(args.file).stem
    return _derive_and_export(args, metric, out_dir, title=title, claims=claims)


def run_render(args: argparse.Namespace) -> int:
    """Write the outputs of a saved trace, computing nothing."""
    from .trace import read_trace_file
    trace_path = Path(args.file)
    out_dir = Path(args.output) if args.output else trace_path.parent
    formats, templates = _output_options(args, out_dir)
    record = read_trace_file(trace_path)
    status = 1 if "audit" in record.results and not record.results["audit"]["all_agree"] else 0
    return _export_and_write(args, record, out_dir, formats, templates, status)


def _output_options(args: argparse.Namespace, out_dir: Path) -> tuple[list[str], list[Path]]:
    formats = _formats(args.formats)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"output folder {out_dir} exists and is not a folder")
    templates = [Path(args.templates)] if args.templates else []
    if templates and not templates[0].is_dir():
        raise InputError(f"template folder {templates[0]} does not exist")
    return formats, templates


def _derive_and_export(args: argparse.Namespace, metric, out_dir: Path, title: str = "", claims=None) -> int:
    formats, templates = _output_options(args, out_dir)
    if args.jobs is not None and args.jobs < 1:
        raise InputError("--jobs must be at least 1")
    if args.time_limit is not None and not (math.isfinite(args.time_limit) and args.time_limit > 0):
        raise InputError("--time-limit must be a positive number of seconds")
    jobs = args.jobs if args.jobs is not None else default_jobs()
    try:
        derivation = derive(metric, progress=_Progress(args.quiet), curvature_invariants=not args.skip_invariants,
                            jobs=jobs, time_limit=args.time_limit)
    except TimeLimitReached as stop:
        sys.stderr.write(f"stepper: stopped: the time limit of {args.time_limit:g} s was reached during {stop}; "
                         "nothing was written\n")
        return 3
    status = 0
    if claims is not None:
        from .audit import audit, record_audit
        verdicts, earliest = audit(derivation, claims)
        derivation = record_audit(derivation, title, verdicts, earliest)
        if not derivation.results["audit"]["all_agree"]:
            status = 1
    return _export_and_write(args, derivation, out_dir, formats, templates, status)


def _export_and_write(args: argparse.Namespace, derivation: Derivation, out_dir: Path, formats: list[str],
                      templates: list[Path], status: int) -> int:
    """Write the asked outputs of a derivation, all made from its trace as ``stepper render`` would."""
    # Imported here so that a run writing only trace.json does not pay for templates and TeX.
    import jinja2

    from .exporters import EXPORTERS, TexFailed, TexMissing
    from .trace import load_trace, trace_json
    text = trace_json(derivation)
    record = load_trace(text, validate=False)  # every exporter reads what the trace holds, nothing else
    contents: dict[str, str | bytes] = {}
    problems: list[str] = []
    for name in formats:
        exporter = EXPORTERS[name](templates)
        try:
            contents[exporter.file_name] = text if name == "trace" else exporter.export(record)
        except TexMissing as err:
            problems.append(f"stepper: warning: no report.pdf: {err}")
            status = 1 if args.formats else status
        except TexFailed as err:
            contents["report.log"] = err.log
            problems.append(f"stepper: error: no report.pdf: {err} (TeX's log: {out_dir / 'report.log'})")
            status = 1
        except jinja2.TemplateError as err:
            raise InputError(f"template problem in {name} output: {err}") from None
    if "pdf" in formats and "report.pdf" not in contents:
        stale = out_dir / "report.pdf"  # an older PDF would no longer match the new trace
        if stale.exists():
            stale.unlink()
    if "report.log" not in contents and (out_dir / "report.log").exists():
        (out_dir / "report.log").unlink()
    written = []
    for file_name, content in contents.items():
        target = out_dir / file_name
        try:
            write_atomically(target, content)
        except OSError as err:
            raise InputError(f"cannot write {target}: {err.strerror or err}") from None
        written.append(file_name)
    if not args.quiet:
        print(summary(derivation, out_dir, written))
        if "audit" in derivation.results:
            print(audit_summary(derivation))
    numeric = derivation.results.get("numeric_verification", {})
    if numeric and numeric["passed"] is False:
        problems.append("stepper: error: the numeric verification disagrees with the symbolic results "
                        f"(deviations {numeric['deviations']}); do not rely on this derivation")
        status = 1
    elif numeric and numeric["passed"] is None:
        problems.append(f"stepper: warning: no numeric verification: {numeric['note']}")
    for line in problems:
        sys.stderr.write(line + "\n")
    return status


def audit_summary(derivation: Derivation) -> str:
    """One line per claim, then where the calculation first went wrong."""
    report = derivation.results["audit"]
    lines = [f"Audit: {report['title']}"]
    for row in report["claims"]:
        where = f" {row['component']}" if row["component"] else ""
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


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 2
    try:
        return {"audit": run_audit, "render": run_render}.get(args.command, run_derive)(args)
    except InputError as err:
        sys.stderr.write(f"\nstepper: error: {err.message}\n" if sys.stderr.isatty() else
                         f"stepper: error: {err.message}\n")
        return 2
    except BrokenPipeError:  # the reader of our output went away (stepper ... | head): stop quietly
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 141
    except KeyboardInterrupt:
        sys.stderr.write("stepper: interrupted; nothing was written\n")
        return 130
    except Exception as err:  # a bug in stepper, not in the input: one line, no traceback
        sys.stderr.write(f"stepper: internal error while working on {args.file}: {type(err).__name__}: "
                         f"{' '.join(str(err).split())[:300]} (please report it with that file)\n")
        return INTERNAL_ERROR


if __name__ == "__main__":
    sys.exit(main())
