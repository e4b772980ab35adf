"""The code the generated notebook runs, as real modules.

Each module holds, between two marker lines, the helper functions stepper inlines into the setup cell of
derivation.ipynb; :func:`inlined_source` returns that part.  The notebook stays self-contained plain sympy
(it never imports stepper), and the helpers are importable and unit-tested here like any other code.

The helpers call ``sp.sympify`` (strictly, through ``core.expression``, which refuses text) only to turn the values the notebook's cells bound (sympy expressions and
Python integers, printed by stepper as code) into sympy objects; no text ever reaches it.
"""

from __future__ import annotations

from pathlib import Path

START = "# ---- inlined into the notebook from here ----"
END = "# ---- to here ----"

#: The runtime modules, in the order the notebook inlines them.
MODULES = ("core", "matter", "ansatz", "geodesics", "petrov", "models")


def inlined_source(module: str) -> str:
    """The helpers of ``stepper/runtime/<module>.py`` that the notebook inlines (between the markers)."""
    if module not in MODULES:
        raise ValueError(f"no runtime module {module!r}")
    text = (Path(__file__).resolve().parent / f"{module}.py").read_text(encoding="utf-8")
    start = text.index(START + "\n") + len(START) + 1
    end = text.index("\n" + END)
    return text[start:end].strip("\n")
