"""Read a metric from a TOML file, safely.

Keys (all text is parsed by :mod:`stepper.parse`, never evaluated)::

    title = "..."                       # optional, defaults to the file name
    notes = "..."                       # optional free text shown in reports
    coordinates = ["t", "r", ...]
    line_element = "..."                # either this ...
    components = [["...", ...], ...]    # ... or the full symmetric matrix
    [symbols]        name = "positive" | "negative" | "nonnegative" | "nonpositive" | "nonzero" | "real"
    [functions]      name = ["t", "r"]  # a free function and the coordinates it depends on
                     A = { of = ["r"], sign = "positive" }   # ... with a declared sign
                     m = { of = ["v"], sign = "nonnegative", derivative_sign = "nonnegative" }
                     u = { of = ["t", "x"], derivative_sign = { t = "positive" } }   # one per coordinate
    [abbreviations]  name = "expression" # may use earlier abbreviations

A free function's ``sign`` and ``derivative_sign`` (the sign of its first derivative) are one of
"positive", "nonnegative", "negative", "nonpositive" or "nonzero" and hold wherever the function is
defined.  They reach every decision that depends on signs: the energy conditions and the frame's squared
norms (``stepper.matter``), and the audit's zero tests (``stepper.identities``).  The list form declares a
function without assumptions (it is real, as is everything in a metric).

Optional requests beyond curvature::

    [matter]                     # the stress-energy tensor the metric requires
    units = "geometric"          # G = c = 1; or "physical": kappa = 8 pi G / c^4
    cosmological_constant = "0"  # an expression in declared symbols
    time = "t"                   # observers are normal to time = const (default: first coordinate)
    [matter.region]              # ranges for sampling undecided energy conditions
    r = ["3", "20"]
    [matter.model]               # declared matter: its T_ij, field equations and div T = 0
    kind = "perfect fluid"       # or "dust", "scalar field", "electromagnetic field"
    density = "rho"              # declared functions or expressions; also pressure, velocity = { t = ... },
    pressure = "p"               # field and potential (scalar field), vector_potential = { t = ... } (A_a)
    [ansatz]                     # solve G_ij + Lambda g_ij = 0 for free functions
    unknowns = ["A", "B"]
    cosmological_constant = "0"
    [orbit]                      # a geodesic integrated numerically in the notebook
    kind = "timelike"            # or "null"
    time = "t"                   # its rate follows from the normalisation (default: first coordinate)
    values = { M = "1" }
    start = { t = "0", r = "10", theta = "pi/2", phi = "0" }
    velocity = { r = "0", theta = "0", phi = "1/30" }
    span = "300"
    [[plot]]                     # a plot in the report and the notebook (as many as PLOT_LIMIT)
    quantity = "kretschmann"     # or a list; see PLOT_QUANTITIES
    along = "r"
    range = ["2", "12"]
    values = { M = "1", theta = "pi/2" }   # a number for every parameter; coordinates as needed
    shade = "null"               # optional: shade where this energy condition fails (needs [matter])
    [frame]                      # a frame of your own, checked and used instead of stepper's observers
    kind = "orthonormal"         # or "null": a null tetrad l, n, m
    index = "up"                 # components of vectors e^i; "down": of covectors e_i (raised by stepper)
    [frame.vectors]              # orthonormal: one vector per coordinate, named after it; the first is timelike
    t = { t = "1/sqrt(1 - 2*M/r)" }          # coordinates not listed have component 0
    r = { r = "sqrt(1 - 2*M/r)" }
    theta = { theta = "1/r" }
    phi = { phi = "1/(r*sin(theta))" }

With ``kind = "null"`` the vectors are ``l`` (required), ``n`` and ``m`` (optional): l and n real and null with
l.n = -1; m complex with m.m = 0, m.mbar = 1 and orthogonal to l and n, each component of m written as
``"text"`` (real) or ``["real part", "imaginary part"]``, e.g. ``m = { theta = "1/(sqrt(2)*r)", phi =
["0", "1/(sqrt(2)*r*sin(theta))"] }``.  Each vector's components must be rational functions of the metric's
symbols times one common square-root factor.  stepper records that the vectors are what they claim (exact
products), uses an orthonormal frame for the frame components and energy conditions of ``[matter]``, and
the null vectors for the null energy condition.
"""

from __future__ import annotations

import re
import stat
import tomllib
from pathlib import Path
from typing import Any

import sympy

from .errors import InputError
from .algebra import printer_stable
from .metric import AnsatzRequest, MatterRequest, Metric, OrbitRequest, _validate
from .record import FUNCTION_SIGN_WORDS, MODEL_KINDS, PLOT_SHADES, FrameRequest, FunctionSign, MatterModel, PlotRequest
from .quantities import QUANTITIES
from .parse import Vocabulary, check_identifier, parse_expression

ASSUMPTIONS = {
    "positive": {"positive": True},
    "negative": {"negative": True},
    "nonnegative": {"nonnegative": True},
    "nonpositive": {"nonpositive": True},
    "nonzero": {"nonzero": True},
    "real": {},
}

KNOWN_KEYS = ("title", "notes", "coordinates", "line_element", "components", "symbols", "functions",
              "abbreviations", "matter", "ansatz", "orbit", "plot", "frame")
