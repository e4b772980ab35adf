"""Benchmark: a generated catalogue of metrics through ``stepper batch``, on this machine and on Dask.

    python3 bench/catalogue.py                          # 200 metrics: 1 and 2 workers here, a local Dask cluster of 2
    python3 bench/catalogue.py --size 60 --modes here-1,dask-2
    python3 bench/catalogue.py --write-only DIR         # just write the catalogue's metric files into DIR

The catalogue mixes families, small and large, taken round-robin so that a reduced --size still holds
every family: round n-spheres (n = 2..7), Schwarzschild-Tangherlini black holes in n = 4..8 dimensions,
FLRW universes (k = 0, +1, -1) with a(t) = t^p for fifteen exponents, exp, cosh, sinh and a free a(t),
Kasner-like power laws and free scale factors in 3 to 8 dimensions, surfaces of revolution, and static
spherically symmetric metrics (Reissner-Nordstrom, de Sitter and their mixtures).

Each mode runs ``stepper batch CATALOGUE -o OUT --formats trace`` as a fresh process and is timed on the
wall clock; the index then says how long each member took.  The table: wall time, members per minute,
the sum of member times, how well the workers were kept busy (sum / (wall x workers)), and the
coordinator's share (wall time not covered by members).  Then where the time goes: per family, and the
slowest members; and whether every mode wrote byte-identical traces.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
import time
from fractions import Fraction
from pathlib import Path


def _sphere_part(angles: list[str]) -> str:
    """d Omega^2 over ``angles``: dx1^2 + sin(x1)^2 (dx2^2 + sin(x2)^2 (...))."""
    text = f"d{angles[-1]}^2"
    for angle in reversed(angles[:-1]):
        text = f"d{angle}^2 + sin({angle})^2*({text})"
    return text


def _toml(title: str, coordinates: list[str], line_element: str, symbols: dict[str, str],
          functions: dict[str, list[str]] | None = None) -> str:
    lines = [f'title = "{title}"', f"coordinates = {json.dumps(coordinates)}",
             f'line_element = "{line_element}"', "", "[symbols]"]
    lines += [f'{name} = "{word}"' for name, word in symbols.items()]
    if functions:
        lines += ["", "[functions]"] + [f"{name} = {json.dumps(args)}" for name, args in functions.items()]
    return "\n".join(lines) + "\n"


def spheres() -> list[tuple[str, str]]:
    out = []
    for n in range(2, 8):
        angles = [f"x{i}" for i in range(1, n + 1)]
        out.append((f"sphere-{n}", _toml(f"round {n}-sphere", angles, f"rho^2*({_sphere_part(angles)})",
                                         {"rho": "positive", **{a: "positive" for a in angles[:-1]}})))
    return out


def tangherlini() -> list[tuple[str, str]]:
    out = []
    for n in range(4, 9):
        angles = [f"x{i}" for i in range(1, n - 1)]
        f = f"(1 - mu/r^{n - 3})"
        out.append((f"tangherlini-{n}", _toml(
            f"Schwarzschild-Tangherlini black hole in {n} dimensions", ["t", "r", *angles],
            f"-{f}*dt^2 + dr^2/{f} + r^2*({_sphere_part(angles)})",
            {"mu": "positive", "r": "positive", **{a: "positive" for a in angles[:-1]}})))
    return out


def flrw() -> list[tuple[str, str]]:
    scale = [(f"power-{str(p).replace('/', 'over')}", f"t^({p})") for p in
             (Fraction(1, 4), Fraction(1, 3), Fraction(1, 2), Fraction(2, 3), Fraction(3, 4), Fraction(1),
              Fraction(4, 3), Fraction(3, 2), Fraction(2), Fraction(3), Fraction(1, 5), Fraction(2, 5),
              Fraction(5, 2), Fraction(4), Fraction(1, 6))]
    scale += [("exp", "exp(H*t)"), ("cosh", "cosh(H*t)"), ("sinh", "sinh(H*t)"), ("free", "a(t)")]
    out = []
    for k, radial in ((0, "chi"), (1, "sin(chi)"), (-1, "sinh(chi)")):
        for label, a in scale:
            out.append((f"flrw-k{k:+d}-{label}".replace("+", "p").replace("-1-", "m1-"), _toml(
                f"FLRW universe, k = {k}, a(t) = {a}", ["t", "chi", "theta", "phi"],
                f"-dt^2 + ({a})^2*(dchi^2 + {radial}^2*(dtheta^2 + sin(theta)^2*dphi^2))",
                {"t": "positive", "chi": "positive", "theta": "positive", "H": "positive"},
                {"a": ["t"]} if a == "a(t)" else None)))
    return out


def scale_factors() -> list[tuple[str, str]]:
    """Diagonal cosmologies: free scale factors, and Kasner-like power laws t^(p_i)."""
    out = []
    for n in range(3, 9):
        xs = [f"x{i}" for i in range(1, n)]
        out.append((f"free-scale-{n}", _toml(
            f"{n - 1} free scale factors", ["t", *xs],
            "-dt^2 + " + " + ".join(f"a{i}(t)^2*d{x}^2" for i, x in enumerate(xs, start=1)),
            {}, {f"a{i}": ["t"] for i in range(1, len(xs) + 1)})))
    exponents = [Fraction(1, 2), Fraction(1, 3), Fraction(2, 3), Fraction(1), Fraction(-1, 3), Fraction(1, 4)]
    for n in range(3, 9):
        for shift in range(len(exponents)):
            xs = [f"x{i}" for i in range(1, n)]
            ps = [exponents[(shift + i) % len(exponents)] for i in range(len(xs))]
            out.append((f"kasner-{n}-{shift}", _toml(
                f"power-law cosmology in {n} dimensions, exponents {', '.join(map(str, ps))}", ["t", *xs],
                "-dt^2 + " + " + ".join(f"t^({2 * p})*d{x}^2" for p, x in zip(ps, xs)), {"t": "positive"})))
    return out


def surfaces() -> list[tuple[str, str]]:
    profiles = ["r", "sin(r)", "sinh(r)", "r^2", "cosh(r)", "exp(r)", "1 + r^2", "r/(1 + r)", "sqrt(r)",
                "log(1 + r)", "r*exp(-r)", "tanh(r)"]
    out = []
    for c in (1, 2, 3, 5, 7):
        for number, f in enumerate(profiles):
            out.append((f"surface-{c}-{number}", _toml(
                f"surface of revolution with profile {c}*({f})", ["r", "phi"],
                f"dr^2 + {c}^2*({f})^2*dphi^2", {"r": "positive"})))
    return out


def static_spherical() -> list[tuple[str, str]]:
    """-f dt^2 + dr^2/f + r^2 dOmega^2 for a list of f (Reissner-Nordstrom, de Sitter, their mixtures)."""
    profiles = ["1 - 2*M/r", "1 - 2*M/r + Q^2/r^2", "1 - r^2/L^2", "1 + r^2/L^2", "1 - 2*M/r - r^2/L^2",
                "1 - 2*M/r + r^2/L^2", "1 - 2*M/r + Q^2/r^2 - r^2/L^2", "1 - Q^2/r^2", "1 - 2*M/r + M^2/r^2",
                "1 - 2*M*r^2/(r^2 + Q^2)^(3/2)"]
    out = []
    for power in (1, 2, 3):  # the same profiles in other scalings of r
        for number, f in enumerate(profiles):
            f = f.replace("r^2/L^2", f"r^2/L^{2 * power}").replace("2*M/r", f"{2 * power}*M/r")
            out.append((f"static-{power}-{number}", _toml(
                f"static spherically symmetric metric with f = {f}", ["t", "r", "theta", "phi"],
                f"-({f})*dt^2 + dr^2/({f}) + r^2*(dtheta^2 + sin(theta)^2*dphi^2)",
                {"M": "positive", "Q": "positive", "L": "positive", "r": "positive", "theta": "positive"})))
    return out


FAMILIES = {"n-sphere": spheres, "Tangherlini": tangherlini, "FLRW": flrw, "scale factors": scale_factors,
            "surface": surfaces, "static": static_spherical}


def catalogue(size: int) -> list[tuple[str, str, str]]:
    """(family, name, TOML text) of ``size`` metrics, round-robin over the families (repeated with
    another scale when the families run out)."""
    lists = {family: make() for family, make in FAMILIES.items()}
    chosen: list[tuple[str, str, str]] = []
    round_number = 0
    while len(chosen) < size:
        progressed = False
        for family, items in lists.items():
            if round_number < len(items) and len(chosen) < size:
                chosen.append((family, *items[round_number]))
                progressed = True
        round_number += 1
        if not progressed:
            break
    return chosen


def write_catalogue(size: int, folder: Path) -> dict[str, str]:
    """Write the metric files; return name -> family."""
    folder.mkdir(parents=True, exist_ok=True)
    families = {}
    for family, name, text in catalogue(size):
        (folder / f"{name}.toml").write_text(text, encoding="utf-8")
        families[name] = family
    return families


def run_mode(mode: str, catalogue_folder: Path, out: Path, formats: str) -> tuple[float, dict, str]:
    where, count = mode.split("-")
    option = ["--workers", count] if where == "here" else ["--local-cluster", count]
    command = [sys.executable, "-m", "stepper", "batch", str(catalogue_folder), "-o", str(out),
               "--formats", formats, "--quiet", *option]
    start = time.perf_counter()
    proc = subprocess.run(command, capture_output=True, text=True, stdin=subprocess.DEVNULL)
    wall = time.perf_counter() - start
    index = json.loads((out / "index.json").read_text(encoding="utf-8"))
    return wall, index, proc.stderr.strip()


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--size", type=int, default=200, help="metrics in the catalogue (default 200)")
    parser.add_argument("--modes", default="here-1,here-2,dask-2",
                        help="comma-separated: here-N (N workers on this machine), dask-N (local Dask cluster)")
    parser.add_argument("--formats", default="trace", help="outputs of each member (default: trace)")
    parser.add_argument("--write-only", metavar="DIR", help="write the catalogue into DIR and stop")
    args = parser.parse_args()
    if args.write_only:
        families = write_catalogue(args.size, Path(args.write_only))
        print(f"wrote {len(families)} metric files into {args.write_only}")
        return 0
    with tempfile.TemporaryDirectory(prefix="stepper-catalogue-") as tmp:
        folder = Path(tmp, "catalogue")
        families = write_catalogue(args.size, folder)
        start = time.perf_counter()
        subprocess.run([sys.executable, "-m", "stepper", "--version"], capture_output=True)
        startup = time.perf_counter() - start
        print(f"catalogue: {len(families)} metrics ({', '.join(f'{sum(1 for f in families.values() if f == k)} {k}' for k in FAMILIES)}); "
              f"starting python -m stepper once: {startup:.2f} s")
        header = f"{'mode':<22}{'wall s':>8}{'per min':>9}{'sum of members s':>18}{'busy':>7}{'coordinator s':>15}  {'status'}"
        print(header)
        print("-" * len(header))
        traces: dict[str, dict[str, bytes]] = {}
        indexes = {}
        for mode in args.modes.split(","):
            out = Path(tmp, f"out-{mode}")
            wall, index, stderr = run_mode(mode, folder, out, args.formats)
            entries = index["entries"]
            workers = int(mode.split("-")[1])
            total = sum(e["seconds"] for e in entries)
            statuses: dict[str, int] = {}
            for e in entries:
                statuses[e["status"]] = statuses.get(e["status"], 0) + 1
            label = {"here": "this machine", "dask": "local Dask"}[mode.split("-")[0]] + f", {workers} worker" + \
                ("s" if workers > 1 else "")
            print(f"{label:<22}{wall:>8.1f}{60 * len(entries) / wall:>9.1f}{total:>18.1f}"
                  f"{total / (wall * workers):>7.0%}{max(0.0, wall - total / workers):>15.1f}"
                  f"  {', '.join(f'{n} {s}' for s, n in sorted(statuses.items()))}")
            traces[mode] = {e["name"]: (out / e["name"] / "trace.json").read_bytes()
                            for e in entries if e["status"] == "ok"}
            indexes[mode] = entries
        first = next(iter(indexes))
        print(f"\nwhere the time goes ({first}): per family, member seconds (each in its own process)")
        print(f"{'family':<16}{'members':>8}{'total s':>9}{'median s':>10}{'max s':>8}  largest")
        for family in FAMILIES:
            rows = [e for e in indexes[first] if families.get(e["name"]) == family]
            if not rows:
                continue
            seconds = [e["seconds"] for e in rows]
            largest = max(rows, key=lambda e: e["seconds"])["name"]
            print(f"{family:<16}{len(rows):>8}{sum(seconds):>9.1f}{statistics.median(seconds):>10.2f}"
                  f"{max(seconds):>8.2f}  {largest}")
        slowest = sorted(indexes[first], key=lambda e: -e["seconds"])[:5]
        print("slowest members: " + ", ".join(f"{e['name']} {e['seconds']:.1f} s" for e in slowest))
        failed = [e for e in indexes[first] if e["status"] != "ok"]
        for e in failed:
            print(f"not ok: {e['name']}: {e['status']}: {e.get('message', '')[:160]}")
        modes = list(traces)
        common = set.intersection(*(set(traces[m]) for m in modes))
        same = all(traces[m][name] == traces[modes[0]][name] for m in modes[1:] for name in common)
        print(f"traces byte-identical across {', '.join(modes)}: {'yes' if same else 'NO'} "
              f"({len(common)} members finished in every mode)")
        return 0 if same else 1


if __name__ == "__main__":
    sys.exit(main())
