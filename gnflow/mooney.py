"""Separating wall slip from bulk flow: the Mooney (1931) analysis of several gaps or radii.

A fluid that slips at the wall makes a passage look wider than it is. Measured at the
same wall shear stress in passages of different size, the part of the flow rate that the
bulk carries scales with the size in a known way, and the slip part does not:

* pipes of radius ``R``: ``4 Q / (pi R^3) = 4 u_s / R + phi(tau_w)``, so at fixed ``tau_w``
  the apparent shear rate ``4Q/(pi R^3)`` is linear in ``1/R`` with slope ``4 u_s``;
* slits of gap ``h`` (per unit width): ``6 q / h^2 = 6 u_s / h + psi(tau_w)``, slope
  ``6 u_s`` against ``1/h``;

(Mooney 1931, J. Rheol. 2, 210; the slit form follows in the same way from the stress
distribution ``tau = tau_w (2y/h - 1)``.) Repeating at several wall stresses gives the
slip law ``u_s(tau_w)``; :func:`fit_slip_law` fits ``u_s = beta (tau_w - tau_s)^p``
(``tau_s`` optional) to those points, and ``phi(tau_w)`` (the intercepts) is the flow
curve of the bulk, free of slip.

>>> radii = [0.002, 0.004, 0.008]; u_s = 0.01; phi = 50.0
>>> rates = [4 * u_s / R + phi for R in radii]   # 4Q/(pi R^3) at one wall stress
>>> point = slip_at_stress("pipe", radii, [r * 3.141592653589793 * R ** 3 / 4
...                                        for r, R in zip(rates, radii)])
>>> round(point.slip_speed, 6), round(point.bulk_rate, 3)
(0.01, 50.0)
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from .errors import CaseError


@dataclass(frozen=True)
class MooneyPoint:
    """The slip speed and bulk apparent shear rate at one wall stress."""

    slip_speed: float        # m/s
    bulk_rate: float         # 1/s: 4Q/(pi R^3) or 6q/h^2 with the slip removed
    residual: float          # RMS misfit of the straight line, relative to the mean rate


def _apparent_rates(shape: str, sizes, flow_rates) -> tuple[np.ndarray, float]:
    sizes = np.asarray(sizes, dtype=float)
    flow_rates = np.asarray(flow_rates, dtype=float)
    if shape == "pipe":
        return 4 * flow_rates / (math.pi * sizes ** 3), 4.0
    if shape == "slit":
        return 6 * flow_rates / sizes ** 2, 6.0
    raise CaseError("mooney.shape", shape, '"pipe" or "slit"')


def slip_at_stress(shape: str, sizes, flow_rates) -> MooneyPoint:
    """Mooney's straight line at one wall stress: ``sizes`` (radii or gaps, m) and the
    flow rates measured (or computed) there at the same wall shear stress."""
    if len(sizes) < 2 or len(set(float(s) for s in sizes)) < 2:
        raise CaseError("mooney", sizes, "at least two different radii or gaps")
    rates, factor = _apparent_rates(shape, sizes, flow_rates)
    inverse = 1.0 / np.asarray(sizes, dtype=float)
    slope, intercept = np.polyfit(inverse, rates, 1)
    misfit = rates - (slope * inverse + intercept)
    scale = max(float(np.mean(np.abs(rates))), 1e-300)
    return MooneyPoint(float(slope / factor), float(intercept),
                       float(np.sqrt(np.mean(misfit ** 2)) / scale))


@dataclass(frozen=True)
class SlipFit:
    """``u_s = coefficient (tau_w - yield_stress)^exponent`` fitted to Mooney points."""

    coefficient: float       # m/s per Pa^exponent
    exponent: float
    yield_stress: float      # Pa
    rms_relative_error: float

    def as_table(self) -> dict:
        """The slip law as a ``[drive.slip.<wall>]`` table (SI numbers)."""
        table = {"coefficient": self.coefficient, "exponent": self.exponent}
        if self.yield_stress > 0:
            table["yield_stress"] = self.yield_stress
        return table


def fit_slip_law(wall_stresses, slip_speeds, with_yield_stress: bool = False) -> SlipFit:
    """Fit a power-law slip law (optionally with a slip yield stress) in log space."""
    stress = np.asarray(wall_stresses, dtype=float)
    speed = np.asarray(slip_speeds, dtype=float)
    keep = (stress > 0) & (speed > 0)
    needed = 3 if with_yield_stress else 2
    if keep.sum() < needed:
        raise CaseError("mooney", int(keep.sum()),
                        f"at least {needed} wall stresses with a positive slip speed")
    stress, speed = stress[keep], speed[keep]

    def misfit(p):
        log_beta, exponent = p[0], p[1]
        tau_s = p[2] if with_yield_stress else 0.0
        excess = np.maximum(stress - tau_s, 1e-300)
        return log_beta + exponent * np.log(excess) - np.log(speed)

    slope, intercept = np.polyfit(np.log(stress), np.log(speed), 1)
    start = [intercept, slope] + ([0.5 * stress.min()] if with_yield_stress else [])
    bounds = ([-np.inf, 0.05] + ([0.0] if with_yield_stress else []),
              [np.inf, 10.0] + ([0.999 * stress.min()] if with_yield_stress else []))
    result = least_squares(misfit, start, bounds=bounds, x_scale="jac")
    beta, exponent = math.exp(result.x[0]), float(result.x[1])
    tau_s = float(result.x[2]) if with_yield_stress else 0.0
    rms = float(np.sqrt(np.mean(np.expm1(result.fun) ** 2)))
    return SlipFit(beta, exponent, tau_s, rms)


# --------------------------------------------------------------------------- data files

#: columns of a slip-data file: name -> (pint dimensionality source unit, example)
SLIP_COLUMNS = {
    "wall_shear_stress": ("Pa", "Pa"),
    "radius": ("m", "mm"),
    "gap": ("m", "mm"),
    "flow_rate": (None, "mL/s"),     # m^3/s for pipes, m^2/s (per unit width) for slits
}


@dataclass(frozen=True)
class SlipData:
    """Flow rates measured in passages of several sizes at the same wall stresses."""

    source: str
    shape: str                # "pipe" (radius column) or "slit" (gap column)
    stresses: np.ndarray      # Pa
    sizes: np.ndarray         # m
    flow_rates: np.ndarray    # m^3/s (pipe) or m^2/s (slit)


def is_slip_data(header_line: str) -> bool:
    """Whether a CSV header names a radius or gap column (a Mooney data set)."""
    names = [cell.partition("[")[0].strip().lower().replace(" ", "_")
             for cell in header_line.split(",")]
    return "radius" in names or "gap" in names


def read_slip_data(path) -> SlipData:
    """Read ``wall_shear_stress [Pa], radius [mm] (or gap [mm]), flow_rate [mL/s]``.

    The same wall stresses are measured (or computed) in two or more sizes; ``#`` lines
    and blank lines are skipped. Errors name the file, line and column.
    """
    import csv
    from pathlib import Path

    from .units import registry

    path = Path(path)
    where = path.name
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as error:
        raise CaseError("data file", where, f"a readable UTF-8 CSV file ({error})") from None
    rows = [(number, cells) for number, line in enumerate(text.splitlines(), 1)
            if line.strip() and not line.lstrip().startswith("#")
            for cells in csv.reader([line])]
    if len(rows) < 2:
        raise CaseError(where, "no data rows", "a header and at least two lines of values")
    header_line, header = rows[0]
    columns = []
    for cell in header:
        name, _, rest = cell.partition("[")
        name = name.strip().lower().replace(" ", "_")
        unit = rest.strip().rstrip("]").strip()
        key = f"{where}, line {header_line} (header), column {cell.strip()!r}"
        if name not in SLIP_COLUMNS:
            raise CaseError(key, cell.strip(), "one of " + ", ".join(SLIP_COLUMNS))
        if not unit:
            raise CaseError(key, cell.strip(), f"a unit in brackets, such as '{name} "
                                                f"[{SLIP_COLUMNS[name][1]}]'")
        try:
            units = registry.parse_units(unit.replace("^", "**"))
        except Exception:  # pint raises several types for text it cannot read
            raise CaseError(key, unit, f"a known unit such as {SLIP_COLUMNS[name][1]}") from None
        columns.append((name, units))
    names = [n for n, _ in columns]
    shape = "pipe" if "radius" in names else "slit"
    needed = {"wall_shear_stress", "radius" if shape == "pipe" else "gap", "flow_rate"}
    if set(names) != needed or len(names) != 3:
        raise CaseError(f"{where}, line {header_line} (header)", ",".join(header),
                        "exactly the columns wall_shear_stress, radius (or gap) and flow_rate")
    target = {"wall_shear_stress": "Pa", "radius": "m", "gap": "m",
              "flow_rate": "m**3/s" if shape == "pipe" else "m**2/s"}
    values = {n: [] for n in names}
    for number, cells in rows[1:]:
        if len(cells) != 3:
            raise CaseError(f"{where}, line {number}", ",".join(cells), "3 comma-separated values")
        for (name, units), cell in zip(columns, cells):
            try:
                value = float(registry.Quantity(float(cell), units).to(target[name]).magnitude)
            except ValueError:
                raise CaseError(f"{where}, line {number}, column {name!r}", cell.strip(),
                                "a number") from None
            except Exception:  # a unit of the wrong dimension
                raise CaseError(f"{where} (header), column {name!r}", str(units),
                                f"a unit convertible to {target[name].replace('**', '^')}") from None
            if not (value > 0 and math.isfinite(value)):
                raise CaseError(f"{where}, line {number}, column {name!r}", cell.strip(),
                                "a finite value > 0")
            values[name].append(value)
    return SlipData(where, shape, np.array(values["wall_shear_stress"]),
                    np.array(values["radius" if shape == "pipe" else "gap"]),
                    np.array(values["flow_rate"]))


@dataclass(frozen=True)
class MooneyAnalysis:
    """Slip speeds and the bulk flow curve separated from one data set."""

    stresses: np.ndarray        # Pa, one per Mooney line
    points: list[MooneyPoint]
    slip: SlipFit
    bulk_rates: np.ndarray      # true wall shear rates of the bulk (1/s), Rabinowitsch-corrected


def analyse(data: SlipData, with_yield_stress: bool = False) -> MooneyAnalysis:
    """Group the rows by wall stress, draw Mooney's line at each, fit the slip law, and
    turn the intercepts (apparent wall rates of the bulk) into true wall rates by the
    Weissenberg-Rabinowitsch correction, ``gamma_w = Gamma (3n' + 1) / (4n')`` for pipes
    and ``Gamma (2n' + 1) / (3n')`` for slits, ``n' = d ln tau_w / d ln Gamma``
    (Rabinowitsch 1929, Z. Phys. Chem. A 145)."""
    levels = []
    for stress in np.sort(np.unique(data.stresses)):
        if not levels or stress > levels[-1] * (1 + 1e-6):
            levels.append(stress)
    points, stresses = [], []
    for stress in levels:
        at = np.abs(data.stresses / stress - 1) <= 1e-6
        if len(np.unique(data.sizes[at])) < 2:
            continue
        points.append(slip_at_stress(data.shape, data.sizes[at], data.flow_rates[at]))
        stresses.append(stress)
    if len(points) < 2:
        raise CaseError(data.source, len(points), (
            "at least two wall stresses each measured in two or more radii or gaps "
            "(Mooney's analysis)"))
    stresses = np.array(stresses)
    slip = fit_slip_law(stresses, [p.slip_speed for p in points], with_yield_stress)
    apparent = np.array([p.bulk_rate for p in points])
    if np.any(apparent <= 0):
        raise CaseError(data.source, "negative bulk rate", (
            "data in which the bulk carries part of the flow at every stress (an intercept "
            "below zero means the slip speeds and flow rates disagree)"))
    slope = np.gradient(np.log(stresses), np.log(apparent))
    if data.shape == "pipe":
        bulk = apparent * (3 * slope + 1) / (4 * slope)
    else:
        bulk = apparent * (2 * slope + 1) / (3 * slope)
    return MooneyAnalysis(stresses, points, slip, bulk)


def slip_table(fit: SlipFit, wall: str = "wall") -> str:
    """The slip law as a ``[drive.slip.<wall>]`` case-file table."""
    lines = [f"[drive.slip.{wall}]   # measured slip law: for walls of the same material and "
             "finish only",
             f"coefficient = {fit.coefficient:.6g}   # m/s per Pa^exponent",
             f"exponent = {fit.exponent:.6g}"]
    if fit.yield_stress > 0:
        lines.append(f'yield_stress = "{fit.yield_stress:.6g} Pa"')
    return "\n".join(lines) + "\n"