MATTER_KEYS = ("units", "cosmological_constant", "time", "region", "model")
ANSATZ_KEYS = ("unknowns", "cosmological_constant")
ORBIT_KEYS = ("kind", "time", "values", "start", "velocity", "span")
PLOT_KEYS = ("quantity", "along", "range", "values", "shade")
#: What a [[plot]] may draw: the registry's scalar results, and "pressure" for the principal pressures.
#: Without indices in the registry but not one real function to draw: a set of vectors, five complex scalars.
NOT_PLOTTED = ("null_tetrad", "weyl_scalars")
PLOT_QUANTITIES = tuple(q.name for q in QUANTITIES.values() if q.rank == 0 and q.name not in NOT_PLOTTED) + ("pressure",)
#: Most [[plot]] tables a metric file may hold (each is evaluated at a few hundred points).
PLOT_LIMIT = 12
UNITS = ("geometric", "physical")


def load_metric(path: str | Path) -> Metric:
    """Read and check a metric file; every problem is an :class:`InputError`."""
    path = Path(path)
    return metric_from_data(read_toml(path), default_title=path.stem)


MAX_INPUT_BYTES = 1024 * 1024
"""Largest metric or claims file read, in bytes (a metric of dimension 10 with long components is far smaller)."""


def read_input_file(path: Path, limit: int = MAX_INPUT_BYTES) -> bytes:
    """The bytes of the regular file at ``path``, refused with a one-line :class:`InputError` when it is
    missing, a folder, a device or pipe (``/dev/zero`` would never end) or larger than ``limit``."""
    try:
        info = path.stat()
    except FileNotFoundError:
        raise InputError(f"cannot read {path}: no such file") from None
    except OSError as err:
        raise InputError(f"cannot read {path}: {err.strerror or err}") from None
    if stat.S_ISDIR(info.st_mode):
        raise InputError(f"cannot read {path}: it is a folder")
    if not stat.S_ISREG(info.st_mode):
        raise InputError(f"cannot read {path}: not a regular file (a device, pipe or socket)")
    if info.st_size > limit:
        raise InputError(f"cannot read {path}: larger than {limit // 1024} KiB, far more than a metric or "
                         "claims file needs")
    try:
        with open(path, "rb") as handle:
            raw = handle.read(limit + 1)
    except OSError as err:
        raise InputError(f"cannot read {path}: {err.strerror or err}") from None
    if len(raw) > limit:
        raise InputError(f"cannot read {path}: larger than {limit // 1024} KiB")
    return raw


def read_toml(path: str | Path) -> dict[str, Any]:
    """The table in the TOML file at ``path``.

    A missing or unreadable file, a folder, text that is not UTF-8, an empty
    file and invalid TOML each raise a one-line :class:`InputError` naming
    the file.
    """
    path = Path(path)
    raw = read_input_file(path)
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(f"{path} is not UTF-8 text") from None
    if not text.strip():
        raise InputError(f"{path} is empty")
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise InputError(f"{path} is not valid TOML: {err}{_prime_in_literal_hint(text)}") from None


_LITERAL_WITH_PRIME = re.compile(r"^\s*(?P<key>[A-Za-z0-9_-]+)\s*=\s*'(?!'')(?P<value>.*'.*?)'\s*(?:#.*)?$")
"""A line ``key = 'a'(t)'``: a literal string '...' ends at its second quote, so it cannot hold a prime."""


def _prime_in_literal_hint(text: str) -> str:
    """Advice for the first line whose literal string '...' holds a prime, the usual cause of invalid TOML
    in a claims file with LaTeX such as a'(t)."""
    for number, line in enumerate(text.splitlines(), start=1):
        found = _LITERAL_WITH_PRIME.match(line)
        if found:
            triple = "'" * 3
            return (f" (line {number}: a literal string '...' cannot hold a prime; write a triple-quoted literal "
                    f"string: {found['key']} = {triple}{found['value']}{triple})")
    return ""


def _text(data: dict, key: str, default: str | None = None) -> str | None:
    value = data.get(key, default)
    if value is not None and not isinstance(value, str):
        raise InputError(f"'{key}' must be text")
    return value


def _table(data: dict, key: str) -> dict:
    value = data.get(key, {})
    if not isinstance(value, dict):
        raise InputError(f"'{key}' must be a table, e.g. [{key}]")
    return value


