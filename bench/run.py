"""Benchmark: stepper against a plain-sympy baseline, in one run on one machine.

    python3 bench/run.py                  # everything (the baseline for Kerr takes many minutes)
    python3 bench/run.py --quick          # small metrics only
    python3 bench/run.py --baseline-limit 300 --repeats 3
    python3 bench/run.py --only forms --compare-root /tmp/before   # the same geometry in the forms people use

For each metric it times, in fresh processes:
  * the baseline (bench/baseline.py: Christoffel, Ricci by contracting Riemann, simplify() on each component;
    for the files asking for matter or an ansatz, bench/baseline_beyond.py: also the Einstein tensor, T^i_j
    and the ansatz solved with dsolve),
  * `stepper derive --formats trace` (the whole chain with the trace),
  * `stepper derive --formats trace,pdf,notebook` (with the PDF and the notebook),
and prints a table: metric, dimension, baseline seconds, stepper seconds (trace; with PDF and notebook),
the ratio baseline / stepper (trace), and stepper's peak memory with all outputs.  Stepper times are
medians of --repeats runs; the baseline runs once, and a baseline stopped at --baseline-limit seconds
is shown as '>limit' (its ratio is then a lower bound).  A run without --only ends with the forms family
(the same geometry as people write it: exponentials, square roots, Cartesian, isotropic and horizon-penetrating
coordinates), timed with --jobs 1 with and without the invariants.  These machines are noisy: read ratios,
not absolute times.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"
BENCH_METRICS = ROOT / "bench" / "metrics"

NAMED = [
    ("round 2-sphere", EXAMPLES / "round_sphere.toml"),
    ("exterior Schwarzschild", EXAMPLES / "compact_star_exterior.toml"),
    ("flat FLRW, free a(t)", EXAMPLES / "expanding_dust_universe.toml"),
    ("Reissner-Nordstrom", BENCH_METRICS / "charged_black_hole.toml"),
    ("Kerr", EXAMPLES / "spinning_black_hole.toml"),
    ("Kerr-Newman", BENCH_METRICS / "charged_rotating_black_hole.toml"),
    ("Kerr-de Sitter", BENCH_METRICS / "rotating_de_sitter.toml"),
    ("5-d Tangherlini", EXAMPLES / "five_dimensional_black_hole.toml"),
]
SLOW_BASELINES = {"Kerr", "Kerr-Newman", "Kerr-de Sitter", "Kerr, with [matter]"}

#: The same geometry in the forms people write it (--only forms): exponentials and square roots against
#: free functions and rational forms.  Timed with --jobs 1, with and without the invariants; --compare-root
#: adds the time of another checkout of stepper (an older version) on the same file.
FORMS = [
    ("static star, exp(2 Phi), exp(2 Lambda)", BENCH_METRICS / "static_star_exponential.toml"),
    ("static star, A(r), B(r)", BENCH_METRICS / "static_star_plain.toml"),
    ("Schwarzschild, Kerr-Schild x,y,z", BENCH_METRICS / "schwarzschild_kerr_schild.toml"),
    ("Schwarzschild, t,r,theta,phi", BENCH_METRICS / "schwarzschild_standard.toml"),
    ("Schwarzschild, isotropic", BENCH_METRICS / "schwarzschild_isotropic.toml"),
    ("Schwarzschild, ingoing EF", BENCH_METRICS / "schwarzschild_ingoing.toml"),
    ("Schwarzschild, Painleve-Gullstrand", BENCH_METRICS / "schwarzschild_painleve.toml"),
    ("exponential metric exp(+-2M/r)", BENCH_METRICS / "exponential_mass_metric.toml"),
    ("surface exp(2w)(dx^2 + dy^2)", BENCH_METRICS / "conformal_surface_exponential.toml"),
    ("de Sitter, exp(2Ht) flat slicing", EXAMPLES / "inflating_universe.toml"),
]

#: Metric files asking for more than curvature, timed against bench/baseline_beyond.py.
BEYOND = [
    ("wormhole, with [matter]", EXAMPLES / "wormhole_passage.toml"),
    ("static closed universe, [matter]", EXAMPLES / "closed_static_universe.toml"),
    ("Schwarzschild, [matter]+[orbit]", EXAMPLES / "compact_star_exterior.toml"),
    ("static ansatz, [ansatz]", EXAMPLES / "exterior_from_ansatz.toml"),
    ("Kerr, with [matter]", BENCH_METRICS / "spinning_black_hole_matter.toml"),
]


def sphere_file(n: int, folder: Path) -> Path:
    """The round n-sphere of radius a in hyperspherical angles x1..xn."""
    names = [f"x{i}" for i in range(1, n + 1)]
    terms = []
    for i, name in enumerate(names):
        prefix = "*".join(f"sin({names[j]})^2" for j in range(i))
        terms.append("a^2*" + (prefix + "*" if prefix else "") + f"d{name}^2")
    path = folder / f"sphere_{n}.toml"
    path.write_text(f'title = "round {n}-sphere"\ncoordinates = {names!r}\n'.replace("'", '"')
                    + f'line_element = "{" + ".join(terms)}"\n[symbols]\na = "positive"\n')
    return path


def scale_factor_file(n: int, folder: Path) -> Path:
    """-dt^2 + sum_i a_i(t)^2 dx_i^2: a diagonal metric with n - 1 free functions."""
    space = [f"x{i}" for i in range(1, n)]
    names = ["t"] + space
    line = "-dt^2 + " + " + ".join(f"a{i}(t)^2*d{x}^2" for i, x in enumerate(space, start=1))
    functions = "".join(f'a{i} = ["t"]\n' for i in range(1, n))
    path = folder / f"scale_factors_{n}.toml"
    path.write_text(f'title = "{n} dimensions, {n - 1} free scale factors"\ncoordinates = {names!r}\n'.replace("'", '"')
                    + f'line_element = "{line}"\n[functions]\n{functions}')
    return path


def run_measured(command: list[str], limit: float | None = None, cwd: Path = ROOT) -> float:
    """Wall seconds of one child process; infinity when it passes ``limit``."""
    start = time.perf_counter()
    child = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, cwd=cwd,
                             env=dict(os.environ, SOURCE_DATE_EPOCH="0"))
    try:
        _, err = child.communicate(timeout=limit)
    except subprocess.TimeoutExpired:
        child.kill()
        child.communicate()
        return float("inf")
    seconds = time.perf_counter() - start
    if child.returncode != 0:
        raise RuntimeError(f"{' '.join(command)} failed: {err.decode()[-500:]}")
    return seconds


def peak_memory_kib(command: list[str]) -> int:
    """Peak resident memory of a command, read from the kernel's accounting for that child alone."""
    pid = os.fork()
    if pid == 0:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, 1)
        os.dup2(devnull, 2)
        os.chdir(ROOT)
        os.execvp(command[0], command)
    _, status, usage = os.wait4(pid, 0)
    if status != 0:
        raise RuntimeError(f"{' '.join(command)} failed with status {status}")
    return usage.ru_maxrss


