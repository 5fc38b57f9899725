"""gnflow: laminar flows of generalized Newtonian fluids through passages and gaps.

The Python API:

>>> import gnflow
>>> case = gnflow.Case.from_dict({
...     "fluid": {"model": "newtonian", "viscosity": "1 Pa*s"},
...     "geometry": {"shape": "pipe", "radius": "10 mm"},
...     "drive": {"pressure_gradient": "-8 kPa/m"}})
>>> results = gnflow.solve(case)
>>> round(results.summary()["flow_rate"] * 1e9, 3)   # pi R^4 (-G) / (8 mu), in mm^3/s
31415.927

The names below are imported on first use, so that ``gnflow --help`` and
``gnflow check`` do not pay for the finite element libraries.
"""

from __future__ import annotations

import importlib

__all__ = ["Case", "CaseError", "Results", "Solution", "load_case", "solve"]
__version__ = "0.1.0"

_HOMES = {"Case": "case", "load_case": "case", "CaseError": "errors", "Results": "results",
          "Solution": "solver"}


def solve(case, **options):
    """Solve a case and return its :class:`~gnflow.results.Results` (the solution and
    its derived quantities; ``.summary()`` is the dict of ``summary.json``). Keyword
    options go to :func:`gnflow.solver.solve` (``cells``, ``domain``, ``progress``)."""
    from .results import Results
    from .solver import solve as solve_flow
    return Results(solve_flow(case, **options))


def __getattr__(name):
    if name in _HOMES:
        value = getattr(importlib.import_module(f".{_HOMES[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'gnflow' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_HOMES))