def metric_from_data(data: dict[str, Any], default_title: str = "Untitled metric") -> Metric:
    """Build a metric from already-decoded TOML data."""
    unknown = [k for k in data if k not in KNOWN_KEYS]
    if unknown:
        raise InputError(f"unknown key '{unknown[0]}' (known keys: {', '.join(KNOWN_KEYS)})")
    title = _text(data, "title", default_title)
    notes = _text(data, "notes", "")

    names = data.get("coordinates")
    if names is None:
        raise InputError("missing 'coordinates', e.g. coordinates = [\"t\", \"r\"]")
    if not isinstance(names, list) or not all(isinstance(n, str) for n in names):
        raise InputError("'coordinates' must be a list of names")
    seen: set[str] = set()
    for name in names:
        check_identifier(name, "coordinates")
        if name in seen:
            raise InputError(f"coordinate '{name}' is declared twice")
        seen.add(name)
    if len(names) < 2:
        raise InputError("a metric needs at least 2 coordinates")

    declared = _table(data, "symbols")
    for name, word in declared.items():
        check_identifier(name, "symbols")
        if not isinstance(word, str) or word not in ASSUMPTIONS:
            raise InputError(f"symbol '{name}': unknown assumption {word!r} (use one of {', '.join(ASSUMPTIONS)})")
    coordinates = tuple(sympy.Symbol(n, real=True, **ASSUMPTIONS[declared.get(n, "real")]) for n in names)
    parameters = tuple(sympy.Symbol(n, real=True, **ASSUMPTIONS[w]) for n, w in declared.items() if n not in names)
    symbols = {s.name: s for s in coordinates + parameters}

    functions: dict[str, sympy.Expr] = {}
    function_signs: list[FunctionSign] = []
    for name, entry in _table(data, "functions").items():
        check_identifier(name, "functions")
        if name in symbols:
            raise InputError(f"'{name}' is declared both as a symbol and as a function")
        args, signs = _function_entry(name, entry)
        for a in args:
            if a not in names:
                raise InputError(f"function '{name}' depends on '{a}', which is not a coordinate")
        if len(set(args)) != len(args):
            raise InputError(f"function '{name}' lists an argument twice")
        functions[name] = sympy.Function(name)(*(symbols[a] for a in args))
        function_signs += signs

    differentials = {f"d{c.name}": sympy.Symbol(f"d{c.name}") for c in coordinates}
    clash = [n for n in list(symbols) + list(functions) if n in differentials]
    if clash:
        raise InputError(f"the name '{clash[0]}' clashes with the differential of coordinate '{clash[0][1:]}'")

    abbreviations: dict[str, sympy.Expr] = {}
    for name, text in _table(data, "abbreviations").items():
        check_identifier(name, "abbreviations")
        if name in symbols or name in functions:
            raise InputError(f"abbreviation '{name}' reuses a declared name")
        if name in differentials:
            raise InputError(f"the name '{name}' clashes with the differential of coordinate '{name[1:]}'")
        if not isinstance(text, str):
            raise InputError(f"abbreviation '{name}' must be text")
        vocabulary = Vocabulary(symbols, functions, dict(abbreviations))
        abbreviations[name] = parse_expression(text, vocabulary, f"abbreviations.{name}")

    vocabulary = Vocabulary(symbols, functions, abbreviations)
    has_line, has_matrix = "line_element" in data, "components" in data
    if has_line == has_matrix:
        raise InputError("give exactly one of 'line_element' and 'components'")
    line_expression = None
    if has_line:
        line = _text(data, "line_element")
        line_expression = line_element_expression(line, coordinates, vocabulary, differentials)
        matrix = matrix_of_line_element(line_expression, coordinates, differentials)
    else:
        line = None
        matrix = matrix_from_components(data["components"], coordinates, vocabulary)
    _validate(coordinates, matrix)
    used = set().union(*(e.free_symbols for e in matrix))
    requests = {}
    if "matter" in data:
        requests["matter"] = _matter_request(_table(data, "matter"), coordinates, symbols, functions)
    if "ansatz" in data:
        requests["ansatz"] = _ansatz_request(_table(data, "ansatz"), coordinates, symbols, functions, matrix)
    if "orbit" in data:
        requests["orbit"] = _orbit_request(_table(data, "orbit"), coordinates, symbols, functions, used)
    if "plot" in data:
        requests["plots"] = _plot_requests(data["plot"], coordinates, symbols, functions, used,
                                           requests.get("matter"))
    if "frame" in data:
        requests["frame"] = _frame_request(_table(data, "frame"), coordinates, vocabulary)
    return Metric(
        coordinates=coordinates,
        matrix=matrix,
        title=title,
        parameters=tuple(p for p in parameters if p in used or any(p in a.free_symbols for a in abbreviations.values())),
        functions=tuple(functions.values()),
        abbreviations=tuple(abbreviations.items()),
        line_element=line,
        line_element_expression=None if line_expression is None else printer_stable(line_expression),
        notes=notes,
        assumptions=tuple((n, declared.get(n, "real")) for n in list(names) + [p.name for p in parameters]),
        function_signs=tuple(function_signs),
        **requests,
    )


FUNCTION_KEYS = ("of", "sign", "derivative_sign")