def stepper_command(path: Path, formats: str, out: Path) -> list[str]:
    return [sys.executable, "-m", "stepper", "derive", str(path), "-o", str(out), "--quiet", "--formats", formats]


def measure(label: str, path: Path, dimension: int, args, out: Path, script: str = "baseline.py") -> dict:
    row = {"metric": label, "n": dimension}
    if args.no_baseline or (args.quick and label in SLOW_BASELINES):
        row["baseline"] = None
    else:
        row["baseline"] = run_measured([sys.executable, str(ROOT / "bench" / script), str(path)],
                                       limit=args.baseline_limit)
    trace_times = [run_measured(stepper_command(path, "trace", out)) for _ in range(args.repeats)]
    full_times = [run_measured(stepper_command(path, "trace,pdf,notebook", out)) for _ in range(args.repeats)]
    row["stepper"] = statistics.median(trace_times)
    row["stepper_all"] = statistics.median(full_times)
    row["memory_mib"] = peak_memory_kib(stepper_command(path, "trace,pdf,notebook", out)) / 1024
    return row


def measure_form(label: str, path: Path, args, out: Path) -> dict:
    """One row of the forms family: baseline, the other checkout (--compare-root), stepper with and without
    the invariants (trace only, --jobs 1), and stepper's peak memory with the invariants."""
    row = {"metric": label}
    row["baseline"] = None if args.no_baseline else run_measured(
        [sys.executable, str(ROOT / "bench" / "baseline.py"), str(path)], limit=args.baseline_limit)
    command = stepper_command(path, "trace", out) + ["--jobs", "1"]
    try:
        row["before"] = None if not args.compare_root else run_measured(command, limit=args.baseline_limit,
                                                                         cwd=Path(args.compare_root))
    except RuntimeError:  # the other checkout failed on this file
        row["before"] = float("nan")
    row["stepper"] = statistics.median(run_measured(command) for _ in range(args.repeats))
    row["no_invariants"] = statistics.median(run_measured(command + ["--skip-invariants"])
                                             for _ in range(args.repeats))
    row["memory_mib"] = peak_memory_kib(command) / 1024
    return row


