"""Fluid definitions from measurements: fit flow-curve data to every viscosity model.

The workflow behind ``gnflow fit DATA.csv``:

1. :func:`read_flow_curve` reads a CSV flow curve whose header names each column with
   its unit in square brackets, ``shear_rate [1/s]`` and either ``shear_stress [Pa]`` or
   ``viscosity [mPa*s]``, optionally ``temperature [degC]``, into SI arrays.
2. :func:`fit_models` fits each model of :data:`gnflow.rheology.MODELS` by
   ``scipy.optimize.least_squares`` and ranks the fits by Akaike's information criterion.
3. :func:`write_fit_outputs` writes ``fit.json``, ``fluid.toml`` (a ``[fluid]`` fluid
   definition of the best model, ready for a case file) and ``fit.png``.
4. :func:`data_warnings` and :func:`fit_warnings` say where the data cannot be trusted to
   determine a model: too few points for its parameters, too narrow a span of shear
   rate, a parameter the data leave free, a column whose unit is odd for its meaning
   (a rotational speed given as a shear rate).

How the fit is posed, and why:

* Residuals are ``ln(tau_model) - ln(tau_data)``. Flow curves span decades of rate and
  stress, and a rheometer's error is roughly a fixed fraction of the reading, so
  logarithmic residuals weigh every decade alike and match the error model. They are the
  same whether the file gives stress or viscosity, because the rate is taken as exact.
* Parameters are fitted in a well-scaled space with bounds: positive scale parameters
  (viscosities, consistency, time constant, transition exponent) by their logarithm;
  exponents as they are; a yield stress divided by the median measured stress, bounded
  below by 0; an infinite-shear viscosity as a fraction 0..1 of the zero-shear viscosity,
  which keeps ``eta_inf <= eta_0``. Several starting points from the data (slopes of the
  flow curve, a grid of time constants, fractions of the lowest stress as yield stress)
  guard against local minima; the best is kept.
* Yield-stress models are fitted with their exact flow curve ``tau = tau_y + K rate^n``:
  the regularisation belongs to the flow solver, not to the fluid.
* With a temperature column and at least two temperatures, each model is fitted together
  with an Arrhenius shift by time-temperature superposition:
  ``tau(rate, T) = tau_ref(a_T * rate)`` (see :func:`gnflow.temperature.at_temperature`),
  the reference temperature being the median of the measured temperatures.
* 95 % confidence intervals come from the Jacobian at the optimum,
  ``cov = s^2 (J^T J)^-1`` with ``s^2 = SSR / (N - p)`` and Student's t with ``N - p``
  degrees of freedom, computed in the fitting space and mapped back (so an interval on a
  log-fitted parameter is multiplicative). A parameter the data do not determine (a
  singular direction of ``J``) gets no interval; one stopped at a bound is flagged.
* ``AIC = N ln(SSR / N) + 2 (p + 1)`` (Akaike 1974; the ``+ 1`` counts the error
  variance); lower is better. ``r2`` is the coefficient of determination of
  ``ln(tau)``; ``rms_relative_error`` is the root mean square of ``tau_model / tau_data - 1``.

>>> import numpy as np
>>> rates = np.logspace(-1, 3, 9)
>>> data = FlowCurveData("example", rates, 8.0 + 2.5 * rates ** 0.45, None, "shear_stress")
>>> best = fit_models(data, ["power-law", "herschel-bulkley"])[0]
>>> best.model, round(best.parameters["yield_stress"], 6), round(best.parameters["flow_index"], 6)
('herschel-bulkley', 8.0, 0.45)
"""

from __future__ import annotations

import csv
import difflib
import json
import math
import os
import shutil
import sys
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy import stats
from scipy.optimize import least_squares

from .errors import CaseError
from .rheology import MODELS, Model
from .temperature import GAS_CONSTANT, Arrhenius
from .units import registry

#: recognised column names -> (dimension name, an example unit for messages)
COLUMNS = {
    "shear_rate": ("rate", "1/s"),
    "shear_stress": ("stress", "Pa"),
    "viscosity": ("viscosity", "mPa*s"),
    "temperature": ("temperature", "degC"),
}
_SI = {"rate": "1/s", "stress": "Pa", "viscosity": "Pa*s", "temperature": "K"}

#: each model's parameters, in constructor order and keyed as in the case file
MODEL_PARAMETERS = {
    "newtonian": ("viscosity",),
    "power-law": ("consistency", "flow_index"),
    "carreau": ("zero_shear_viscosity", "infinite_shear_viscosity", "time_constant",
                "flow_index"),
    "carreau-yasuda": ("zero_shear_viscosity", "infinite_shear_viscosity", "time_constant",
                       "flow_index", "transition_exponent"),
    "cross": ("zero_shear_viscosity", "infinite_shear_viscosity", "time_constant",
              "rate_exponent"),
    "bingham": ("yield_stress", "plastic_viscosity"),
    "herschel-bulkley": ("yield_stress", "consistency", "flow_index"),
}

_LOG_FITTED = {"viscosity", "zero_shear_viscosity", "plastic_viscosity", "consistency",
               "time_constant", "transition_exponent"}
_EXPONENT_RANGE = (0.02, 3.0)          # flow_index, rate_exponent
_ACTIVATION_ENERGY_SCALE = 1e4         # J/mol: fitted as Ea / (10 kJ/mol)
_ACTIVATION_ENERGY_RANGE = (-5e5, 1e6)  # J/mol; negative: a liquid that thickens on warming
_CONFIDENCE = 0.95
#: a direction of J whose singular value is below this fraction of the largest is one
#: the data do not determine (finite-difference noise in J is ~1e-9 relative)
_SINGULAR = 1e-7


# --------------------------------------------------------------------------- data


