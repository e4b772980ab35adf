"""The notebook's helper for the geodesic equations: du^a/dtau from the recorded Christoffel symbols.

Inlined into derivation.ipynb (the part between the marker lines) whenever the derivation records the
geodesic equations; importable here for unit tests.
"""

import sympy as sp  # noqa: F401

from stepper.runtime.core import *  # noqa: F401,F403  (the notebook defines these before this part)

# ---- inlined into the notebook from here ----
# ---------------------------------------------------------------------------
# Geodesics
# ---------------------------------------------------------------------------

def geodesic_from_christoffel(a):
    """du^a/dtau = -Gamma^a_bc u^b u^c, summed over all b and c."""
    return -sum((component(christoffel, a, b, c) * velocity[b] * velocity[c]
                 for b in index_names for c in index_names), sp.S.Zero)


# The velocity symbols u^x and the recorded accelerations, filled in by the geodesic cell.
velocity, geodesic_acceleration = {}, {}
# ---- to here ----