def _function_entry(name: str, entry) -> tuple[list[str], list[FunctionSign]]:
    """The arguments of a function declared in [functions] and its declared signs.

    ``name = ["t", "r"]`` (no sign), or a table ``name = { of = [...], sign = "...", derivative_sign = ... }``
    where ``derivative_sign`` is a word for a function of one coordinate and a table {coordinate = word}
    for a function of several."""
    example = f'{name} = {{ of = ["r"], sign = "positive" }}'
    if isinstance(entry, list):
        args, table = entry, {}
    elif isinstance(entry, dict):
        unknown = [k for k in entry if k not in FUNCTION_KEYS]
        if unknown:
            raise InputError(f"function '{name}': unknown key '{unknown[0]}' (known keys: {', '.join(FUNCTION_KEYS)})")
        if "of" not in entry:
            raise InputError(f"function '{name}' needs 'of', the coordinates it depends on, e.g. {example}")
        args, table = entry["of"], entry
    else:
        raise InputError(f"function '{name}' needs a non-empty list of coordinate names, e.g. {name} = [\"t\"] "
                         f"or {example}")
    if not isinstance(args, list) or not args or not all(isinstance(a, str) for a in args):
        raise InputError(f"function '{name}' needs a non-empty list of coordinate names, e.g. {name} = [\"t\"]")
    signs = []
    if "sign" in table:
        signs.append(FunctionSign(name, _sign_word(table["sign"], f"function '{name}': sign")))
    if "derivative_sign" in table:
        given = table["derivative_sign"]
        if isinstance(given, str):
            if len(args) != 1:
                raise InputError(f"function '{name}' depends on {', '.join(args)}: give one derivative sign per "
                                 f"coordinate, e.g. derivative_sign = {{ {args[0]} = \"positive\" }}")
            signs.append(FunctionSign(name, _sign_word(given, f"function '{name}': derivative_sign"), args[0]))
        elif isinstance(given, dict):
            for along, word in given.items():
                if along not in args:
                    raise InputError(f"function '{name}': derivative_sign names '{along}', which is not one of "
                                     f"its arguments ({', '.join(args)})")
                signs.append(FunctionSign(name, _sign_word(word, f"function '{name}': derivative_sign.{along}"), along))
        else:
            raise InputError(f"function '{name}': derivative_sign must be a sign word such as \"nonnegative\" "
                             "(or, for a function of several coordinates, a table of them)")
    return list(args), signs


def _sign_word(word, where: str) -> str:
    if not isinstance(word, str) or word not in FUNCTION_SIGN_WORDS:
        raise InputError(f"{where}: unknown sign {word!r} (use one of {', '.join(FUNCTION_SIGN_WORDS)})")
    return word


def _check_keys(table: dict, known: tuple[str, ...], where: str) -> None:
    unknown = [k for k in table if k not in known]
    if unknown:
        raise InputError(f"unknown key '{unknown[0]}' in [{where}] (known keys: {', '.join(known)})")


def _constant_expression(table: dict, key: str, symbols: dict, where: str, coordinates=()) -> sympy.Expr:
    """An expression in declared parameters only (no coordinates, no free functions)."""
    text = table.get(key, "0")
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        text = repr(text)
    if isinstance(text, sympy.Basic):  # from Python (Metric.from_matrix): an exact expression already
        value = text
    elif not isinstance(text, str):
        raise InputError(f"'{where}.{key}' must be text")
    else:
        value = parse_expression(text, Vocabulary(symbols, {}, {}), f"{where}.{key}")
    bad = [s.name for s in value.free_symbols if s in set(coordinates)]
    if bad:
        raise InputError(f"'{where}.{key}' must be a constant, but it uses the coordinate '{bad[0]}'")
    return value


def _coordinate(table: dict, key: str, coordinates, where: str) -> sympy.Symbol:
    """The named coordinate; by default the one called t, else the first."""
    names = [c.name for c in coordinates]
    name = table.get(key, "t" if "t" in names else names[0])
    if not isinstance(name, str) or name not in names:
        raise InputError(f"'{where}.{key}' must be one of the coordinates ({', '.join(names)})")
    return coordinates[names.index(name)]


def _matter_request(table: dict, coordinates, symbols: dict, functions: dict) -> MatterRequest:
    _check_keys(table, MATTER_KEYS, "matter")
    units = table.get("units", "geometric")
    if units not in UNITS:
        raise InputError(f"'matter.units' must be one of {', '.join(UNITS)}, not {units!r}")
    symbols = dict(symbols)
    newton = light = None
    if units == "physical":
        for name in ("G", "c"):
            if name in functions or (name in symbols and symbols[name] in coordinates):
                raise InputError(f"matter.units = \"physical\" needs '{name}' for a constant, "
                                 "but it is already a coordinate or function")
            symbols.setdefault(name, sympy.Symbol(name, positive=True))
            if not symbols[name].is_positive:
                raise InputError(f"matter.units = \"physical\": '{name}' must be declared positive "
                                 "(or left undeclared, when stepper takes it positive)")
        newton, light = symbols["G"], symbols["c"]
    lam = _constant_expression(table, "cosmological_constant", symbols, "matter", coordinates)
    region = []
    ranges = _table(table, "region") if "region" in table else {}
    for name, bounds in ranges.items():
        if name not in symbols:
            raise InputError(f"matter.region: '{name}' is not a declared coordinate or symbol")
        if not (isinstance(bounds, list) and len(bounds) == 2):
            raise InputError(f"matter.region.{name} must be a pair [low, high], e.g. {name} = [\"1\", \"10\"]")
        low, high = (_number(b, symbols, f"matter.region.{name}") for b in bounds)
        if not low <= high:
            raise InputError(f"matter.region.{name}: the low end {low} is above the high end {high}")
        region.append((symbols[name], low, high))
    time = _coordinate(table, "time", coordinates, "matter")
    model = _matter_model(_table(table, "model"), coordinates, symbols, functions) if "model" in table else None
    return MatterRequest(time=time, units=units,
                         cosmological_constant=lam, newton=newton, light=light, region=tuple(region), model=model)