FORMS_HEADER = (f"{'metric':40} {'baseline s':>11} {'before s':>9} {'stepper s':>10} {'no inv s':>9} "
                f"{'ratio':>7} {'peak MiB':>9}")


def form_row(row: dict, limit: float) -> str:
    base = row["baseline"]
    ratio = "-" if base is None else f">{limit / row['stepper']:.0f}" if base == float("inf") else \
        f"{base / row['stepper']:.1f}"
    return (f"{row['metric']:40} {format_seconds(base, limit):>11} {format_seconds(row['before'], limit):>9} "
            f"{row['stepper']:>10.2f} {row['no_invariants']:>9.2f} {ratio:>7} {row['memory_mib']:>9.0f}")


def format_seconds(value, limit) -> str:
    if value is None:
        return "-"
    if value == float("inf"):
        return f">{limit:.0f}"
    return f"{value:.2f}"


HEADER = f"{'metric':32} {'n':>2} {'baseline s':>11} {'stepper s':>10} {'+pdf+nb s':>10} {'ratio':>8} {'peak MiB':>9}"


def table_row(row: dict, limit: float) -> str:
    base = row["baseline"]
    if base is None:
        ratio = "-"
    elif base == float("inf"):
        ratio = f">{limit / row['stepper']:.0f}"
    else:
        ratio = f"{base / row['stepper']:.1f}"
    return (f"{row['metric']:32} {row['n']:>2} {format_seconds(base, limit):>11} {row['stepper']:>10.2f} "
            f"{row['stepper_all']:>10.2f} {ratio:>8} {row['memory_mib']:>9.0f}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--quick", action="store_true", help="skip the baselines of Kerr and Kerr-Newman")
    parser.add_argument("--no-baseline", action="store_true", help="time stepper only")
    parser.add_argument("--baseline-limit", type=float, default=1800, help="seconds before a baseline is stopped")
    parser.add_argument("--repeats", type=int, default=3, help="runs per stepper measurement (median)")
    parser.add_argument("--largest", type=int, default=8, help="largest dimension of the growing families")
    parser.add_argument("--only", choices=("named", "families", "beyond", "forms"),
                        help="run only the named metrics, the families, the files asking for more than curvature, "
                             "or the same geometry in the forms people use (ratio = baseline / stepper)")
    parser.add_argument("--compare-root", help="forms: also time the stepper of this checkout (an older version)")
    args = parser.parse_args()
    if args.only == "forms":
        run_forms(args)
        return
    rows = []
    with tempfile.TemporaryDirectory(prefix="stepper-bench-") as folder:
        folder = Path(folder)
        out = folder / "out"
        jobs = [] if args.only in ("families", "beyond") else [(label, path) for label, path in NAMED]
        if args.only in (None, "families"):
            jobs += [(f"round {n}-sphere", sphere_file(n, folder)) for n in range(2, args.largest + 1)]
            jobs += [(f"{n - 1} free scale factors", scale_factor_file(n, folder))
                     for n in range(2, args.largest + 1)]
        print(f"python {sys.version.split()[0]}, {os.cpu_count()} cores; stepper median of {args.repeats} runs; "
              f"baseline limit {args.baseline_limit:.0f} s", flush=True)
        print(HEADER)
        print("-" * len(HEADER), flush=True)
        beyond = [(label, path) for label, path in BEYOND] if args.only in (None, "beyond") else []
        from stepper import load_metric  # the dimension, read the same way stepper reads it
        for label, path in jobs:
            rows.append(measure(label, path, load_metric(path).dimension, args, out))
            print(table_row(rows[-1], args.baseline_limit), flush=True)
        if beyond:
            print("beyond curvature (baseline: bench/baseline_beyond.py)", flush=True)
        for label, path in beyond:
            rows.append(measure(label, path, load_metric(path).dimension, args, out, "baseline_beyond.py"))
            print(table_row(rows[-1], args.baseline_limit), flush=True)
    if args.only is None:
        print("the same geometry in the forms people use", flush=True)
        run_forms(args)


def run_forms(args) -> None:
    """The forms family: one row per file of FORMS, with and without the invariants."""
    with tempfile.TemporaryDirectory(prefix="stepper-bench-") as folder:
        print(f"python {sys.version.split()[0]}, {os.cpu_count()} cores; stepper --formats trace --jobs 1, "
              f"median of {args.repeats} runs; limit {args.baseline_limit:.0f} s", flush=True)
        print(FORMS_HEADER)
        print("-" * len(FORMS_HEADER), flush=True)
        for label, path in FORMS:
            print(form_row(measure_form(label, path, args, Path(folder) / "out"), args.baseline_limit), flush=True)


if __name__ == "__main__":
    main()
