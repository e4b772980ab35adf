"""stepper from Python: derive, audit, render and load, as the command line does.

    >>> import stepper
    >>> d = stepper.derive("examples/round_sphere.toml")          # or a stepper.Metric
    >>> d.quantity("ricci")                                       # typeset in Jupyter
    >>> d = stepper.audit(d, [{"quantity": "scalar", "value": "2/a^2"}])
    >>> stepper.render(d, "out/sphere", formats="pdf,notebook")

Every function raises :class:`stepper.errors.InputError` with the command line's one-line message for bad
input.  :func:`render` writes through :func:`stepper.outputs.replace_output_set`, as ``stepper derive`` does:
the folder's previous output set is replaced in one step, or left as it was.
"""

from __future__ import annotations

import os
import warnings
from pathlib import Path
from typing import Iterable, Mapping, Sequence

from .errors import InputError

__all__ = ["audit", "derive", "load_metric", "load_trace", "render"]

_PATH_TYPES = (str, os.PathLike)


def load_metric(path: str | os.PathLike):
    """The :class:`~stepper.metric.Metric` of a TOML metric file (read safely: nothing is evaluated)."""
    from .metricfile import load_metric as read
    return read(path)


def load_trace(path: str | os.PathLike):
    """The :class:`~stepper.record.Derivation` a ``trace.json`` holds (read safely: expressions are built from
    the declared names only; anything stepper did not write is refused with a one-line error)."""
    if not isinstance(path, _PATH_TYPES):
        raise InputError(f"load_trace needs the path of a trace.json, not {type(path).__name__} "
                         "(stepper.trace.load_trace reads a trace's text)")
    from .trace import read_trace_file
    return read_trace_file(path)


def derive(metric, progress=None, arithmetic=None, curvature_invariants: bool = True, jobs: int = 1,
           time_limit: float | None = None):
    """Run the whole chain on ``metric`` (a :class:`~stepper.metric.Metric`, such as
    :meth:`Metric.from_matrix` gives, or the path of a metric file) and return the recorded
    :class:`~stepper.record.Derivation`.

    ``curvature_invariants`` False skips the Kretschmann scalar and the Weyl tensor (``--skip-invariants``);
    ``jobs`` processes share the largest stages (the results are the same for every number); ``time_limit``
    in seconds stops the run with :class:`stepper.errors.TimeLimitReached`."""
    from .record import MetricRecord
    if isinstance(metric, _PATH_TYPES):
        metric = load_metric(metric)
    elif not isinstance(metric, MetricRecord):
        raise InputError(f"derive needs a stepper.Metric or the path of a metric file, not {type(metric).__name__}")
    if isinstance(jobs, bool) or not isinstance(jobs, int) or jobs < 1:
        raise InputError("--jobs must be at least 1")
    from .chain import derive as run
    return run(metric, progress=progress, arithmetic=arithmetic, curvature_invariants=curvature_invariants,
               jobs=jobs, time_limit=time_limit)


def audit(derivation, claims, title: str | None = None):
    """A new derivation: ``derivation`` with every claim checked against it (the old one is not changed).

    ``claims`` is the path of a claims file (its metric must be the derivation's; ``derivation`` None derives
    it), or a list of claims written as a claims file's ``[[claim]]`` tables, such as
    ``{"quantity": "ricci", "component": "theta,theta", "value": "1"}`` (or ``"latex"`` instead of ``"value"``),
    or :class:`stepper.claims.Claim` values.  ``derivation.results["audit"]`` then says, claim by claim,
    whether it agrees, differs (with the correct value and the likely slip) or cannot be decided, and names
    the earliest wrong claim; :meth:`~stepper.record.Derivation.verdict` and the display show it."""
    from .claims import Claim, load_claims, read_claim
    from .record import Derivation
    if derivation is not None and not isinstance(derivation, Derivation):
        raise InputError(f"audit needs a derivation (from stepper.derive or stepper.load_trace), "
                         f"not {type(derivation).__name__}")
    if isinstance(claims, _PATH_TYPES):
        metric, file_title, read = load_claims(claims)
        if derivation is None:
            derivation = derive(metric)
        elif not _same_metric(metric, derivation.metric):
            raise InputError(f"{Path(claims).name} is about the metric '{metric.title}', not this derivation's "
                             f"'{derivation.metric.title}'")
        title = file_title if title is None else title
    else:
        if derivation is None:
            raise InputError("audit needs a derivation when the claims are not a claims file")
        if isinstance(claims, (Mapping, Claim)):
            claims = [claims]
        if not isinstance(claims, Iterable) or isinstance(claims, (str, bytes)):
            raise InputError("claims must be the path of a claims file or a list of claims")
        read = []
        for number, entry in enumerate(claims, start=1):
            if isinstance(entry, Claim):
                read.append(entry)
            elif isinstance(entry, Mapping):
                read.append(read_claim(number, dict(entry), derivation.metric))
            else:
                raise InputError(f"claim {number} must be a table such as {{\"quantity\": \"scalar\", \"value\": "
                                 f"\"0\"}}, not {type(entry).__name__}")
        if not read:
            raise InputError("no claims to audit")
        title = "Claims checked from Python" if title is None else title
    if not isinstance(title, str):
        raise InputError("'title' must be text")
    from .audit import audit as check, record_audit
    verdicts, earliest = check(derivation, read)
    return record_audit(derivation, title, verdicts, earliest)