MODEL_KEYS = {"perfect fluid": ("kind", "density", "pressure", "velocity"),
              "dust": ("kind", "density", "velocity"),
              "scalar field": ("kind", "field", "potential"),
              "electromagnetic field": ("kind", "vector_potential")}


def _matter_model(table: dict, coordinates, symbols: dict, functions: dict) -> MatterModel:
    """[matter.model]: the matter the metric is to hold (see stepper/models.py).

    kind = "perfect fluid" (density, pressure, optional velocity), "dust" (density, optional velocity),
    "scalar field" (field, optional potential, an expression that may hold the field) or
    "electromagnetic field" (vector_potential = { t = "Q/r" }, lower components A_a, the others 0).
    velocity = { t = "..." , ... } gives u^a (upper components, the others 0); without it the fluid is at
    rest along the time coordinate, u^a = delta^a_t / sqrt(-g_tt)."""
    kind = table.get("kind")
    if kind not in MODEL_KINDS:
        raise InputError(f"'matter.model.kind' must be one of {', '.join(repr(k) for k in MODEL_KINDS)}, not {kind!r}")
    _check_keys(table, MODEL_KEYS[kind], f"matter.model ({kind})")
    vocabulary = Vocabulary(symbols, functions, {})
    names = [c.name for c in coordinates]

    def expression(key: str, required: bool) -> sympy.Expr | None:
        if key not in table:
            if required:
                raise InputError(f"matter.model ({kind}) needs '{key}', e.g. {key} = \"rho\" for a declared function")
            return None
        text = table[key]
        if not isinstance(text, str):
            raise InputError(f"'matter.model.{key}' must be text")
        return parse_expression(text, vocabulary, f"matter.model.{key}")

    def per_coordinate(key: str) -> tuple:
        if key not in table:
            return ()
        given = _table(table, key)
        for name in given:
            if name not in names:
                raise InputError(f"matter.model.{key}: '{name}' is not a coordinate ({', '.join(names)})")
            if not isinstance(given[name], str):
                raise InputError(f"'matter.model.{key}.{name}' must be text")
        if not given:
            raise InputError(f"matter.model.{key} needs at least one component")
        return tuple(parse_expression(given[n], vocabulary, f"matter.model.{key}.{n}") if n in given
                     else sympy.Integer(0) for n in names)

    if kind in ("perfect fluid", "dust"):
        density = expression("density", True)
        pressure = expression("pressure", True) if kind == "perfect fluid" else sympy.Integer(0)
        return MatterModel(kind, density=density, pressure=pressure, velocity=per_coordinate("velocity"))
    if kind == "scalar field":
        field = expression("field", True)
        return MatterModel(kind, field=field, potential=expression("potential", False) or sympy.Integer(0))
    potential = per_coordinate("vector_potential")
    if not potential:
        raise InputError("matter.model (electromagnetic field) needs 'vector_potential', e.g. "
                         "vector_potential = { t = \"-Q/r\" }")
    return MatterModel(kind, vector_potential=potential)


#: Region bounds and orbit values: a rational or a rational multiple of pi, at most this large.
NUMBER_MAGNITUDE_LIMIT = 10**6
NUMBER_DIGITS_LIMIT = 30


def _number(text, symbols: dict, where: str) -> sympy.Expr:
    """An exact real number: a rational such as "3", "-1/2", "0.25", or a rational multiple of pi
    such as "pi/2", at most a million in size."""
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        text = repr(text)
    if isinstance(text, sympy.Basic):  # from Python (Metric.from_matrix): an exact number already
        value = text
    elif not isinstance(text, str):
        raise InputError(f"{where} must be a number in quotes, e.g. \"1/2\"")
    else:
        value = parse_expression(text, Vocabulary({}, {}, {}), where)
    coefficient, rest = value.as_coeff_Mul()
    if not coefficient.is_Rational or rest not in (sympy.Integer(1), sympy.pi):
        raise InputError(f"{where} must be a rational number or a rational multiple of pi, not {text!r}")
    if len(str(abs(coefficient.p))) > NUMBER_DIGITS_LIMIT or len(str(coefficient.q)) > NUMBER_DIGITS_LIMIT \
            or abs(coefficient) * (4 if rest == sympy.pi else 1) > NUMBER_MAGNITUDE_LIMIT:
        raise InputError(f"{where} is too large: at most a million in size and {NUMBER_DIGITS_LIMIT} digits")
    return value


def _ansatz_request(table: dict, coordinates, symbols: dict, functions: dict, matrix) -> AnsatzRequest:
    _check_keys(table, ANSATZ_KEYS, "ansatz")
    names = table.get("unknowns", list(functions))
    if not isinstance(names, list) or not names or not all(isinstance(n, str) for n in names):
        raise InputError("'ansatz.unknowns' must be a non-empty list of declared function names")
    for name in names:
        if name not in functions:
            raise InputError(f"ansatz.unknowns: '{name}' is not a declared function (see [functions])")
        if not any(e.has(functions[name]) for e in matrix):
            raise InputError(f"ansatz.unknowns: the function '{name}' does not appear in the metric")
    lam = _constant_expression(table, "cosmological_constant", symbols, "ansatz", coordinates)
    return AnsatzRequest(unknowns=tuple(functions[n] for n in names), cosmological_constant=lam)


