"""One result object per solve: the solution and everything derived from it, computed once.

:func:`gnflow.solve` returns a :class:`Results`. The point fields, the wall distributions
and the summary are computed on first use and kept, so the summary, every output file and
every plot read the same numbers. Writers (:mod:`gnflow.export`) and plots
(:mod:`gnflow.plots`) only read a ``Results``; they never compute physics.

A ``Results`` also answers every attribute of its :class:`~gnflow.solver.Solution`
(``u``, ``case``, ``domain``, ``model``, ``history``, ...), so code written for a
solution keeps working:

>>> import gnflow
>>> case = gnflow.Case.from_dict({"fluid": {"model": "newtonian", "viscosity": 1.0},
...     "geometry": {"shape": "slit", "gap": 1.0}, "drive": {"pressure_gradient": 12.0}})
>>> results = gnflow.solve(case)
>>> results.summary()["flow_direction"], round(results.summary()["mean_velocity"], 9)
('-z', 1.0)
>>> results.u.shape == results.solution.u.shape
True
"""

from __future__ import annotations

import copy
from functools import cached_property

import numpy as np

from . import post
from .solver import Solution


class Results:
    """A solved flow and its derived quantities (SI units)."""

    def __init__(self, solution: Solution):
        self.solution = solution

    def __getattr__(self, name):
        # only called for names a Results does not have itself: those of the solution
        if name.startswith("__") or name == "solution":
            raise AttributeError(name)
        return getattr(self.solution, name)

    def __repr__(self) -> str:
        return f"Results({self.solution.case.title!r}, converged={self.converged})"

    @cached_property
    def fields(self) -> dict[str, np.ndarray]:
        """Point fields at the dofs (see :func:`gnflow.post.fields`)."""
        return post.fields(self.solution)

    @cached_property
    def wall_distributions(self) -> dict[str, dict[str, np.ndarray]]:
        """Per-wall stress and rate along the walls of a 2-D section; empty in 1-D."""
        if self.solution.domain.dimension == 1:
            return {}
        return post.wall_distributions(self.solution)

    @cached_property
    def _summary(self) -> dict:
        one_d = self.solution.domain.dimension == 1
        # plug edges and unyielded fractions are located on the point fields
        needs_fields = self.solution.model.is_yield_stress
        return post.summarise(self.solution, self.fields if needs_fields else None,
                              None if one_d else self.wall_distributions)

    def summary(self) -> dict:
        """The dict written to ``summary.json`` (a copy: callers may change it)."""
        return copy.deepcopy(self._summary)

    @property
    def converged(self) -> bool:
        """True when the solver met its tolerance and the summary passed its own checks
        (finite numbers, force or torque balance)."""
        return bool(self._summary["converged"])

    @property
    def message(self) -> str:
        return self._summary["message"]


def profile_columns(results: Results) -> tuple[list[str], np.ndarray]:
    """Header and rows of a 1-D profile, sorted across the gap, units in the names.

    ``velocity [m/s]`` is the axial speed of an axial flow (helical flow adds
    ``angular_speed [rad/s]`` and ``azimuthal_velocity [m/s]`` after it) and the azimuthal
    speed between coaxial cylinders; heated flow ends with ``temperature [K]``."""
    f = results.fields
    x = f["x"][0]
    order = np.argsort(x)
    coordinate = "y [m]" if results.domain.coordinate == "y" else "r [m]"
    if results.domain.kind == "axial":
        names = [coordinate, "velocity [m/s]"]
        columns = [x, f["velocity"]]
        if "azimuthal_velocity" in f:   # helical flow: the rotation beside the axial speed
            names += ["angular_speed [rad/s]", "azimuthal_velocity [m/s]"]
            columns += [f["angular_speed"], f["azimuthal_velocity"]]
    else:
        names = [coordinate, "angular_speed [rad/s]", "velocity [m/s]"]
        columns = [x, f["angular_speed"], f["velocity"]]
    names += ["shear_rate [1/s]", "viscosity [Pa*s]", "shear_stress [Pa]"]
    columns += [f["shear_rate"], f["viscosity"], f["shear_stress"]]
    if "temperature" in f:
        names.append("temperature [K]")
        columns.append(f["temperature"])
    return names, np.column_stack(columns)[order]


def as_results(solved) -> Results:
    """A :class:`Results` for a solution (or the same object if it already is one)."""
    return solved if isinstance(solved, Results) else Results(solved)


__all__ = ["Results", "as_results", "profile_columns"]