@dataclass(frozen=True, eq=False)
class FlowCurveData:
    """A measured flow curve in SI: rates (1/s), stresses (Pa), temperatures (K) or None.

    ``measured`` is the column the file gave, ``"shear_stress"`` or ``"viscosity"``
    (a viscosity column is converted to stress, ``tau = eta * rate``).
    """

    source: str
    rates: np.ndarray
    stresses: np.ndarray
    temperatures: np.ndarray | None
    measured: str
    units: dict = field(default_factory=dict)   # column name -> unit as the file gave it

    @property
    def points(self) -> int:
        return len(self.rates)

    @property
    def viscosities(self) -> np.ndarray:
        return self.stresses / self.rates

    @property
    def rate_range(self) -> tuple[float, float]:
        return float(self.rates.min()), float(self.rates.max())

    @property
    def temperature_levels(self) -> np.ndarray:
        """The distinct measured temperatures, ascending (empty without a column)."""
        if self.temperatures is None:
            return np.array([])
        return np.unique(self.temperatures)

    @property
    def reference_temperature(self) -> float | None:
        """The median temperature level, used as ``T_ref`` of the Arrhenius shift.

        With an even number of levels, the lower middle one, so that ``T_ref`` is a
        temperature that was measured. None unless there are two levels or more.
        """
        levels = self.temperature_levels
        return float(levels[(len(levels) - 1) // 2]) if len(levels) >= 2 else None


def read_flow_curve(path) -> FlowCurveData:
    """Read a flow-curve CSV file into SI arrays, or raise :class:`CaseError`.

    The header names each column with its unit in square brackets:
    ``shear_rate [1/s]``, then ``shear_stress [Pa]`` or ``viscosity [mPa*s]`` (one of
    the two), and optionally ``temperature [degC]``; any unit of the right dimension that
    pint knows will do. Blank lines and lines starting with ``#`` are skipped. Every cell
    must be a finite number; rates, stresses, viscosities and absolute temperatures must
    be > 0. Errors name the file, the line, the column and the value.
    """
    path = Path(path)
    source = str(path)
    where = path.name  # messages name the file; a long folder path would crowd them out
    shown = source if len(source) <= 50 else f".../{path.parent.name}/{path.name}"
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise CaseError("data file", shown, "an existing CSV file") from None
    except UnicodeDecodeError:
        raise CaseError("data file", shown, "a text file in UTF-8") from None
    except OSError as error:
        raise CaseError("data file", shown, f"a readable file ({error.strerror})") from None

    rows = [(number, cells) for number, line in enumerate(text.splitlines(), 1)
            if line.strip() and not line.lstrip().startswith("#")
            for cells in csv.reader([line])]
    if not rows:
        raise CaseError("data file", shown,
                        "a header line such as 'shear_rate [1/s],shear_stress [Pa]'")
    header_line, header = rows[0]
    columns = _read_header(where, header_line, header)
    names = [name for name, _ in columns]

    values = {name: [] for name in names}
    for number, cells in rows[1:]:
        if len(cells) != len(columns):
            raise CaseError(f"{where}, line {number}", ",".join(cells),
                            f"{len(columns)} comma-separated values ({', '.join(names)})")
        for (name, _), cell in zip(columns, cells):
            values[name].append(_read_number(f"{where}, line {number}, column {name!r}", cell))
    if not rows[1:]:
        raise CaseError(where, "no data rows", "at least one line of values under the header")

    si = {}
    for name, units in columns:
        dimension = COLUMNS[name][0]
        magnitudes = np.array(values[name], dtype=float)
        si[name] = registry.Quantity(magnitudes, units).to(_SI[dimension]).magnitude
        for index in np.flatnonzero(~(si[name] > 0) | ~np.isfinite(si[name])):
            number, cells = rows[1 + index]
            what = "an absolute temperature > 0 K" if dimension == "temperature" else "a value > 0"
            raise CaseError(f"{where}, line {number}, column {name!r}",
                            cells[names.index(name)].strip(), what)

    measured = "shear_stress" if "shear_stress" in si else "viscosity"
    rates = si["shear_rate"]
    stresses = si["shear_stress"] if measured == "shear_stress" else si["viscosity"] * rates
    return FlowCurveData(source, rates, stresses, si.get("temperature"), measured,
                         {name: str(units) for name, units in columns})


def _read_header(source: str, line: int, header: list[str]) -> list[tuple[str, object]]:
    """The header's (column name, pint units) pairs, checked."""
    if len(header) == 1 and (";" in header[0] or "\t" in header[0]):
        raise CaseError(f"{source}, line {line} (header)", header[0],
                        "comma-separated columns (this header uses ';' or tabs)")
    columns = []
    for cell in header:
        key = f"{source}, line {line} (header), column {cell.strip()!r}"
        name, bracket, rest = cell.partition("[")
        name = name.strip().lower().replace(" ", "_")
        unit_text = rest.strip()[:-1].strip() if rest.strip().endswith("]") else ""
        if name not in COLUMNS:
            hint = difflib.get_close_matches(name, COLUMNS, n=1)
            raise CaseError(key, cell.strip(), "one of " + ", ".join(COLUMNS)
                            + (f" (did you mean {hint[0]!r}?)" if hint else ""))
        dimension, example = COLUMNS[name]
        if not bracket or not unit_text:
            raise CaseError(key, cell.strip(),
                            f"the column's unit in square brackets, such as '{name} [{example}]'")
        try:
            units = registry.parse_units(unit_text.replace("^", "**"))
        except Exception:  # pint raises several types for text it cannot read
            raise CaseError(key, unit_text, f"a known unit, such as '{example}'") from None
        if units.dimensionality != registry.parse_units(_SI[dimension]).dimensionality:
            raise CaseError(key, unit_text,
                            f"a unit of {dimension.replace('_', ' ')}, such as '{example}'")
        if name in (n for n, _ in columns):
            raise CaseError(key, cell.strip(), "each column once")
        columns.append((name, units))
    names = [name for name, _ in columns]
    if "shear_rate" not in names:
        raise CaseError(f"{source}, line {line} (header)", ",".join(header),
                        "a 'shear_rate [1/s]' column")
    if ("shear_stress" in names) == ("viscosity" in names):
        raise CaseError(f"{source}, line {line} (header)", ",".join(header),
                        "exactly one of a 'shear_stress [Pa]' and a 'viscosity [Pa*s]' column")
    return columns


def _read_number(key: str, cell: str) -> float:
    try:
        number = float(cell)
    except ValueError:
        raise CaseError(key, cell, "a number") from None
    if not math.isfinite(number):
        raise CaseError(key, cell, "a finite number")
    return number


# --------------------------------------------------------------------------- warnings

#: words in a unit name that mark a rotational speed or a frequency: the dimension of a
#: shear rate (1/time), but not a shear rate until a viscometer's geometry converts it
ROTATIONAL_UNIT_WORDS = ("revolution", "turn", "hertz", "radian", "cycle")
#: a flow curve spanning less than this factor of shear rate leaves a rate-dependent
#: model poorly determined (common practice asks for two decades or more)
NARROW_RATE_SPAN = 10.0
#: fits with fewer residual degrees of freedom than this are flagged as thin
FEW_DEGREES_OF_FREEDOM = 3


def data_warnings(data: FlowCurveData) -> list[str]:
    """What about the data file itself limits any fit: an odd unit, a narrow rate span.

    >>> d = FlowCurveData("v.csv", np.array([10.0, 20.0, 50.0]), np.array([1.0, 2.0, 4.0]),
    ...                   None, "shear_stress", {"shear_rate": "revolutions_per_minute"})
    >>> for text in data_warnings(d): print(text.split(":")[1].strip())
    the shear_rate column is in revolutions_per_minute, a rotational speed
    the shear rates span only a factor 5
    """
    out = []
    unit = data.units.get("shear_rate", "")
    if any(word in unit for word in ROTATIONAL_UNIT_WORDS):
        out.append(f"{data.source}: the shear_rate column is in {unit}, a rotational speed: "
                   "a viscometer's speed becomes a shear rate only through its geometry "
                   "factor (bob and cup radii, cone angle); convert it first, or check that "
                   "the column really holds shear rates")
    low, high = data.rate_range
    if high > low * (1 + 1e-9) and high / low < NARROW_RATE_SPAN:
        out.append(f"{data.source}: the shear rates span only a factor {high / low:.3g}: a "
                   "shear-rate-dependent model is poorly determined over so narrow a span "
                   "(common practice: two decades or more); use it only within "
                   f"{low:.4g} to {high:.4g} 1/s")
    return out


def fit_warnings(fit: "ModelFit", data: FlowCurveData) -> list[str]:
    """Where one fit is not determined by the data: free parameters, few points."""
    out = []
    undetermined = [name for name, interval in fit.ci95.items() if interval is None]
    if undetermined:
        out.append(f"{fit.model}: the data do not determine {', '.join(undetermined)} "
                   "(no confidence interval); do not rely on the fitted value")
    spare = fit.points - len(fit.parameters)
    if spare < FEW_DEGREES_OF_FREEDOM:
        out.append(f"{fit.model}: {fit.points} points for {len(fit.parameters)} parameters "
                   f"leave {spare} degree{'s' if spare != 1 else ''} of freedom: the fit can "
                   "follow the noise and its intervals are unreliable; measure more points")
    return out


def left_out_warnings(fits: list["ModelFit"], data: FlowCurveData, asked) -> list[str]:
    """The models the data cannot determine at all, and were therefore not fitted."""
    if asked is not None:
        return []
    with_temperature = data.reference_temperature is not None
    single_rate = data.rate_range[1] <= data.rate_range[0] * (1 + 1e-9)
    out = []
    for model in MODELS:
        if model in {f.model for f in fits}:
            continue
        count = parameter_count(model, with_temperature)
        reason = ("the data hold a single shear rate" if single_rate and count < data.points
                  else f"{data.points} points cannot determine its {count} parameters "
                  f"(it needs at least {count + 1})")
        out.append(f"{model} not fitted: {reason}")
    return out


# --------------------------------------------------------------------------- fitting


@dataclass(frozen=True, eq=False)
class ModelFit:
    """One model fitted to a flow curve. Values in SI, keys as in the case file.

    ``parameters`` holds the model's parameters and, with a temperature fit,
    ``activation_energy`` (J/mol); ``ci95`` maps each to its 95 % interval
    ``(low, high)``, or None when the data do not determine it. ``at_bound`` names the
    parameters that stopped at the edge of their allowed range (their interval is then
    only indicative). ``temperature_law`` is the fitted :class:`Arrhenius` shift or None.
    """

    model: str
    parameters: dict
    ci95: dict
    r2: float | None
    rms_relative_error: float
    aic: float
    points: int
    at_bound: tuple = ()
    temperature_law: Arrhenius | None = None
    residuals: np.ndarray = field(default=None, repr=False)  # data / fit - 1, per point

    @property
    def model_parameters(self) -> dict:
        """The parameters of the viscosity model alone (no temperature law)."""
        return {k: self.parameters[k] for k in MODEL_PARAMETERS[self.model]}

    def fluid(self) -> Model:
        """The fitted :mod:`gnflow.rheology` model at the reference temperature.

        Yield-stress models get that module's default regularisation, as a case would.
        """
        return MODELS[self.model](**self.model_parameters)

    def stress(self, rate, temperature=None) -> np.ndarray:
        """The fitted (exact, unregularised) flow curve in Pa at ``rate`` and ``temperature``."""
        rate = np.asarray(rate, dtype=float)
        if self.temperature_law is not None and temperature is not None:
            rate = rate * self.temperature_law.shift(temperature)
        return _flow_curve(self.model, self.model_parameters, rate)


def _flow_curve(model: str, parameters: dict, rate: np.ndarray) -> np.ndarray:
    """Shear stress of ``model`` at ``rate``; yield-stress models by their exact curve."""
    if model == "bingham":
        return parameters["yield_stress"] + parameters["plastic_viscosity"] * rate
    if model == "herschel-bulkley":
        return (parameters["yield_stress"]
                + parameters["consistency"] * rate ** parameters["flow_index"])
    return MODELS[model](**parameters).stress(rate)


def parameter_count(model: str, with_temperature: bool) -> int:
    """The number of fitted parameters: the model's, plus one for an Arrhenius shift."""
    return len(MODEL_PARAMETERS[model]) + (1 if with_temperature else 0)


def fit_models(data: FlowCurveData, models=None) -> list[ModelFit]:
    """Fit each named model (default: every model the data can support), best AIC first.

    A model needs more points than fitted parameters (``N >= p + 1``, so that the error
    variance and the intervals exist). A model named in ``models`` that the data cannot
    support raises :class:`CaseError`; by default such models are left out, and only
    when none is left is that an error.
    """
    with_temperature = data.reference_temperature is not None
    low, high = data.rate_range
    single_rate = high <= low * (1 + 1e-9)
    if models is None:
        names = [m for m in MODELS if parameter_count(m, with_temperature) < data.points]
        if single_rate:
            # one shear rate (a viscosity-temperature table): only a Newtonian law can be
            # determined; any shear-rate dependence would be pure guesswork
            names = [m for m in names if m == "newtonian"]
        if not names:
            _too_few_points(data, "newtonian", with_temperature)
    else:
        names = list(dict.fromkeys(models))
        for name in names:
            if name not in MODELS:
                hint = difflib.get_close_matches(name, MODELS, n=1)
                raise CaseError("--models", name, "one of " + ", ".join(MODELS)
                                + (f" (did you mean {hint[0]!r}?)" if hint else ""))
            if parameter_count(name, with_temperature) >= data.points:
                _too_few_points(data, name, with_temperature)
            if single_rate and name != "newtonian":
                raise CaseError(Path(data.source).name, name, (
                    "newtonian: the data hold a single shear rate "
                    f"({low:.4g} 1/s), so no shear-rate dependence can be fitted"))
    fits = [_fit_model(data, name) for name in names]
    return sorted(fits, key=lambda f: (f.aic, len(f.parameters)))


def _too_few_points(data: FlowCurveData, model: str, with_temperature: bool):
    p = parameter_count(model, with_temperature)
    shift = " with the Arrhenius shift" if with_temperature else ""
    points = f"{data.points} data point" + ("s" if data.points != 1 else "")
    raise CaseError(Path(data.source).name, points,
                    f"at least {p + 1} points to fit {model} "
                    f"({p} parameter{'s' if p != 1 else ''}{shift}, and one more for the error)")


class _Space:
    """The map between a model's SI parameters and its well-scaled fitting coordinates."""

    def __init__(self, model: str, data: FlowCurveData, with_temperature: bool):
        self.model = model
        self.names = MODEL_PARAMETERS[model] + (("activation_energy",) if with_temperature else ())
        self.stress_scale = float(np.median(data.stresses))
        eta = data.viscosities
        low_rate, high_rate = data.rate_range
        spread = 1e3
        log_range = {
            "viscosity": (eta.min() / spread, eta.max() * spread),
            "zero_shear_viscosity": (eta.min() / spread, eta.max() * spread),
            "plastic_viscosity": (eta.min() / spread, eta.max() * spread),
            "consistency": (1e-12, 1e12),
            "time_constant": (1 / (spread * high_rate), spread / low_rate),
            "transition_exponent": (0.05, 20.0),
        }
        bounds = []
        for name in self.names:
            if name in _LOG_FITTED:
                low, high = log_range[name]
                bounds.append((math.log(low), math.log(high)))
            elif name in ("flow_index", "rate_exponent"):
                bounds.append(_EXPONENT_RANGE)
            elif name == "yield_stress":
                bounds.append((0.0, 10 * data.stresses.max() / self.stress_scale))
            elif name == "infinite_shear_viscosity":
                bounds.append((0.0, 1.0))
            else:  # activation_energy
                low, high = _ACTIVATION_ENERGY_RANGE
                bounds.append((low / _ACTIVATION_ENERGY_SCALE, high / _ACTIVATION_ENERGY_SCALE))
        self.lower, self.upper = (np.array(b, dtype=float) for b in zip(*bounds))

    def to_si(self, x) -> dict:
        out = {}
        for name, value in zip(self.names, map(float, x)):
            if name in _LOG_FITTED:
                out[name] = math.exp(value)
            elif name == "yield_stress":
                out[name] = value * self.stress_scale
            elif name == "activation_energy":
                out[name] = value * _ACTIVATION_ENERGY_SCALE
            else:
                out[name] = value
        if "infinite_shear_viscosity" in out:  # fitted as a fraction of eta_0
            out["infinite_shear_viscosity"] *= out["zero_shear_viscosity"]
        return out

    def to_internal(self, si: dict) -> np.ndarray:
        x = []
        for name in self.names:
            value = si[name]
            if name in _LOG_FITTED:
                x.append(math.log(value))
            elif name == "yield_stress":
                x.append(value / self.stress_scale)
            elif name == "activation_energy":
                x.append(value / _ACTIVATION_ENERGY_SCALE)
            elif name == "infinite_shear_viscosity":
                x.append(value / si["zero_shear_viscosity"])
            else:
                x.append(value)
        # a start strictly inside the bounds, so that every coordinate can move
        margin = 1e-6 * (self.upper - self.lower)
        return np.clip(np.array(x, dtype=float), self.lower + margin, self.upper - margin)

    def intervals(self, x, covariance, undetermined, t_quantile) -> dict:
        """95 % intervals of the SI parameters, mapped from the fitting coordinates.

        ``undetermined`` holds (as rows) the directions of the fitting space that the data
        leave free; a parameter that changes along one of them gets None.
        """
        x = [float(value) for value in x]
        si = self.to_si(x)
        out = {}
        for i, name in enumerate(self.names):
            # d parameter / d x, up to a factor the interval below accounts for
            gradient = np.zeros(len(x))
            gradient[i] = 1.0
            if name == "infinite_shear_viscosity":  # fraction * exp(x_j)
                j = self.names.index("zero_shear_viscosity")
                gradient[i], gradient[j] = si["zero_shear_viscosity"], si[name]
            if np.sum((undetermined @ gradient) ** 2) > 1e-6 * (gradient @ gradient):
                out[name] = None
                continue
            half = t_quantile * math.sqrt(max(float(gradient @ covariance @ gradient), 0.0))
            if not math.isfinite(half) or (name in _LOG_FITTED and x[i] + half > 700):
                # an interval wider than any float: the data do not determine it
                out[name] = None
                continue
            if name in _LOG_FITTED:  # multiplicative
                out[name] = (math.exp(x[i] - half), math.exp(x[i] + half))
            elif name == "yield_stress":
                out[name] = (max(0.0, (x[i] - half) * self.stress_scale),
                             (x[i] + half) * self.stress_scale)
            elif name == "activation_energy":
                out[name] = ((x[i] - half) * _ACTIVATION_ENERGY_SCALE,
                             (x[i] + half) * _ACTIVATION_ENERGY_SCALE)
            elif name == "infinite_shear_viscosity":  # delta method
                out[name] = (max(0.0, si[name] - half), si[name] + half)
            else:
                out[name] = (x[i] - half, x[i] + half)
        return out


def _fit_model(data: FlowCurveData, model: str) -> ModelFit:
    reference = data.reference_temperature
    with_temperature = reference is not None
    space = _Space(model, data, with_temperature)
    log_stress = np.log(data.stresses)
    inverse_temperature = (1.0 / data.temperatures - 1.0 / reference) if with_temperature else None

    def reduced_rates(activation_energy):
        """Rates shifted onto the reference temperature: ``a_T * rate``."""
        if not with_temperature:
            return data.rates
        return data.rates * np.exp(activation_energy / GAS_CONSTANT * inverse_temperature)

    def residuals(x):
        with np.errstate(all="ignore"):
            parameters = space.to_si(x)
            stress = _flow_curve(model, {k: parameters[k] for k in MODEL_PARAMETERS[model]},
                                 reduced_rates(parameters.get("activation_energy")))
            r = np.log(stress) - log_stress
        # outside the model's domain (never inside the bounds, but finite differences
        # may step there): a large residual steers the solver back
        return np.where(np.isfinite(r), r, 1e3)

    energy_start = _activation_energy_start(data) if with_temperature else None
    starts = []
    for start in _starting_values(model, reduced_rates(energy_start), data.stresses):
        if with_temperature:
            start["activation_energy"] = energy_start
        starts.append(space.to_internal(start))

    best = None
    for x0 in starts:
        result = least_squares(residuals, x0, bounds=(space.lower, space.upper), method="trf",
                               x_scale="jac", ftol=1e-12, xtol=1e-12, gtol=1e-12)
        if best is None or result.cost < best.cost:
            best = result

    x = best.x
    r = residuals(x)
    n_points, n_parameters = data.points, len(x)
    dof = n_points - n_parameters
    ssr = float(r @ r)
    jacobian = _central_jacobian(residuals, x, space.lower, space.upper)
    covariance, undetermined = _covariance(jacobian, ssr / dof)
    t_quantile = float(stats.t.ppf(0.5 + _CONFIDENCE / 2, dof))
    parameters = space.to_si(x)
    ci95 = space.intervals(x, covariance, undetermined, t_quantile)

    # the solver's own active set is approximate; ask the bounds directly
    gap = np.minimum(x - space.lower, space.upper - x)
    at_bound = tuple(n for n, g, w in zip(space.names, gap, space.upper - space.lower)
                     if g <= 1e-5 * w)
    total = float(np.sum((log_stress - log_stress.mean()) ** 2))
    r2 = 1.0 - ssr / total if total > 0 else None
    # a floor for noise-free data: the round-off of ln(tau), so AIC stays finite
    aic = n_points * math.log(max(ssr, n_points * 1e-30) / n_points) + 2 * (n_parameters + 1)
    law = Arrhenius(parameters["activation_energy"], reference) if with_temperature else None
    # r = ln(tau_model / tau_data): the model's relative error is exp(r) - 1, the data's
    # deviation from the model (the residual plot) exp(-r) - 1
    return ModelFit(model=model, parameters=parameters, ci95=ci95, r2=r2,
                    rms_relative_error=float(np.sqrt(np.mean(np.expm1(r) ** 2))), aic=aic,
                    points=n_points, at_bound=at_bound, temperature_law=law,
                    residuals=np.expm1(-r))


def _central_jacobian(function, x, lower, upper):
    """d residual / d x by central differences, one-sided where a bound is near.

    Used for the covariance rather than the solver's forward-difference Jacobian,
    whose error would blur which directions the data leave undetermined.
    """
    columns = []
    for i in range(len(x)):
        step = 1e-6 * max(1.0, abs(x[i]))
        forward, backward = x.copy(), x.copy()
        forward[i] = min(x[i] + step, upper[i])
        backward[i] = max(x[i] - step, lower[i])
        columns.append((function(forward) - function(backward)) / (forward[i] - backward[i]))
    return np.column_stack(columns)


def _covariance(jacobian, variance):
    """``variance * (J^T J)^-1`` on the directions the data determine, and the others.

    Returns the covariance (a pseudo-inverse: zero along undetermined directions) and
    those undetermined directions as the rows of a matrix.
    """
    _, singular, vt = np.linalg.svd(jacobian, full_matrices=False)
    kept = singular > _SINGULAR * singular[0] if singular[0] > 0 else np.zeros_like(singular, bool)
    v = vt[kept].T
    return variance * (v / singular[kept] ** 2) @ v.T, vt[~kept]


def _activation_energy_start(data: FlowCurveData) -> float:
    """A first Ea from ``ln eta ~ c0 + c1 ln rate + c2 (1/T - 1/T_ref)``.

    For a locally power-law curve of index ``n = 1 + c1`` the superposition gives
    ``c2 = n Ea / R``; ``n`` is floored because a near-plastic curve hides the shift.
    """
    inverse_temperature = 1.0 / data.temperatures - 1.0 / data.reference_temperature
    design = np.column_stack([np.ones(data.points), np.log(data.rates), inverse_temperature])
    c, *_ = np.linalg.lstsq(design, np.log(data.viscosities), rcond=None)
    energy = c[2] * GAS_CONSTANT / max(1.0 + c[1], 0.2)
    low, high = _ACTIVATION_ENERGY_RANGE
    return float(np.clip(energy, 0.5 * low, 0.5 * high))


def _starting_values(model: str, rates: np.ndarray, stresses: np.ndarray) -> list[dict]:
    """Starting points in SI read off the flow curve (rates reduced to ``T_ref``)."""
    order = np.argsort(rates)
    rates, stresses = rates[order], stresses[order]
    eta = stresses / rates
    log_rate, log_eta = np.log(rates), np.log(eta)

    def slope(x, y):
        return float(np.polyfit(x, y, 1)[0]) if np.ptp(x) > 0 else 0.0

    def exponent(value):
        return float(np.clip(value, *_EXPONENT_RANGE))

    if model == "newtonian":
        return [{"viscosity": float(np.exp(log_eta.mean()))}]
    if model == "power-law":
        n = exponent(1 + slope(log_rate, log_eta))
        return [{"consistency": float(np.exp(np.mean(np.log(stresses) - n * log_rate))),
                 "flow_index": n}]
    if model in ("carreau", "carreau-yasuda", "cross"):
        low = max(3, len(rates) // 5)
        eta_0 = float(np.exp(log_eta[:low].mean()))
        tail_slope = slope(log_rate[-low:], log_eta[-low:])
        fraction = 0.1 * eta.min() / max(eta_0, eta.max())
        # time constants spread over the measured rates: the knee may lie anywhere
        knees = np.quantile(log_rate, [0.1, 0.5, 0.9])
        starts = []
        for knee in knees:
            start = {"zero_shear_viscosity": eta_0, "infinite_shear_viscosity": fraction * eta_0,
                     "time_constant": float(np.exp(-knee))}
            if model == "cross":
                start["rate_exponent"] = exponent(-tail_slope if tail_slope < 0 else 0.5)
                starts.append(start)
            else:
                start["flow_index"] = exponent(1 + tail_slope)
                if model == "carreau":
                    starts.append(start)
                else:
                    starts += [{**start, "transition_exponent": a} for a in (0.7, 2.0)]
        return starts
    # yield-stress models: try yield stresses from none to most of the lowest stress
    starts = []
    for share in (0.01, 0.5, 0.9):
        yield_stress = share * stresses.min()
        viscous = stresses - yield_stress
        if model == "bingham":
            plastic = float(np.mean(viscous / rates))
            starts.append({"yield_stress": yield_stress, "plastic_viscosity": plastic})
        else:
            n = exponent(slope(log_rate, np.log(viscous)))
            k = float(np.exp(np.mean(np.log(viscous) - n * log_rate)))
            starts.append({"yield_stress": yield_stress, "consistency": k, "flow_index": n})
    return starts


# --------------------------------------------------------------------------- outputs


def parameter_unit(name: str, parameters: dict) -> str:
    """The SI unit of a fitted parameter, as written in fit.json and the printed table."""
    if name == "consistency":
        return f"Pa*s^{_number(parameters['flow_index'])}"
    return {"viscosity": "Pa*s", "zero_shear_viscosity": "Pa*s",
            "infinite_shear_viscosity": "Pa*s", "plastic_viscosity": "Pa*s",
            "time_constant": "s", "yield_stress": "Pa", "activation_energy": "J/mol"}.get(name, "")


def _number(value: float) -> str:
    """Four significant digits: what the data support, and what the definition carries."""
    return f"{value:.4g}"


def _celsius(kelvin: float) -> str:
    return f"{round(kelvin - 273.15, 2):g} degC"


def fit_report(fits: list[ModelFit], data: FlowCurveData, warnings=(),
               caution: str = "") -> dict:
    """The content of fit.json: the data's ranges and every fit, best first, in SI, with
    the warnings printed and the caution line."""
    def finite(value):
        return value if value is None or math.isfinite(value) else None

    levels = data.temperature_levels
    return {
        "data": {
            "file": data.source,
            "points": data.points,
            "measured": data.measured,
            "rate_range": list(data.rate_range),
            "stress_range": [float(data.stresses.min()), float(data.stresses.max())],
            "temperature_range": [float(levels[0]), float(levels[-1])] if len(levels) else None,
            "temperature_law": "arrhenius" if data.reference_temperature else None,
            "reference_temperature": data.reference_temperature,
        },
        "units": "SI (rates 1/s, stresses Pa, viscosities Pa*s, temperatures K, "
                 "activation energy J/mol)",
        "models": [{
            "model": f.model,
            "parameters": f.parameters,
            "units": {k: parameter_unit(k, f.parameters) for k in f.parameters},
            "ci95": {k: None if v is None else [finite(v[0]), finite(v[1])]
                     for k, v in f.ci95.items()},
            "r2": finite(f.r2),
            "rms_relative_error": f.rms_relative_error,
            "aic": f.aic,
            "at_bound": list(f.at_bound),
        } for f in fits],
        "warnings": list(warnings),
        "caution": caution,
    }


def fluid_definition(fit: ModelFit, data: FlowCurveData, ranked: int = 1) -> str:
    """The ``[fluid]`` block for ``fit``, ready to paste into a case file.

    >>> import numpy as np
    >>> data = FlowCurveData("paste.csv", np.array([0.1, 1000.0]), np.array([1.0, 2.0]),
    ...                      None, "shear_stress")
    >>> fit = ModelFit("herschel-bulkley", {"yield_stress": 8.123, "consistency": 2.5061,
    ...                "flow_index": 0.45}, {}, 0.99, 0.01, -50.0, 2)
    >>> print(fluid_definition(fit, data))  # doctest: +ELLIPSIS
    # fitted by gnflow fit to paste.csv: ...
    [fluid]
    model = "herschel-bulkley"
    yield_stress = "8.123 Pa"
    consistency = "2.506 Pa*s^0.45"
    flow_index = 0.45
    fitted_rate_range = ["0.1 1/s", "1000 1/s"]
    <BLANKLINE>
    """
    source = data.source.replace("\n", " ")
    lines = [f"# fitted by gnflow fit to {source}: {fit.model}, rank {ranked} by AIC "
             f"({data.points} points, rms relative error {100 * fit.rms_relative_error:.2g} %)"]
    levels = data.temperature_levels
    if fit.temperature_law is not None:
        lines.append(f"# measured at {_celsius(levels[0])} to {_celsius(levels[-1])}; "
                     "the Arrhenius shift holds only near that range")
    elif len(levels) == 1:
        lines.append(f"# measured at {_celsius(levels[0])}")
    undetermined = [name for name, interval in fit.ci95.items() if interval is None]
    if undetermined:
        lines.append(f"# not determined by the data: {', '.join(undetermined)}")
    if fit.at_bound:
        lines.append(f"# at the edge of the fitting range: {', '.join(fit.at_bound)}")
    lines += ["[fluid]", f'model = "{fit.model}"']
    for name in MODEL_PARAMETERS[fit.model]:
        value = fit.parameters[name]
        unit = parameter_unit(name, fit.parameters)
        shown = f'"{_number(value)} {unit}"' if unit else _number(value)
        lines.append(f"{name} = {shown}")
    low, high = data.rate_range
    lines.append(f'fitted_rate_range = ["{_number(low)} 1/s", "{_number(high)} 1/s"]')
    if fit.temperature_law is not None:
        law = fit.temperature_law
        lines += ['temperature_law = "arrhenius"',
                  f'activation_energy = "{_number(law.activation_energy / 1e3)} kJ/mol"',
                  f'reference_temperature = "{_celsius(law.reference_temperature)}"',
                  f'fitted_temperature_range = ["{_celsius(levels[0])}", '
                  f'"{_celsius(levels[-1])}"]',
                  "# temperature = \"...\"   (the case's fluid temperature; default: the "
                  "reference temperature)"]
    return "\n".join(lines) + "\n"


def write_fit_outputs(fits: list[ModelFit], data: FlowCurveData, out_dir, warnings=(),
                      caution: str = "", slip=None) -> Path:
    """Write fit.json, fluid.toml and fit.png into ``out_dir``, each file atomically.

    The files are written into a temporary directory beside ``out_dir`` and then moved
    into place, so a reader never sees a half-written file; other files in ``out_dir``
    are left alone.
    """
    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
        staging = Path(tempfile.mkdtemp(prefix=f".{out.resolve().name}-", dir=out.resolve().parent))
    except OSError as error:
        raise CaseError("--out", str(out_dir),
                        f"a directory that can be written ({error.strerror})") from None
    try:
        report = fit_report(fits, data, warnings, caution)
        definition = fluid_definition(fits[0], data)
        if slip is not None:   # a Mooney analysis: the slip law beside the bulk fluid
            from .mooney import slip_table
            report["slip"] = _slip_report(slip)
            definition += "\n" + slip_table(slip.slip)
        (staging / "fit.json").write_text(json.dumps(report, indent=2, allow_nan=False) + "\n")
        (staging / "fluid.toml").write_text(definition)
        _plot(fits, data, staging / "fit.png")
        for name in ("fit.json", "fluid.toml", "fit.png"):
            os.replace(staging / name, out / name)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return out


def _plot(fits: list[ModelFit], data: FlowCurveData, path: Path) -> None:
    """Log-log flow curve with every fit, and the relative residuals below it."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    best = fits[0]
    law = best.temperature_law
    shift = law.shift(data.temperatures) if law is not None else np.ones(data.points)
    reduced = data.rates * shift
    as_viscosity = data.measured == "viscosity"
    # on the master curve, stress is unchanged and viscosity is divided by a_T
    measured = data.viscosities / shift if as_viscosity else data.stresses
    grid = np.logspace(np.log10(reduced.min()), np.log10(reduced.max()), 200)

    figure, (top, bottom) = plt.subplots(2, 1, sharex=True, figsize=(7.5, 7.0),
                                         gridspec_kw={"height_ratios": [3, 1.2]})
    if law is None:
        top.loglog(reduced, measured, "o", color="black", markerfacecolor="none",
                   label=f"data ({data.points} points)")
    else:
        # data in grey, one marker shape per temperature, so the colours stay the models'
        levels = data.temperature_levels
        for index, level in enumerate(levels):
            at = data.temperatures == level
            top.loglog(reduced[at], measured[at], "osD^v<>ph"[index % 9], markerfacecolor="none",
                       color=str(0.6 * index / max(len(levels) - 1, 1)),
                       label=f"data, {_celsius(level)}")
    order = np.argsort(reduced)
    for rank, fit in enumerate(fits, 1):
        curve = fit.stress(grid)
        line, = top.loglog(grid, curve / grid if as_viscosity else curve,
                           lw=2.2 if rank == 1 else 1.2,
                           label=f"{rank}. {fit.model} (AIC {fit.aic:.1f})")
        bottom.semilogx(reduced[order], 100 * fit.residuals[order], ".-", lw=0.6,
                        color=line.get_color())
    bottom.axhline(0.0, color="grey", lw=0.8)
    # scaled to the best fits: a poor model's residuals would flatten the good ones
    scale = 100 * max(4 * np.abs(best.residuals).max(), 0.02)
    bottom.set_ylim(-scale, scale)
    top.set_ylabel("viscosity [Pa*s]" if as_viscosity else "shear stress [Pa]")
    bottom.set_ylabel("data / fit - 1 [%]")
    if law is None:
        bottom.set_xlabel("shear rate [1/s]")
    else:
        bottom.set_xlabel(f"reduced shear rate a_T * rate [1/s], reference "
                          f"{_celsius(law.reference_temperature)} (shift of the best fit)")
    top.set_title(f"{Path(data.source).name}: flow curve and fits, best first")
    top.legend(fontsize=8)
    top.grid(True, which="both", alpha=0.3)
    bottom.grid(True, which="both", alpha=0.3)
    figure.tight_layout()
    figure.savefig(path, dpi=120)
    plt.close(figure)


# --------------------------------------------------------------------------- command


def format_table(fits: list[ModelFit], data: FlowCurveData) -> str:
    """The ranked table that ``gnflow fit`` prints: one block per model, units given."""
    low, high = data.rate_range
    lines = [f"{data.source}: {data.points} points, shear rate {_number(low)} to "
             f"{_number(high)} 1/s, {data.measured.replace('_', ' ')} given"]
    levels = data.temperature_levels
    if data.reference_temperature is not None:
        lines.append(f"temperatures {_celsius(levels[0])} to {_celsius(levels[-1])} "
                     f"({len(levels)} levels): Arrhenius shift fitted with each model, "
                     f"reference {_celsius(data.reference_temperature)}")
    lines += ["ranked by AIC (lower is better); R^2 of ln(stress); 95 % intervals from the "
              "Jacobian", "",
              f"{'rank':>4}  {'model':<17} {'AIC':>9} {'dAIC':>7} {'R^2':>9}  rms rel. error"]
    for rank, fit in enumerate(fits, 1):
        r2 = f"{fit.r2:.5f}" if fit.r2 is not None else "-"
        lines.append(f"{rank:>4}  {fit.model:<17} {fit.aic:>9.2f} {fit.aic - fits[0].aic:>7.2f} "
                     f"{r2:>9}  {100 * fit.rms_relative_error:.3g} %")
        for name, value in fit.parameters.items():
            shown, unit = value, parameter_unit(name, fit.parameters)
            interval = fit.ci95[name]
            if name == "activation_energy":
                shown, unit = value / 1e3, "kJ/mol"
                interval = None if interval is None else (interval[0] / 1e3, interval[1] / 1e3)
            text = ("not determined by the data" if interval is None
                    else f"[{_number(interval[0])}, {_number(interval[1])}]")
            if name in fit.at_bound:
                text += "  (at the edge of its range)"
            lines.append(f"{'':>6}{name:<26} {_number(shown):>10} {unit:<13} {text}")
    return "\n".join(lines)


def _slip_report(analysis) -> dict:
    """The Mooney analysis for fit.json: the slip law and the points it came from (SI)."""
    fit = analysis.slip
    return {"law": "u_s = coefficient * (tau_w - yield_stress)^exponent",
            "coefficient": fit.coefficient, "coefficient_unit": f"m/s/Pa^{fit.exponent:.6g}",
            "exponent": fit.exponent, "yield_stress": fit.yield_stress,
            "rms_relative_error": fit.rms_relative_error,
            "points": [{"wall_shear_stress": float(t), "slip_speed": p.slip_speed,
                        "bulk_wall_shear_rate": float(g), "line_misfit": p.residual}
                       for t, p, g in zip(analysis.stresses, analysis.points,
                                          analysis.bulk_rates)],
            "method": "Mooney (1931) lines at each wall stress; bulk rates corrected by "
                      "Weissenberg-Rabinowitsch"}


def _is_slip_file(data_path: str) -> bool:
    from .mooney import is_slip_data
    try:
        with open(data_path, encoding="utf-8-sig") as handle:
            for line in handle:
                if line.strip() and not line.lstrip().startswith("#"):
                    return is_slip_data(line)
    except (OSError, UnicodeDecodeError):
        return False   # read_flow_curve gives the error message
    return False


def _read_data(data_path: str):
    """The flow curve to fit, and the Mooney analysis when the file holds several sizes."""
    if not _is_slip_file(data_path):
        return read_flow_curve(data_path), None
    from .mooney import analyse, read_slip_data
    analysis = analyse(read_slip_data(data_path))
    data = FlowCurveData(str(data_path), analysis.bulk_rates, analysis.stresses, None,
                         "shear_stress", {"shear_rate": "1/s (bulk, slip removed)",
                                          "shear_stress": "Pa"})
    return data, analysis


def run_fit_command(data_path: str, models: list[str] | None, out_dir: str | None,
                    quiet: bool = False) -> int:
    """``gnflow fit DATA.csv [--models ...] [--out DIR]``: fit, print the table, write files.

    ``models`` may hold names or comma-separated lists of names; None fits every model
    the data can support. ``out_dir`` defaults to ``results/<data file stem>-fit/``.
    Warnings (:func:`data_warnings`, :func:`fit_warnings`, the models left out) are
    printed and kept in fit.json; ``quiet`` prints only them. Bad input raises
    :class:`CaseError` (exit code 2 in the command line).
    """
    from .post import CAUTION  # the one place the caution text lives

    data, slip = _read_data(data_path)
    names = None
    if models:
        names = [name.strip() for entry in models for name in entry.split(",") if name.strip()]
    fits = fit_models(data, names)
    warnings = (data_warnings(data) + [w for f in fits for w in fit_warnings(f, data)]
                + left_out_warnings(fits, data, names))
    out = Path(out_dir) if out_dir else Path("results") / f"{Path(data_path).stem}-fit"
    if slip is not None:
        warnings.append("slip laws are specific to the material and the wall's material and "
                        "finish: measure them on the walls of the equipment")
    write_fit_outputs(fits, data, out, warnings, CAUTION, slip)
    if quiet:
        for warning in warnings:
            print(f"WARNING: {warning}", file=sys.stderr)
        return 0
    print(format_table(fits, data))
    if slip is not None:
        law = slip.slip
        print(f"wall slip (Mooney analysis of {len(slip.points)} wall stresses): u_s = "
              f"{law.coefficient:.4g} m/s/Pa^{law.exponent:.4g} * (tau_w - "
              f"{law.yield_stress:.4g} Pa)^{law.exponent:.4g}, rms relative error "
              f"{100 * law.rms_relative_error:.2g} %; the bulk fits above use the slip-free "
              "wall shear rates")
    for warning in warnings:
        print(f"  WARNING: {warning}")
    print(f"\nwrote {out / 'fit.json'}, {out / 'fluid.toml'} (fluid definition: "
          f"{fits[0].model}) and {out / 'fit.png'}")
    print(f"  caution: {CAUTION}")
    return 0