def _orbit_request(table: dict, coordinates, symbols: dict, functions: dict, used: set) -> OrbitRequest:
    _check_keys(table, ORBIT_KEYS, "orbit")
    if functions:
        raise InputError("[orbit] needs a metric without free functions")
    kind = table.get("kind", "timelike")
    if kind not in ("timelike", "null"):
        raise InputError(f"'orbit.kind' must be \"timelike\" or \"null\", not {kind!r}")
    names = [c.name for c in coordinates]
    parameters = sorted((s.name for s in used if s not in coordinates))

    def numbers(key: str, wanted: list[str]) -> tuple:
        given = _table(table, key)
        for name in given:
            if name not in wanted:
                raise InputError(f"orbit.{key}: '{name}' is not one of {', '.join(wanted) or 'nothing'}")
        missing = [w for w in wanted if w not in given]
        if missing:
            raise InputError(f"orbit.{key} is missing '{missing[0]}' (it needs {', '.join(wanted)})")
        return tuple((symbols[w], _number(given[w], symbols, f"orbit.{key}.{w}")) for w in wanted)

    time = _coordinate(table, "time", coordinates, "orbit")
    return OrbitRequest(time=time, kind=kind, values=numbers("values", parameters),
                        start=numbers("start", names), velocity=numbers("velocity", [n for n in names if n != time.name]),
                        span=_positive_span(table))


def _plot_requests(entries, coordinates, symbols: dict, functions: dict, used: set, matter) -> tuple:
    """The [[plot]] tables: quantity (a name or a list), along (a coordinate), range = [low, high] (exact
    numbers, low < high), values (an exact number for every parameter the plotted results may hold; other
    coordinates as needed) and an optional energy condition to shade."""
    if not isinstance(entries, list) or not all(isinstance(e, dict) for e in entries):
        raise InputError("'plot' must be an array of tables, each written [[plot]]")
    if len(entries) > PLOT_LIMIT:
        raise InputError(f"at most {PLOT_LIMIT} [[plot]] tables, not {len(entries)}")
    if entries and functions:
        raise InputError("[[plot]] needs a metric without free functions")
    names = [c.name for c in coordinates]
    plots = []
    for number, table in enumerate(entries, start=1):
        where = f"plot {number}"
        _check_keys(table, PLOT_KEYS, where)
        given = table.get("quantity")
        wanted = [given] if isinstance(given, str) else given
        if not isinstance(wanted, list) or not wanted or not all(isinstance(q, str) for q in wanted):
            raise InputError(f"{where}: 'quantity' must be one of {', '.join(PLOT_QUANTITIES)} (or a list of them)")
        for quantity in wanted:
            if quantity not in PLOT_QUANTITIES:
                raise InputError(f"{where}: cannot plot {quantity!r}; choose from {', '.join(PLOT_QUANTITIES)}")
            if QUANTITIES[quantity].requires == "matter" and matter is None:
                raise InputError(f"{where}: {quantity} needs a [matter] table")
        if len(set(wanted)) != len(wanted):
            raise InputError(f"{where}: 'quantity' names a quantity twice")
        along = table.get("along")
        if not isinstance(along, str) or along not in names:
            raise InputError(f"{where}: 'along' must be one of the coordinates ({', '.join(names)})")
        bounds = table.get("range")
        if not (isinstance(bounds, list) and len(bounds) == 2):
            raise InputError(f"{where}: 'range' must be a pair [low, high], e.g. range = [\"2\", \"12\"]")
        low, high = (_number(b, symbols, f"{where}.range") for b in bounds)
        if not low < high:
            raise InputError(f"{where}: the low end {low} of the range is not below the high end {high}")
        needed = sorted(s.name for s in used if s not in coordinates)
        if matter is not None and any(QUANTITIES[q].requires == "matter" for q in wanted):
            extra = matter.cosmological_constant.free_symbols | {s for s in (matter.newton, matter.light) if s}
            needed += sorted(s.name for s in extra if s.name not in needed and s not in coordinates)
        allowed = needed + [n for n in names if n != along]
        values = _table(table, "values")
        for name in values:
            if name not in allowed:
                raise InputError(f"{where}.values: '{name}' is not one of {', '.join(allowed)}")
        missing = [n for n in needed if n not in values]
        if missing:
            raise InputError(f"{where}.values is missing '{missing[0]}' (it needs {', '.join(needed)})")
        known = {**symbols, **({s.name: s for s in (matter.newton, matter.light) if s} if matter else {})}
        known.update({s.name: s for s in (matter.cosmological_constant.free_symbols if matter else ())})
        pairs = tuple((known[n], _number(values[n], symbols, f"{where}.values.{n}")) for n in allowed if n in values)
        shade = table.get("shade", "")
        if shade != "" and shade not in PLOT_SHADES:
            raise InputError(f"{where}: 'shade' must be one of {', '.join(PLOT_SHADES)}, not {shade!r}")
        if shade and matter is None:
            raise InputError(f"{where}: 'shade' needs a [matter] table (the energy conditions)")
        plots.append(PlotRequest(quantities=tuple(wanted), along=symbols[along], low=low, high=high, values=pairs,
                                 shade=shade))
    return tuple(plots)


