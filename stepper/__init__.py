"""stepper: curvature of a metric with every intermediate step recorded.

    >>> from stepper import load_metric, derive
    >>> derivation = derive(load_metric("examples/compact_star_exterior.toml"))
    >>> derivation.results["christoffel"]["r,t,t"]
"""

from .version import __version__  # noqa: E402

from .chain import derive  # noqa: E402
from .record import Derivation  # noqa: E402
from .errors import InputError  # noqa: E402
from .metric import Metric  # noqa: E402


def load_metric(path):
    """Read a TOML metric file (see :mod:`stepper.metricfile`)."""
    from .metricfile import load_metric as _load
    return _load(path)


__all__ = ["Derivation", "InputError", "Metric", "derive", "load_metric", "__version__"]
