"""gnflow: laminar flows of generalized Newtonian fluids through passages and gaps.

The Python API:

>>> import gnflow
>>> case = gnflow.Case.from_dict({
...     "fluid": {"model": "newtonian", "viscosity": "1 Pa*s"},
...     "geometry": {"shape": "pipe", "radius": "10 mm"},
...     "drive": {"pressure_gradient": "-8 kPa/m"}})
>>> solution = gnflow.solve(case)
>>> round(solution.summary()["flow_rate"] * 1e9, 3)   # pi R^4 (-G) / (8 mu), in mm^3/s
31415.927
"""

from .case import Case, load_case
from .errors import CaseError
from .solver import Solution, solve

__all__ = ["Case", "CaseError", "Solution", "load_case", "solve"]
__version__ = "0.1.0"