def _same_metric(first, second) -> bool:
    return (tuple(c.name for c in first.coordinates) == tuple(c.name for c in second.coordinates)
            and first.matrix == second.matrix)


def render(derivation, folder: str | os.PathLike, formats: str | Sequence[str] | None = None,
           templates: str | os.PathLike | None = None, detail: str = "full", appendix_heading: str = "section",
           anchor_prefix: str | None = None) -> list[Path]:
    """Write the outputs of ``derivation`` (or of the ``trace.json`` at that path) into ``folder``, made from
    its trace as ``stepper render`` makes them: the same bytes as the command line.

    ``formats`` picks outputs from trace, tex, appendix, pdf, notebook (a list or "pdf,notebook"; default:
    all); ``templates`` a folder of templates overriding the project's; ``detail``, ``appendix_heading`` and
    ``anchor_prefix`` as the options of the same names.  The folder's previous output set is replaced in one
    step (:func:`stepper.outputs.replace_output_set`), or kept whole when anything fails.  Returns the paths
    written; without TeX there is no report.pdf, and a warning says so."""
    from .cli import kept_beside_trace, output_files, output_options
    from .exporters import DETAIL_LEVELS, HEADING_LEVELS
    from .outputs import SwapState, replace_output_set
    from .record import Derivation
    keep: tuple[str, ...] = ()
    if isinstance(derivation, _PATH_TYPES):
        trace_path = Path(derivation)
        derivation = load_trace(trace_path)
        keep = kept_beside_trace(trace_path, Path(folder)) if Path(folder).is_dir() else ()
    elif not isinstance(derivation, Derivation):
        raise InputError(f"render needs a derivation or the path of a trace.json, not {type(derivation).__name__}")
    if not isinstance(folder, _PATH_TYPES):
        raise InputError(f"render needs a folder to write into, not {type(folder).__name__}")
    if isinstance(formats, (list, tuple)):
        if not all(isinstance(f, str) for f in formats):
            raise InputError("formats must be names such as \"pdf\" or \"notebook\"")
        if not formats:
            raise InputError("no output format given (choose from trace, tex, appendix, pdf, notebook)")
        formats = ",".join(formats)
    elif formats is not None and not isinstance(formats, str):
        raise InputError("formats must be names such as \"pdf,notebook\"")
    if detail not in DETAIL_LEVELS:
        raise InputError(f"detail must be one of {', '.join(DETAIL_LEVELS)}, not {detail!r}")
    if appendix_heading not in HEADING_LEVELS:
        raise InputError(f"appendix_heading must be one of {', '.join(HEADING_LEVELS)}, not {appendix_heading!r}")
    out_dir = Path(folder)
    chosen, template_folders = output_options(formats, anchor_prefix, templates, out_dir)
    contents, problems = output_files(derivation, out_dir, chosen, template_folders, detail, appendix_heading,
                                      anchor_prefix)
    replace_output_set(out_dir, contents, keep=tuple(name for name in keep if name not in contents),
                       state=SwapState())
    for line in problems:
        warnings.warn(line.removeprefix("stepper: warning: "), RuntimeWarning, stacklevel=2)
    return [out_dir / name for name in contents]

