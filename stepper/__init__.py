"""stepper: curvature of a metric with every intermediate step recorded.

    >>> import stepper
    >>> derivation = stepper.derive("examples/compact_star_exterior.toml")   # or a stepper.Metric
    >>> derivation.quantity("christoffel")            # typeset in Jupyter; a mapping of components
    >>> derivation.verdict("ricci_flat")
    >>> audited = stepper.audit(derivation, [{"quantity": "scalar", "value": "0"}])
    >>> stepper.render(audited, "out/star", formats="pdf")
    >>> again = stepper.load_trace("out/star/trace.json")

The functions are documented in :mod:`stepper.api`.  Importing stepper is light: the engine, sympy and the
exporters load when first used.
"""

import sys
import types
from importlib import import_module

from .version import __version__  # noqa: E402
from .errors import InputError  # noqa: E402

#: Public names and the modules they come from, loaded on first use.
_LAZY = {
    "derive": "api", "audit": "api", "render": "api", "load_metric": "api", "load_trace": "api",
    "Metric": "metric", "Derivation": "record", "Step": "record", "Verdict": "record",
    "MatterRequest": "record", "AnsatzRequest": "record", "OrbitRequest": "record", "PlotRequest": "record",
    "FrameRequest": "record",
}


def __getattr__(name: str):
    if name in _LAZY:
        value = getattr(import_module(f".{_LAZY[name]}", __name__), name)
        globals()[name] = value
        return value
    try:  # a submodule, as ``stepper.chain`` was reachable after ``import stepper`` before
        return import_module(f".{name}", __name__)
    except ModuleNotFoundError as err:
        if err.name != f"{__name__}.{name}":
            raise
        raise AttributeError(f"module 'stepper' has no attribute {name!r}") from None


class _Package(types.ModuleType):
    """The package's module type: importing the submodule ``stepper.audit`` (which the import system then
    sets as an attribute of the package) must not hide the function ``stepper.audit``."""

    def __setattr__(self, name: str, value) -> None:
        if _LAZY.get(name) == "api" and isinstance(value, types.ModuleType):
            return  # the submodule stays reachable as sys.modules["stepper.<name>"] and by ``from stepper.<name> import``
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Package


def __dir__():
    return sorted(set(globals()) | set(_LAZY))


__all__ = ["InputError", "__version__", *_LAZY]
