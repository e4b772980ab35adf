"""Exporters: one small class per output format, each reading the trace only.

* :class:`TraceExporter`    -> ``trace.json``
* :class:`ReportExporter`   -> ``report.tex``   (template ``latex/report.tex.j2``)
* :class:`AppendixExporter` -> ``appendix.tex`` (template ``latex/appendix.tex.j2``, no preamble)
* :class:`PdfExporter`      -> ``report.pdf``   (the report compiled by pdflatex in a temporary folder)
* :class:`NotebookExporter` -> ``derivation.ipynb``

Templates are Jinja2 files looked up first in the folders the user gives,
then in the project's ``templates/``; copy one there to restyle a report.
Delimiters are ``<% %>`` for statements, ``<< >>`` for values and
``<# #>`` for comments, so that LaTeX braces need no escaping.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path
from typing import Sequence

from .record import Derivation
from .trace import trace_json

def _project_templates() -> Path:
    """templates/ beside the package in a checkout, or where pip installed it."""
    beside = Path(__file__).resolve().parent.parent / "templates"
    if beside.is_dir():
        return beside
    return Path(sys.prefix) / "share" / "stepper" / "templates"


PROJECT_TEMPLATES = _project_templates()

#: pdflatex runs this many times so that links and bookmarks settle.
TEX_RUNS = 2


class TexMissing(Exception):
    """No TeX engine on this machine."""


class TexFailed(Exception):
    """pdflatex stopped with an error; ``log`` holds its log file."""

    def __init__(self, message: str, log: str):
        super().__init__(message)
        self.log = log


def template_environment(extra_folders: Sequence[Path] = (), filters: dict | None = None):
    """The Jinja2 environment of every template set (LaTeX and notebook): the user's folders first, then
    the project's templates/; ``filters`` adds an exporter's own filters."""
    import jinja2
    folders = [str(Path(f)) for f in extra_folders] + [str(PROJECT_TEMPLATES)]
    environment = jinja2.Environment(
        loader=jinja2.FileSystemLoader(folders),
        block_start_string="<%", block_end_string="%>",
        variable_start_string="<<", variable_end_string=">>",
        comment_start_string="<#", comment_end_string="#>",
        trim_blocks=True, lstrip_blocks=True, keep_trailing_newline=True,
        autoescape=False, undefined=jinja2.StrictUndefined,
    )
    environment.filters.update(filters or {})
    return environment


def latex_preamble() -> str:
    """The packages a report needs, assembled with pylatex."""
    from pylatex import Document, Package
    document = Document(documentclass="article", lmodern=True, textcomp=True, page_numbers=False,
                        geometry_options={"margin": "2.2cm"})
    document.packages.append(Package("amsmath"))
    document.packages.append(Package("amssymb"))
    document.packages.append(Package("microtype"))
    document.packages.append(Package("xcolor"))
    document.packages.append(Package("graphicx"))
    document.packages.append(Package("hyperref", options=["colorlinks", "linkcolor=blue!50!black",
                                                          "urlcolor=blue!50!black", "bookmarks=true",
                                                          "bookmarksnumbered=true"]))
    return document.dumps_packages()


class Exporter:
    """Base: a file name and how to turn a derivation into its contents."""

    file_name = ""
    binary = False

    def __init__(self, templates: Sequence[Path] = ()):
        self.templates = tuple(templates)

    def export(self, derivation: Derivation):
        raise NotImplementedError


class TraceExporter(Exporter):
    file_name = "trace.json"

    def export(self, derivation: Derivation) -> str:
        return trace_json(derivation)


DETAIL_LEVELS = ("summary", "condensed", "full")
"""How much of the derivation report.tex, report.pdf and appendix.tex show: ``summary`` the metric, the results,
verdicts, checks and audit without any step; ``condensed`` every step with its results but no general formula,
substitution or simplification; ``full`` everything.  A setting of the exporter, not of the trace."""


class _TemplateExporter(Exporter):
    template_name = ""

    def __init__(self, templates: Sequence[Path] = (), detail: str = "full"):
        super().__init__(templates)
        if detail not in DETAIL_LEVELS:
            raise ValueError(f"detail must be one of {', '.join(DETAIL_LEVELS)}")
        self.detail = detail

    def export(self, derivation: Derivation) -> str:
        from .report import report_model
        from .latex import display_formula
        environment = template_environment(self.templates, filters={"display": display_formula})
        template = environment.get_template(self.template_name)
        from .plots import report_plots
        return template.render(preamble=latex_preamble(), **self.settings(derivation), **report_model(derivation),
                               plots=report_plots(derivation))

    def settings(self, derivation: Derivation) -> dict:
        """Template variables of this output beyond the record's content."""
        return {"detail": self.detail}


class ReportExporter(_TemplateExporter):
    file_name = "report.tex"
    template_name = "latex/report.tex.j2"


HEADING_LEVELS = ("chapter", "section", "subsection")
"""Top heading levels an appendix may start at; each level's subdivision is the next one down."""

_SUBDIVISION = {"chapter": "section", "section": "subsection", "subsection": "subsubsection"}