def _positive_span(table: dict) -> sympy.Expr:
    span = _number(table.get("span", "100"), {}, "orbit.span")
    if not span.is_positive:
        raise InputError(f"orbit.span must be positive, not {span}")
    return span


_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")


def _check_differentials(text: str, coordinates, vocabulary: Vocabulary, differentials: dict) -> None:
    """Name a differential of an undeclared coordinate before the parser calls it unknown."""
    known = set(vocabulary.symbols) | set(vocabulary.functions) | set(vocabulary.abbreviations) | set(differentials)
    for match in _NAME.finditer(text):
        word = match.group()
        if word.startswith("d") and len(word) > 1 and word not in known and word[1:] not in known:
            if not any(word == f"d{c.name}" for c in coordinates):
                raise InputError(f"'{word}' at column {match.start() + 1} of line_element is the differential of "
                                 f"'{word[1:]}', which is not a declared coordinate")


def line_element_expression(text: str, coordinates, vocabulary: Vocabulary, differentials: dict) -> sympy.Expr:
    """The line element read as an expression in the differentials (symbols d<coordinate>)."""
    _check_differentials(text, coordinates, vocabulary, differentials)
    with_differentials = Vocabulary(vocabulary.symbols, vocabulary.functions, vocabulary.abbreviations, differentials)
    return parse_expression(text, with_differentials, "line_element")


def matrix_from_line_element(text: str, coordinates, vocabulary: Vocabulary, differentials: dict) -> sympy.ImmutableMatrix:
    """g_ij from ds^2 = g_ij dx^i dx^j (see :func:`matrix_of_line_element`)."""
    return matrix_of_line_element(line_element_expression(text, coordinates, vocabulary, differentials),
                                  coordinates, differentials)


def matrix_of_line_element(expr: sympy.Expr, coordinates, differentials: dict) -> sympy.ImmutableMatrix:
    """g_ij from ds^2 = g_ij dx^i dx^j: g_ii is the coefficient of (dx^i)^2 and
    g_ij = g_ji is half the coefficient of dx^i dx^j."""
    d = [differentials[f"d{c.name}"] for c in coordinates]
    degree = _differential_degree(expr, frozenset(d))
    if degree != 2:
        raise InputError(f"line_element has {degree} differentials in every term; "
                         "every term must have exactly 2")
    index = {s: i for i, s in enumerate(d)}
    n = len(coordinates)
    coefficient = [[sympy.Integer(0)] * n for _ in range(n)]
    for term in sympy.Add.make_args(sympy.expand(expr)):
        factors = []
        rest = []
        for factor in sympy.Mul.make_args(term):
            base, exp = factor.as_base_exp()
            if base in index and exp.is_Integer and exp > 0:
                factors += [index[base]] * int(exp)
            elif factor.free_symbols & set(d):
                raise InputError(f"line_element: the term {term} is not quadratic in the differentials "
                                 f"(a differential appears inside {factor})")
            else:
                rest.append(factor)
        if len(factors) != 2:
            raise InputError(f"line_element: the term {term} has {len(factors)} differentials; "
                             "every term must have exactly 2")
        i, j = sorted(factors)
        coefficient[i][j] += sympy.Mul(*rest)
    g = [[sympy.Integer(0)] * n for _ in range(n)]
    for i in range(n):
        for j in range(i, n):
            value = coefficient[i][j] if i == j else coefficient[i][j] / 2
            value = sympy.factor(sympy.together(value)) if value != 0 else value
            g[i][j] = g[j][i] = value
    return sympy.ImmutableMatrix([[printer_stable(e) for e in row] for row in g])


def _differential_degree(expr: sympy.Expr, differentials: frozenset) -> int:
    """The degree of ``expr`` in the differentials, found without expanding it
    (so that a large power of a sum is refused before any work is done)."""
    if not expr.free_symbols & differentials:
        return 0
    if expr in differentials:
        return 1
    if isinstance(expr, sympy.Add):
        degrees = [_differential_degree(term, differentials) for term in expr.args]
        if len(set(degrees)) != 1:
            wanted = 2 if 2 in degrees else max(degrees)
            offending, count = next((t, k) for t, k in zip(expr.args, degrees) if k != wanted)
            raise InputError(f"line_element: the term {_brief(offending)} has {count} differentials; "
                             "every term must have exactly 2")
        return degrees[0]
    if isinstance(expr, sympy.Mul):
        return sum(_differential_degree(f, differentials) for f in expr.args)
    if isinstance(expr, sympy.Pow) and expr.exp.is_Integer and expr.exp > 0:
        return int(expr.exp) * _differential_degree(expr.base, differentials)
    raise InputError(f"line_element is not quadratic in the differentials: a differential appears inside "
                     f"{_brief(expr)}")


def _brief(expr: sympy.Expr) -> str:
    text = str(expr)
    return text if len(text) <= 60 else text[:57] + "..."


