"""What a solve returns: the fields, the model as solved and the convergence history."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .. import rheology
from ..case import Case
from ..geometry import Domain
from .assembly import Problem


@dataclass
class Iteration:
    iteration: int
    method: str
    residual: float
    step: float
    pressure_gradient: float
    regularisation_parameter: float | None = None


class _History(list):
    """The convergence history; each entry is also passed to a progress callback."""

    def __init__(self, progress=None):
        super().__init__()
        self.progress = progress

    def append(self, entry: Iteration) -> None:
        super().append(entry)
        if self.progress is not None:
            self.progress(entry)


@dataclass
class Solution:
    """The solved flow: the field ``u`` on ``domain.basis`` and how it was obtained."""

    case: Case
    domain: Domain
    model: rheology.Model            # the model as solved (with its regularisation)
    u: np.ndarray                    # axial velocity (m/s) or angular speed (rad/s) at dofs
    pressure_gradient: float         # dp/dz, Pa/m (0 for rotational flow)
    converged: bool
    iterations: int
    residual: float
    history: list[Iteration]
    message: str
    seconds: float = 0.0
    regularisation: dict | None = None
    warnings: list[str] = field(default_factory=list)
    rate_floor: float = 0.0
    linear_solver: dict = field(default_factory=dict)
    coarse: "Solution | None" = None   # the grid-sequencing solution this one started from
    _problem: "Problem | None" = field(default=None, repr=False)

    def problem(self) -> "Problem":
        """The discrete problem this solution solves (for post-processing)."""
        if self._problem is None:
            self._problem = Problem(self.domain, self.model)
            self._problem.rate_floor = self.rate_floor
        return self._problem