class AppendixExporter(_TemplateExporter):
    """appendix.tex, to ``\\input`` into a paper.

    ``heading`` is its top heading level (one of HEADING_LEVELS; default section).  ``anchor_prefix``
    starts every link target it defines, so that several appendices live in one paper; by default
    :func:`default_anchor_prefix` of the metric, which differs from one metric to another.  ``detail`` is one
    of DETAIL_LEVELS, as for the report.
    """

    file_name = "appendix.tex"
    template_name = "latex/appendix.tex.j2"

    def __init__(self, templates: Sequence[Path] = (), heading: str = "section", anchor_prefix: str | None = None,
                 detail: str = "full"):
        super().__init__(templates, detail)
        if heading not in HEADING_LEVELS:
            raise ValueError(f"heading must be one of {', '.join(HEADING_LEVELS)}")
        self.heading = heading
        self.anchor_prefix = anchor_prefix

    def settings(self, derivation: Derivation) -> dict:
        prefix = self.anchor_prefix if self.anchor_prefix is not None else default_anchor_prefix(derivation)
        return {**super().settings(derivation), "section": self.heading, "subsection": _SUBDIVISION[self.heading],
                "anchor_prefix": prefix}


def default_anchor_prefix(derivation: Derivation) -> str:
    """``stepper-<title in letters and digits, at most 24>-<6 hex digits of the line element's hash>-``:
    the same for the same metric, different for different metrics even under one title."""
    import hashlib
    title = "".join(c for c in derivation.metric.title.lower() if c.isascii() and c.isalnum())[:24] or "metric"
    metric = derivation.metric
    identity = "\n".join([metric.title, str(metric.line_element or list(metric.matrix)), ",".join(metric.names)])
    return f"stepper-{title}-{hashlib.sha256(identity.encode('utf-8')).hexdigest()[:6]}-"


def valid_anchor_prefix(prefix: str) -> bool:
    """A prefix that is safe inside ``\\hypertarget{...}`` and a PDF name: letters, digits, ``-``, ``.``, ``:``."""
    return len(prefix) <= 64 and all(c.isascii() and (c.isalnum() or c in "-.:") for c in prefix)


def compile_latex(source: str, job: str = "report", files: dict[str, bytes] | None = None) -> tuple[bytes, str]:
    """Run pdflatex on ``source`` in a temporary folder, with ``files`` (the plots' figures, by plain file
    name) beside it; return (pdf bytes, log).

    TeX runs with shell escape disabled and with dates and the trailer id
    fixed, so the same source gives the same bytes.
    """
    engine = shutil.which("pdflatex")
    if engine is None:
        raise TexMissing("no TeX engine (pdflatex) found; install one, e.g. "
                         "'apt-get install texlive-latex-recommended texlive-fonts-recommended lmodern', "
                         "then run the command again (report.tex is written meanwhile)")
    environment = dict(os.environ, SOURCE_DATE_EPOCH=os.environ.get("SOURCE_DATE_EPOCH", "0"),
                       FORCE_SOURCE_DATE="1", TEXINPUTS="", openout_any="p", shell_escape="f")
    with tempfile.TemporaryDirectory(prefix="stepper-tex-") as folder:
        tex_file = Path(folder) / f"{job}.tex"
        tex_file.write_text(source, encoding="utf-8")
        for name, data in (files or {}).items():
            if Path(name).name != name or name.startswith("."):
                raise ValueError(f"a file beside the report must have a plain name, not {name!r}")
            (Path(folder) / name).write_bytes(data)
        log = ""
        for _ in range(TEX_RUNS):
            run = subprocess.run(
                [engine, "-no-shell-escape", "-interaction=nonstopmode", "-halt-on-error", f"{job}.tex"],
                cwd=folder, env=environment, stdin=subprocess.DEVNULL, capture_output=True, timeout=600)
            log_file = Path(folder) / f"{job}.log"
            log = (log_file.read_bytes() if log_file.exists() else run.stdout).decode("utf-8", errors="replace")
            if run.returncode != 0:
                raise TexFailed(f"pdflatex failed: {tex_error(log, f'{job}.tex')}", log)
        return (Path(folder) / f"{job}.pdf").read_bytes(), log


#: Plain words for TeX errors whose own message does not say what went wrong.
_TEX_ERROR_WORDS = {
    "Dimension too large": "a length grew beyond what TeX can hold, usually a line or formula far too long to set",
    "TeX capacity exceeded": "the document is too large or too deeply nested for TeX",
}


def tex_error(log: str, file_name: str = "report.tex") -> str:
    """The first error of a TeX log in one line: its "!" line, the input line it happened on (the "l.123"
    line after it), plain words for errors that need them, and how many lines were overfull (too wide for
    the page) before it."""
    lines = log.splitlines()
    start = next((i for i, line in enumerate(lines) if line.startswith("!")), None)
    if start is None:
        return "unknown TeX error (no error line in the log)"
    message = lines[start]
    numbers = [found.group(1) for found in map(re.compile(r"l\.(\d+) ").match, lines[start + 1:]) if found]
    if numbers:
        message += f" (on line {numbers[0]} of {file_name})"
    words = [plain for key, plain in _TEX_ERROR_WORDS.items() if key in message]
    overfull = sum(1 for line in lines[:start] if line.startswith(("Overfull \\hbox", "Overfull \\vbox")))
    if overfull:
        words.append(f"{overfull} overfull line{'s' if overfull > 1 else ''} (too wide for the page) before it")
    return message + "".join(f"; {w}" for w in words)


class PdfExporter(ReportExporter):
    file_name = "report.pdf"
    binary = True

    def export(self, derivation: Derivation) -> bytes:
        from .plots import plot_files
        pdf, self.log = compile_latex(super().export(derivation), files=plot_files(derivation))
        return pdf


class NotebookExporter(Exporter):
    file_name = "derivation.ipynb"

    def export(self, derivation: Derivation) -> str:
        from .notebook import notebook_text
        return notebook_text(derivation, list(self.templates))


EXPORTERS = {
    "trace": TraceExporter,
    "tex": ReportExporter,
    "appendix": AppendixExporter,
    "pdf": PdfExporter,
    "notebook": NotebookExporter,
}