def matrix_from_components(rows, coordinates, vocabulary: Vocabulary) -> sympy.ImmutableMatrix:
    """The full symmetric matrix, each entry an expression (or a number)."""
    n = len(coordinates)
    if not isinstance(rows, list) or not all(isinstance(r, list) for r in rows):
        raise InputError("'components' must be a list of rows, e.g. [[\"-1\", \"0\"], [\"0\", \"1\"]]")
    if len(rows) != n or any(len(r) != len(rows) for r in rows):
        shape = f"{len(rows)} rows of lengths {', '.join(str(len(r)) for r in rows)}"
        if any(len(r) != len(rows) for r in rows):
            raise InputError(f"'components' is not a square matrix ({shape})")
        raise InputError(f"'components' is {len(rows)} x {len(rows)} but there are {n} coordinates")
    g = []
    for i, row in enumerate(rows):
        out = []
        for j, entry in enumerate(row):
            where = f"components[{i + 1}][{j + 1}]"
            if isinstance(entry, bool) or not isinstance(entry, (str, int, float)):
                raise InputError(f"{where} must be an expression in quotes or a number")
            if isinstance(entry, float):
                entry = repr(entry)
            out.append(parse_expression(str(entry), vocabulary, where))
        g.append(out)
    for i in range(n):
        for j in range(i + 1, n):
            if sympy.cancel(g[i][j] - g[j][i]) != 0:
                raise InputError(f"'components' is not symmetric: entry [{i + 1}][{j + 1}] differs from [{j + 1}][{i + 1}]")
    return sympy.ImmutableMatrix([[printer_stable(e) for e in row] for row in g])


FRAME_KEYS = ("kind", "index", "vectors")
FRAME_KINDS = ("orthonormal", "null")
NULL_TETRAD_NAMES = ("l", "n", "m")


def _frame_request(table: dict, coordinates, vocabulary: Vocabulary) -> FrameRequest:
    """The [frame] table: kind, index and one table of components per vector (read with stepper.parse)."""
    _check_keys(table, FRAME_KEYS, "frame")
    kind = table.get("kind", "orthonormal")
    if kind not in FRAME_KINDS:
        raise InputError(f"'frame.kind' must be \"orthonormal\" or \"null\", not {kind!r}")
    index = table.get("index", "up")
    if index not in ("up", "down"):
        raise InputError(f"'frame.index' must be \"up\" (vector components) or \"down\" (covector components), "
                         f"not {index!r}")
    names = [c.name for c in coordinates]
    given = _table(table, "vectors")
    if not given:
        raise InputError("[frame] needs [frame.vectors], e.g. t = { t = \"1\" } for each vector")
    if kind == "orthonormal":
        wanted = names
        for label in given:
            if label not in names:
                raise InputError(f"frame.vectors: '{label}' is not a coordinate (an orthonormal frame names each "
                                 f"vector after a coordinate: {', '.join(names)})")
        missing = [n for n in names if n not in given]
        if missing:
            raise InputError(f"frame.vectors is missing '{missing[0]}' (an orthonormal frame needs one vector per "
                             "coordinate, the first listed timelike)")
    else:
        wanted = list(NULL_TETRAD_NAMES)
        for label in given:
            if label not in wanted:
                raise InputError(f"frame.vectors: '{label}' is not one of l, n, m (a null tetrad)")
        if "l" not in given:
            raise InputError("frame.vectors needs 'l', a null vector, when frame.kind = \"null\"")
    vectors = []
    for label, entries in given.items():
        where = f"frame.vectors.{label}"
        if not isinstance(entries, dict) or not entries:
            raise InputError(f"{where} must be a table of components, e.g. {label} = {{ {names[0]} = \"1\" }}")
        components = [sympy.Integer(0)] * len(names)
        for coordinate, text in entries.items():
            if coordinate not in names:
                raise InputError(f"{where}: '{coordinate}' is not a coordinate")
            components[names.index(coordinate)] = _frame_component(text, vocabulary, f"{where}.{coordinate}",
                                                                   complex_allowed=(label == "m"))
        if all(c == 0 for c in components):
            raise InputError(f"{where}: every component is zero")
        vectors.append((label, tuple(components)))
    return FrameRequest(kind=kind, vectors=tuple(vectors), index=index)


def _frame_component(text, vocabulary: Vocabulary, where: str, complex_allowed: bool) -> sympy.Expr:
    """One component: an expression in quotes (or a number), or for m a pair [real part, imaginary part]."""
    if isinstance(text, list):
        if not complex_allowed:
            raise InputError(f"{where}: only m may have complex components ([real part, imaginary part])")
        if len(text) != 2:
            raise InputError(f"{where} must be [\"real part\", \"imaginary part\"]")
        real, imaginary = (_frame_component(t, vocabulary, where, False) for t in text)
        return printer_stable(real + sympy.I * imaginary)
    if isinstance(text, sympy.Basic):  # from Python (Metric.from_matrix): an exact expression already
        if text.has(sympy.I) and not complex_allowed:
            raise InputError(f"{where}: only m may have complex components ([real part, imaginary part])")
        return printer_stable(text)
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        text = repr(text)
    if not isinstance(text, str):
        raise InputError(f"{where} must be an expression in quotes")
    return printer_stable(parse_expression(text, vocabulary, where))
