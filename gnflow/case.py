"""Case files: parse and validate a TOML case into frozen dataclasses in SI.

All checks of user input live here, so that the later stages can trust what they get.
A problem raises :class:`gnflow.errors.CaseError` naming the key, the value and what
was expected; unknown keys are errors with a "did you mean" hint.

Sizes are bounded before anything else looks at a value: a case file of at most
:data:`MAX_FILE_BYTES`, tables and arrays nested at most :data:`MAX_DEPTH` deep, at most
:data:`MAX_ITEMS` values in all, strings of units at most 200 characters (see
:mod:`gnflow.units`), file names at most :data:`MAX_PATH` characters, and integers
within the float range. What is legal but odd (a deprecated key name, a bare number that
gives an unusual size) is kept in :attr:`Case.notices`.

Schema notes beyond the README's table:

* ``[fluid.regularisation] method``: ``"papanastasiou"`` (key ``exponent``, the ``m`` of
  Papanastasiou (1987), J. Rheol. 31, 385, in s), ``"bi-viscous"`` (key
  ``critical_rate``, in 1/s: the rate below which the fluid is Newtonian with viscosity
  ``tau_y / critical_rate``, the bi-viscous model of O'Donovan & Tanner (1984),
  J. Non-Newtonian Fluid Mech. 15, 75-83 (pages recalled from memory)), or ``"none"``:
  exact yield-stress flow, no parameter keys. With ``"none"``, ``FluidSpec.regularisation
  == "none"`` and ``FluidSpec.model`` is still a (Papanastasiou) regularised model object,
  from which the exact method reads the yield stress and the viscous parameters.
* ``shape = "annulus"`` takes ``[drive] inner_angular_speed`` and
  ``outer_angular_speed`` (angular speed, default 0) beside its axial drive, at any
  eccentricity: helical flow. They are kept in ``DriveSpec.inner_angular_speed`` and
  ``DriveSpec.outer_angular_speed`` (rad/s).
* ``[mesh] wall_refinement`` (>= 1, default 1): the ratio of the largest cell to the cells
  at a wall. The former name ``grading`` is still read, with a deprecation notice.

>>> case = Case.from_dict({
...     "fluid": {"model": "power-law", "consistency": "2.5 Pa*s^0.45", "flow_index": 0.45},
...     "geometry": {"shape": "pipe", "radius": "25 mm"},
...     "drive": {"pressure_gradient": "-3 kPa/m"}})
>>> case.geometry.radius, case.drive.pressure_gradient, case.mesh.cells
(0.025, -3000.0, 200)
"""

from __future__ import annotations

import copy
import difflib
import functools
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from . import rheology
from .errors import CaseError, check_positive, shorten, shown_key
from .units import quantity, si_unit

from . import drawing  # noqa: E402  (imports case only inside its functions)

SHAPES = ("slit", "pipe", "annulus", "coaxial-cylinders", "rectangle", "mesh", *drawing.SHAPES)
AXIAL_SHAPES = ("slit", "pipe", "annulus", "rectangle", "mesh", *drawing.SHAPES)
WALLS = {"slit": ("bottom", "top"), "pipe": ("wall",), "annulus": ("inner", "outer"),
         "rectangle": ("bottom", "top", "left", "right")}

#: model -> {key: (dimension, default)}; a default of ... means required
MODEL_KEYS: dict[str, dict[str, tuple[str, Any]]] = {
    "newtonian": {"viscosity": ("viscosity", ...)},
    "power-law": {"consistency": ("consistency", ...), "flow_index": ("dimensionless", ...)},
    "carreau": {"zero_shear_viscosity": ("viscosity", ...),
                "infinite_shear_viscosity": ("viscosity", 0.0),
                "time_constant": ("time", ...), "flow_index": ("dimensionless", ...)},
    "carreau-yasuda": {"zero_shear_viscosity": ("viscosity", ...),
                       "infinite_shear_viscosity": ("viscosity", 0.0),
                       "time_constant": ("time", ...), "flow_index": ("dimensionless", ...),
                       "transition_exponent": ("dimensionless", ...)},
    "cross": {"zero_shear_viscosity": ("viscosity", ...),
              "infinite_shear_viscosity": ("viscosity", 0.0),
              "time_constant": ("time", ...), "rate_exponent": ("dimensionless", ...)},
    "bingham": {"yield_stress": ("stress", ...), "plastic_viscosity": ("viscosity", ...)},
    "herschel-bulkley": {"yield_stress": ("stress", ...), "consistency": ("consistency", ...),
                         "flow_index": ("dimensionless", ...)},
}
FLUID_COMMON = ("model", "density", "regularisation", "fitted_rate_range", "temperature",
                "temperature_law", "activation_energy", "reference_temperature",
                "sutherland_constant", "fitted_temperature_range")
TEMPERATURE_LAWS = ("arrhenius", "sutherland")
GEOMETRY_KEYS = {
    "slit": {"gap": "length"},
    "pipe": {"radius": "length"},
    "annulus": {"inner_radius": "length", "outer_radius": "length", "eccentricity": None},
    "coaxial-cylinders": {"inner_radius": "length", "outer_radius": "length"},
    "rectangle": {"width": "length", "height": "length"},
    "mesh": {"file": None, "length_unit": None},
}
# drawn sections (gnflow.drawing) validate their own keys; a rectangle may be rounded
GEOMETRY_KEYS.update({shape: dict.fromkeys(drawing.KEYS[shape]) for shape in drawing.SHAPES})
GEOMETRY_KEYS["rectangle"]["corner_radius"] = None
#: 200 uniform cells (401 P2 unknowns) by default. On them 136 of the 208 smooth cases of
#: bench/smooth_1d.py reach 1e-8 in flow rate or torque (worst 6.8e-6: power law n = 0.1 in
#: an annulus of radius ratio 0.1; and n > 1 wherever the zero-stress point falls inside a
#: cell); the default mesh is therefore adapted after its solve where the error estimate
#: asks for it (gnflow.solver.adapt, MeshSpec.adaptive), and then all 208 reach 1e-8
DEFAULT_CELLS_1D = 200
MAX_CELLS_1D = 200_000
MAX_CELLS_2D = 4_000
#: cells of a generated 2-D section in all: an elongated rectangle or a thin annulus
#: multiplies mesh.cells by its aspect ratio, and must not ask for millions of cells
MAX_SECTION_CELLS = 500_000
#: bounds on the raw input, checked before any value is interpreted
MAX_FILE_BYTES = 1_000_000
MAX_DEPTH = 6          # top level -> section -> sub-table -> value: 4 is the deepest legal
MAX_ITEMS = 10_000
MAX_PATH = 1024
MAX_TITLE = 200
#: geometry lengths, m: powers of a length up to the fourth (flow rates, torques) stay
#: well inside the float range
MIN_LENGTH, MAX_LENGTH = 1e-9, 1e5
#: regularisation methods a case may ask for: those of the rheology models, and exact flow
REGULARISATION_METHODS = tuple(dict.fromkeys((*rheology.REGULARISATIONS, "none")))
#: (low, high) of the SI values that a bare number of each dimension usually has; outside
#: them a bare number gets the notice that bare numbers are SI (common practice, not law:
#: e.g. a pipe radius above 2 m or a viscosity above 1e5 Pa s is rare in laminar duties)
PLAUSIBLE_BARE_SI = {
    "length": (1e-6, 2.0), "velocity": (0.0, 100.0), "time": (1e-6, 1e4),
    "angular_speed": (0.0, 1e4), "stress": (0.0, 1e5), "pressure_gradient": (0.0, 1e8),
    "viscosity": (1e-6, 1e5), "consistency": (1e-6, 1e5), "density": (0.05, 2.5e4),
    "flow_rate": (0.0, 10.0), "flow_rate_per_width": (0.0, 10.0),
    "molar_energy": (1e3, 1e6), "temperature": (150.0, 1200.0),
}


def _suggest(key: str, allowed) -> str:
    if len(key) > 60:  # nothing that long is a misspelling of a key
        return ""
    close = difflib.get_close_matches(key, list(allowed), n=1, cutoff=0.6)
    return f' (did you mean "{close[0]}"?)' if close else ""


def _check_keys(table: dict, allowed, where: str) -> None:
    for key in table:
        if key not in allowed:
            choices = ", ".join(sorted(allowed))
            raise CaseError(f"{where}.{key}" if where else key, message=(
                f"unknown key {(where + '.') if where else ''}{shown_key(key)}"
                f"{_suggest(key, allowed)}; "
                f"{'[' + where + ']' if where else 'the top level'} takes: {choices}"))


def _within_size(mapping: dict) -> bool:
    """Whether :func:`_check_size` passes ``mapping``: no table or array nested
    MAX_DEPTH deep and at most MAX_ITEMS values, counted level by level without the key
    paths that only an error needs (a study checks every grid point's case)."""
    level, count, depth = [mapping], 0, 0
    while level:
        count += len(level)
        if count > MAX_ITEMS:
            return False
        below = []
        for value in level:
            if isinstance(value, (dict, list)):
                if depth >= MAX_DEPTH:
                    return False
                below.extend(value.values() if isinstance(value, dict) else value)
        level, depth = below, depth + 1
    return True


def _check_size(mapping: dict) -> None:
    """Refuse input nested deeper than MAX_DEPTH or holding more than MAX_ITEMS values,
    walking it without recursion (a document nested a thousand deep must not end in a
    RecursionError, nor be copied)."""
    if _within_size(mapping):
        return
    # the walk that names the first offending key
    stack, count = [((), mapping)], 0
    while stack:
        path, value = stack.pop()
        count += 1
        if count > MAX_ITEMS:
            raise CaseError("case", message=f"the case holds more than {MAX_ITEMS} values; "
                            "a case file is a few dozen keys")
        if isinstance(value, (dict, list)):
            if len(path) >= MAX_DEPTH:
                key = ".".join(shown_key(str(p), 20) for p in path[:MAX_DEPTH])
                raise CaseError(key, message=f"{key}: nested more than {MAX_DEPTH} deep; a "
                                "case file's values are numbers, strings or short lists")
            items = value.items() if isinstance(value, dict) else enumerate(value)
            stack.extend((path + (k,), v) for k, v in items)


def _table(doc: dict, name: str, required: bool = True) -> dict:
    value = doc.get(name)
    if value is None:
        if required:
            raise CaseError(name, message=f"missing section [{name}]")
        return {}
    if not isinstance(value, dict):
        raise CaseError(name, value, f"a table [{name}]")
    return value


def _number(table: dict, key: str, where: str, default=...) -> float:
    if key not in table:
        if default is ...:
            raise CaseError(f"{where}.{key}", message=f"missing key {where}.{key}")
        return default
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise CaseError(f"{where}.{key}", value, "a plain number")
    try:
        number = float(value)
    except OverflowError:  # an integer of more than 308 digits
        raise CaseError(f"{where}.{key}", value, "a number below 1e308 in size") from None
    if not math.isfinite(number):
        raise CaseError(f"{where}.{key}", value, "a finite number")
    return number


def _whole(table: dict, key: str, where: str, default: int, low: int, high: int) -> int:
    value = table.get(key, default)
    if isinstance(value, bool) or not isinstance(value, int):
        raise CaseError(f"{where}.{key}", value, f"a whole number from {low} to {high}")
    if not low <= value <= high:
        raise CaseError(f"{where}.{key}", value, f"a whole number from {low} to {high}")
    return value


def _choice(table: dict, key: str, where: str, choices, default=...) -> str:
    if key not in table:
        if default is ...:
            raise CaseError(f"{where}.{key}", message=(
                f"missing key {where}.{key}; choose one of: {', '.join(choices)}"))
        return default
    value = table[key]
    if not isinstance(value, str) or value not in choices:
        hint = _suggest(value, choices) if isinstance(value, str) else ""
        raise CaseError(f"{where}.{key}", value, "one of " + ", ".join(f'"{c}"' for c in choices)
                        + hint)
    return value


def _flag(table: dict, key: str, where: str, default: bool) -> bool:
    value = table.get(key, default)
    if not isinstance(value, bool):
        raise CaseError(f"{where}.{key}", value, "true or false")
    return value


def _dimensional(table: dict, key: str, where: str, dimension: str, default=...,
                 flow_index: float | None = None) -> float:
    if key not in table:
        if default is ...:
            unit = si_unit(dimension, flow_index)
            raise CaseError(f"{where}.{key}", message=(
                f"missing key {where}.{key} ({dimension.replace('_', ' ')}, in {unit})" if unit
                else f"missing key {where}.{key} (a plain number)"))
        return default
    if dimension == "dimensionless":
        return _number(table, key, where)
    return quantity(table[key], dimension, f"{where}.{key}", flow_index)


# --------------------------------------------------------------------------- dataclasses

@dataclass(frozen=True)
class FluidSpec:
    """The fluid: a rheology model in SI, and what goes with it.

    ``regularisation`` (yield-stress models only) is one of
    :data:`REGULARISATION_METHODS`; ``"none"`` asks for exact yield-stress flow, and then
    ``model`` is the Papanastasiou-regularised model whose yield stress and viscous
    parameters the exact method reads.
    """

    model: rheology.Model
    density: float | None = None
    regularisation: str | None = None          # yield-stress models only
    regularisation_parameter: float | None = None  # None: chosen from the case's scales
    fitted_rate_range: tuple[float, float] | None = None
    temperature: float | None = None           # K, the case's fluid temperature
    temperature_law: dict | None = None        # the law and its constants, SI
    fitted_temperature_range: tuple[float, float] | None = None

    @property
    def name(self) -> str:
        return self.model.name


@dataclass(frozen=True)
class GeometrySpec:
    shape: str
    gap: float | None = None
    radius: float | None = None
    inner_radius: float | None = None
    outer_radius: float | None = None
    eccentricity: float = 0.0
    width: float | None = None
    height: float | None = None
    file: Path | None = None
    length_unit: float = 1.0
    drawing: object = None            # a gnflow.drawing.Drawing for drawn sections

    @property
    def is_axial(self) -> bool:
        return self.shape in AXIAL_SHAPES

    @property
    def is_one_dimensional(self) -> bool:
        return self.shape in ("slit", "pipe", "coaxial-cylinders") or (
            self.shape == "annulus" and self.eccentricity == 0.0)


@dataclass(frozen=True)
class DriveSpec:
    """What drives the flow, SI. Axial shapes: one of ``pressure_gradient`` (dp/dz, Pa/m)
    and ``flow_rate``, and ``wall_speed`` (m/s by wall name). Angular speeds (rad/s):
    the cylinders of ``coaxial-cylinders``, or an ``annulus``'s walls (helical flow)."""

    pressure_gradient: float | None = None
    flow_rate: float | None = None
    wall_speed: dict[str, float] = field(default_factory=dict)
    inner_angular_speed: float = 0.0
    outer_angular_speed: float = 0.0
    slip: dict = field(default_factory=dict)   # wall name -> gnflow.solver.slip.SlipLaw


@dataclass(frozen=True)
class MeshSpec:
    """``wall_refinement``: the ratio of the largest cell to the cells at a wall (1 =
    uniform). ``adaptive``: the 1-D default mesh (no ``cells`` nor ``wall_refinement``
    given, P2), which a smooth non-Newtonian solve may adapt (:mod:`gnflow.solver.adapt`)."""

    cells: int = 200
    degree: int = 2
    wall_refinement: float = 1.0
    adaptive: bool = False

    @property
    def grading(self) -> float:
        """The former name of :attr:`wall_refinement`, for code not yet moved to it."""
        return self.wall_refinement


@dataclass(frozen=True)
class SolverSpec:
    method: str = "newton"
    tolerance: float = 1e-10
    max_iterations: int = 100
    linear_solver: str = "auto"


@dataclass(frozen=True)
class OutputSpec:
    plots: bool = True
    fields: bool = True


@dataclass(frozen=True)
class Case:
    """A validated case, every value in SI.

    ``raw`` keeps the mapping the case was built from, so that a study can change one
    dotted key and build the case again (see :meth:`with_value`). ``notices`` are one-line
    remarks on legal but doubtful input (deprecated key names, bare numbers that give an
    unusual size), for the printed summary and its warnings.
    """

    title: str
    fluid: FluidSpec
    geometry: GeometrySpec
    drive: DriveSpec
    mesh: MeshSpec = MeshSpec()
    solver: SolverSpec = SolverSpec()
    output: OutputSpec = OutputSpec()
    source: Path | None = None
    raw: dict = field(default_factory=dict, repr=False, compare=False)
    notices: tuple[str, ...] = field(default=(), compare=False)
    heat: object = None               # a gnflow.solver.heat.HeatSpec, from [heat]

    @classmethod
    def from_dict(cls, mapping: dict, source: str | Path | None = None, *,
                  copy_raw: bool = True) -> "Case":
        """Build a case from the same structure as the TOML file.

        The case keeps a deep copy of ``mapping`` as :attr:`raw`; ``copy_raw=False`` keeps
        ``mapping`` itself, for a caller that built it for this case alone and does not
        change it afterwards (a study's grid point: the copy would be its second).
        """
        if not isinstance(mapping, dict):
            raise CaseError("case", mapping, "a table of sections")
        _check_size(mapping)
        source = Path(source) if source is not None else None
        _check_keys(mapping, ("title", "fluid", "geometry", "drive", "mesh", "solver",
                              "output", "heat"), "")
        title = mapping.get("title", source.stem if source else "untitled case")
        if not isinstance(title, str) or len(title) > MAX_TITLE or not title.isprintable():
            raise CaseError("title", title, f"one line of printable text of at most "
                            f"{MAX_TITLE} characters")
        geometry = _parse_geometry(_table(mapping, "geometry"), source)
        fluid = _parse_fluid(_table(mapping, "fluid"))
        drive = _parse_drive(_table(mapping, "drive"), geometry)
        mesh, mesh_notices = _parse_mesh(_table(mapping, "mesh", required=False), geometry)
        solver = _parse_solver(_table(mapping, "solver", required=False))
        output = _parse_output(_table(mapping, "output", required=False))
        notices = (*mesh_notices, *_bare_number_notices(mapping, fluid, geometry))
        if drive.slip and (fluid.regularisation == "none" or (
                geometry.shape == "annulus"
                and (drive.inner_angular_speed or drive.outer_angular_speed))):
            raise CaseError("drive.slip", message=(
                "drive.slip: wall slip is not yet solved with rotation in an annulus "
                '(helical flow) or with the exact method (method = "none"); leave one of '
                "them out"))
        if fluid.regularisation == "none" and geometry.shape == "annulus" and (
                drive.inner_angular_speed or drive.outer_angular_speed):
            # the conic program has no in-plane motion (helical flow is solved regularised)
            raise CaseError("fluid.regularisation.method", "none", (
                "an annulus without inner_angular_speed / outer_angular_speed for the exact "
                "method (helical flow needs the regularised default)"))
        heat = None
        if "heat" in mapping:
            heat = _parse_heat(_table(mapping, "heat"), fluid, _wall_names(geometry))
            combined = [what for what, present in (
                ("wall slip (drive.slip)", bool(drive.slip)),
                ("rotation (drive.*_angular_speed)", geometry.shape == "annulus" and bool(
                    drive.inner_angular_speed or drive.outer_angular_speed)),
                ('exact yield-stress flow (method = "none")', fluid.regularisation == "none"))
                if present]
            if combined:
                raise CaseError("heat", message=(
                    f"[heat]: viscous heating is not yet solved together with "
                    f"{' or '.join(combined)}; leave one of them out"))
        return cls(title, fluid, geometry, drive, mesh, solver, output, source,
                   copy.deepcopy(mapping) if copy_raw else mapping, notices, heat)

    def with_value(self, dotted_key: str, value) -> "Case":
        """A new case with one dotted key (e.g. ``"fluid.flow_index"``) set to ``value``."""
        mapping = copy.deepcopy(self.raw)
        assign(mapping, dotted_key, value)
        return Case.from_dict(mapping, self.source)

    @property
    def is_helical(self) -> bool:
        """An annulus with a rotating wall besides its axial drive."""
        return self.geometry.shape == "annulus" and (
            self.drive.inner_angular_speed != 0.0 or self.drive.outer_angular_speed != 0.0)

    def to_si(self) -> dict:
        """The interpreted case in SI, as plain data (for ``gnflow check`` and summaries)."""
        fluid = {"model": self.fluid.name, **self.fluid.model.parameters()}
        if self.fluid.density is not None:
            fluid["density"] = self.fluid.density
        if self.fluid.regularisation == "none":
            fluid["regularisation"] = {"method": "none"}
        elif self.fluid.regularisation:
            fluid["regularisation"] = {"method": self.fluid.regularisation,
                                       "parameter": self.fluid.regularisation_parameter
                                       or "auto"}
        if self.fluid.fitted_rate_range:
            fluid["fitted_rate_range"] = list(self.fluid.fitted_rate_range)
        if self.fluid.temperature_law:
            fluid["temperature"] = self.fluid.temperature
            fluid["temperature_law"] = self.fluid.temperature_law
        geometry = {k: (str(v) if isinstance(v, Path) else v)
                    for k, v in self.geometry.__dict__.items()
                    if v is not None and not (k == "length_unit" and v == 1.0)
                    and not (k == "eccentricity" and self.geometry.shape != "annulus")
                    and k != "drawing"}
        if self.geometry.drawing is not None:   # drawn: the keys as given, and the outcome
            drawn = self.geometry.drawing
            geometry.update({k: v for k, v in self.raw.get("geometry", {}).items()
                             if k != "shape"})
            geometry.update({"area": drawn.area, "inscribed_diameter": drawn.inscribed_diameter,
                             "walls": ", ".join(drawn.walls)})
        drive = {k: v for k, v in self.drive.__dict__.items() if v not in (None, {})}
        if self.drive.slip:
            drive["slip"] = {name: ", ".join(f"{k} = {v:.6g}" for k, v in law.__dict__.items()
                                             if v is not None and not (k == "exponent" and
                                                                       law.length is not None))
                             for name, law in self.drive.slip.items()}
        if not self.geometry.is_axial:
            drive = {k: v for k, v in drive.items() if "angular" in k or k == "slip"}
        elif not (self.geometry.shape == "annulus" and self.is_helical):
            drive = {k: v for k, v in drive.items() if "angular" not in k}
        out = {"title": self.title, "fluid": fluid, "geometry": geometry, "drive": drive,
                "mesh": dict(self.mesh.__dict__), "solver": dict(self.solver.__dict__),
                "output": dict(self.output.__dict__)}
        if self.heat is not None:
            h = self.heat
            out["heat"] = {"conductivity": h.conductivity, "wall_temperature": h.wall_temperature,
                           "insulated": ", ".join(h.insulated) or "none",
                           "temperature_law": h.shift.law if h.shift else "none"}
            if h.shift is not None and h.shift.law == "exponential":
                out["heat"].update(temperature_coefficient=h.shift.constant,
                                   reference_temperature=h.shift.reference_temperature)
        return out


def assign(mapping: dict, dotted_key: str, value) -> None:
    """Set a dotted key in a case mapping, in place.

    Setting one of the exclusive drives (``drive.pressure_gradient``,
    ``drive.flow_rate``) removes the other, so a study can drive a case either way.
    """
    parts = dotted_key.split(".")
    table = mapping
    for part in parts[:-1]:
        table = table.setdefault(part, {})
        if not isinstance(table, dict):
            raise CaseError(dotted_key, value, "a key inside a table")
    table[parts[-1]] = value
    exclusive = {"drive.pressure_gradient": "flow_rate", "drive.flow_rate": "pressure_gradient"}
    if dotted_key in exclusive and isinstance(mapping.get("drive"), dict):
        mapping["drive"].pop(exclusive[dotted_key], None)


def load_case(path: str | Path) -> Case:
    """Read and validate a TOML case file.

    Raises :class:`CaseError` naming the file for a missing file or a TOML syntax
    error, and naming the key for any bad value.
    """
    path = Path(path)
    shown = shown_key(str(path), 80)
    if len(str(path)) > MAX_PATH:
        raise CaseError(str(path), message=f"{shown}: a case file name of more than "
                        f"{MAX_PATH} characters")
    try:
        if path.exists() and not path.is_dir() and not path.is_file():
            # a FIFO or a device such as /dev/zero: reading it could block or never end
            raise CaseError(str(path), message=f"{shown}: not a regular file, expected a "
                            "case file")
        with path.open("rb") as handle:
            data = handle.read(MAX_FILE_BYTES + 1)
    except FileNotFoundError:
        raise CaseError(str(path), message=f"{shown}: no such case file") from None
    except IsADirectoryError:
        raise CaseError(str(path), message=f"{shown}: is a folder, expected a case file") from None
    except (OSError, ValueError) as err:  # ValueError: a NUL character in the name
        reason = err.strerror if isinstance(err, OSError) and err.strerror else str(err)
        raise CaseError(str(path), message=f"{shown}: cannot read ({reason})") from None
    if len(data) > MAX_FILE_BYTES:
        raise CaseError(str(path), message=f"{shown}: larger than {MAX_FILE_BYTES} bytes; "
                        "a case file is a few dozen lines")
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise CaseError(str(path), message=f"{shown}: not a UTF-8 text file") from None
    if not text.strip():
        raise CaseError(str(path), message=f"{shown}: the case file is empty; it needs "
                        "[fluid], [geometry] and [drive] sections")
    try:
        mapping = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise CaseError(str(path), message=f"{shown}: TOML syntax error: {err}") from None
    except RecursionError:
        raise CaseError(str(path), message=f"{shown}: arrays or tables nested more than "
                        f"{MAX_DEPTH} deep") from None
    except ValueError as err:  # e.g. an integer of more than 4300 digits
        raise CaseError(str(path), message=f"{shown}: cannot read a value "
                        f"({str(err).split(':')[0]})") from None
    if not mapping:  # only comments and blank lines
        raise CaseError(str(path), message=f"{shown}: the case file is empty; it needs "
                        "[fluid], [geometry] and [drive] sections")
    return Case.from_dict(mapping, path)


# --------------------------------------------------------------------------- sections

def _parse_fluid(table: dict) -> FluidSpec:
    model_name = _choice(table, "model", "fluid", tuple(MODEL_KEYS))
    keys = MODEL_KEYS[model_name]
    yield_stress_model = model_name in ("bingham", "herschel-bulkley")
    allowed = set(keys) | set(FLUID_COMMON)
    if not yield_stress_model:
        allowed.discard("regularisation")
    try:
        _check_keys(table, allowed, "fluid")
    except CaseError as err:
        key = err.key.split(".", 1)[1]
        other = [m for m, k in MODEL_KEYS.items() if key in k]
        if key == "regularisation":
            raise CaseError(err.key, message=(
                f"fluid.regularisation applies to yield-stress models (bingham, "
                f"herschel-bulkley), not to {model_name}")) from None
        if other:
            raise CaseError(err.key, message=(
                f"fluid.{key} is not a parameter of the {model_name} model "
                f"(it belongs to {', '.join(other)}); {model_name} takes: "
                f"{', '.join(keys)}")) from None
        raise
    values: dict[str, float] = {}
    flow_index = None
    if "flow_index" in keys:
        flow_index = _dimensional(table, "flow_index", "fluid", "dimensionless")
        values["flow_index"] = flow_index
    for key, (dimension, default) in keys.items():
        if key in values:
            continue
        values[key] = _dimensional(table, key, "fluid", dimension, default, flow_index)
    density = None
    if "density" in table:
        density = check_positive("fluid.density", _dimensional(table, "density", "fluid", "density"))
    method = parameter = None
    if yield_stress_model:
        method, parameter = _parse_regularisation(table.get("regularisation", {}))
        # exact flow ("none") still carries a regularised model: the exact method reads
        # its yield stress and viscous parameters, and estimates start from it
        values["regularisation"] = "papanastasiou" if method == "none" else method
        # a placeholder until the solver chooses one from the case's scales
        values["regularisation_parameter"] = parameter or 1.0
    rate_range = None
    if "fitted_rate_range" in table:
        rate_range = _parse_range(table["fitted_rate_range"], "fluid.fitted_rate_range", "rate",
                                  '["0.1 1/s", "1000 1/s"]')
    try:
        model = rheology.MODELS[model_name](**values)
    except CaseError as err:
        raise CaseError(f"fluid.{err.key}", message=f"fluid.{err}") from None
    model, temperature, law, temperature_range = _parse_temperature(table, model)
    return FluidSpec(model, density, method, parameter, rate_range, temperature, law,
                     temperature_range)


def _parse_temperature(table: dict, model):
    """Apply a fluid definition's temperature law at the case's temperature.

    ``temperature_law = "arrhenius"``: every viscosity is shifted by
    ``a_T = exp(E_a / R (1/T - 1/T_ref))`` (time-temperature superposition, see
    :func:`gnflow.temperature.at_temperature`). ``"sutherland"`` (Newtonian gases): the
    definition's ``viscosity`` is the value at ``reference_temperature``.
    """
    from . import temperature as laws

    where = "fluid"
    temperature_range = None
    if "fitted_temperature_range" in table:
        temperature_range = _parse_range(table["fitted_temperature_range"],
                                         "fluid.fitted_temperature_range", "temperature",
                                         '["10 degC", "60 degC"]')
    if "temperature_law" not in table:
        for key in ("temperature", "activation_energy", "reference_temperature",
                    "sutherland_constant"):
            if key in table:
                raise CaseError(f"fluid.{key}", message=(
                    f"fluid.{key} needs fluid.temperature_law (\"arrhenius\" or "
                    "\"sutherland\") to say how the viscosity depends on temperature"))
        return model, None, None, temperature_range
    law_name = _choice(table, "temperature_law", where, TEMPERATURE_LAWS)
    reference = _dimensional(table, "reference_temperature", where, "temperature")
    if not reference > 0:
        raise CaseError("fluid.reference_temperature", table["reference_temperature"],
                        "an absolute temperature above 0 K")
    temperature = _dimensional(table, "temperature", where, "temperature", reference)
    if not temperature > 0:
        raise CaseError("fluid.temperature", table["temperature"],
                        "an absolute temperature above 0 K")
    if law_name == "arrhenius":
        if "sutherland_constant" in table:
            raise CaseError("fluid.sutherland_constant", message=(
                "fluid.sutherland_constant belongs to temperature_law = \"sutherland\""))
        energy = _dimensional(table, "activation_energy", where, "molar_energy")
        shift = laws.Arrhenius(energy, reference).shift(temperature)
        law = {"law": "arrhenius", "activation_energy": energy,
               "reference_temperature": reference, "shift_factor": float(shift)}
        model = laws.at_temperature(model, shift)
    else:
        if model.name != "newtonian":
            raise CaseError("fluid.temperature_law", "sutherland",
                            '"arrhenius" for a non-Newtonian fluid (Sutherland\'s law is for '
                            "Newtonian gases)")
        if "activation_energy" in table:
            raise CaseError("fluid.activation_energy", message=(
                "fluid.activation_energy belongs to temperature_law = \"arrhenius\""))
        constant = check_positive("fluid.sutherland_constant", _dimensional(
            table, "sutherland_constant", where, "temperature"))
        sutherland = laws.Sutherland(model.viscosity_value, reference, constant)
        law = {"law": "sutherland", "sutherland_constant": constant,
               "reference_temperature": reference,
               "shift_factor": float(sutherland.shift(temperature))}
        model = rheology.Newtonian(float(sutherland.viscosity(temperature)))
    return model, temperature, law, temperature_range


def _parse_regularisation(table) -> tuple[str, float | None]:
    """The method and its parameter (None: chosen from the flow's scales).

    ``papanastasiou``: ``exponent`` m (s), Papanastasiou (1987), J. Rheol. 31, 385.
    ``bi-viscous``: ``critical_rate`` (1/s), below which the fluid is Newtonian with the
    viscosity ``tau_y / critical_rate``: O'Donovan & Tanner (1984), J. Non-Newtonian Fluid
    Mech. 15, 75-83 (pages recalled from memory). ``none``: exact yield-stress flow, no
    parameter.
    """
    where = "fluid.regularisation"
    if not isinstance(table, dict):
        raise CaseError(where, table, 'a table such as { method = "papanastasiou" }')
    method = _choice(table, "method", where, REGULARISATION_METHODS, "papanastasiou")
    if method == "none":
        for key in ("exponent", "critical_rate"):
            if key in table:
                raise CaseError(f"{where}.{key}", message=(
                    f"{where}.{key} does not apply to method = \"none\" (exact yield-stress "
                    "flow has no regularisation parameter)"))
        _check_keys(table, ("method",), where)
        return method, None
    key = "exponent" if method == "papanastasiou" else "critical_rate"
    other = "critical_rate" if key == "exponent" else "exponent"
    if other in table:
        raise CaseError(f"{where}.{other}", message=(
            f"{where}.{other} does not apply to the {method} method; it takes {key}"))
    _check_keys(table, ("method", key), where)
    if key not in table:
        return method, None
    dimension = "time" if key == "exponent" else "rate"
    value = _dimensional(table, key, where, dimension)
    return method, check_positive(f"{where}.{key}", value)


def _parse_range(value, key: str, dimension: str, example: str) -> tuple[float, float]:
    what = dimension.replace("_", " ")
    if not isinstance(value, list) or len(value) != 2:
        raise CaseError(key, value, f"two values of {what}, e.g. {example}")
    low, high = (quantity(v, dimension, key) for v in value)
    if not 0 < low < high:
        raise CaseError(key, value, f"0 < lowest {what} < highest {what}")
    return (low, high)


def _parse_geometry(table: dict, source: Path | None) -> GeometrySpec:
    shape = _choice(table, "shape", "geometry", SHAPES)
    keys = GEOMETRY_KEYS[shape]
    _check_keys(table, ("shape", *keys), "geometry")
    values: dict[str, Any] = {}
    for key, dimension in keys.items():
        if dimension is None:
            continue
        values[key] = check_positive(f"geometry.{key}",
                                     _dimensional(table, key, "geometry", dimension))
        if not MIN_LENGTH <= values[key] <= MAX_LENGTH:
            raise CaseError(f"geometry.{key}", table[key], "a length from 1 nm to 100 km (the "
                            "areas and moments of larger or smaller sections leave the float "
                            "range)")
    if shape in ("annulus", "coaxial-cylinders"):
        if values["inner_radius"] >= values["outer_radius"]:
            raise CaseError("geometry.inner_radius", table.get("inner_radius"),
                            f"a value below geometry.outer_radius "
                            f"({shorten(table.get('outer_radius'), 30)})")
    if shape == "annulus":
        e = _number(table, "eccentricity", "geometry", 0.0)
        if not 0.0 <= e < 1.0:
            raise CaseError("geometry.eccentricity", e,
                            "a number in [0, 1): centre offset / (outer_radius - inner_radius)")
        values["eccentricity"] = e
    if shape == "mesh":
        values.update(_parse_mesh_file(table, source))
    if shape in drawing.SHAPES or (shape == "rectangle" and "corner_radius" in table):
        try:
            values = {"drawing": drawing.parse(shape, table)}
        except (ArithmeticError, ValueError) as err:   # a drawing no float can hold
            raise CaseError("geometry", shape, f"a drawing of ordinary size ({err})") from None
    return GeometrySpec(shape, **values)


def _parse_mesh_file(table: dict, source: Path | None) -> dict:
    if "file" not in table:
        raise CaseError("geometry.file", message="missing key geometry.file (a mesh file "
                        "meshio reads: .msh, .vtu, .xdmf, ...)")
    name = table["file"]
    if not isinstance(name, str) or not name.strip():
        raise CaseError("geometry.file", name, "a file name (string)")
    if len(name) > MAX_PATH or "\0" in name:
        raise CaseError("geometry.file", name, f"a file name of at most {MAX_PATH} "
                        "characters, without NUL characters")
    path = Path(name)
    if not path.is_absolute():
        path = (source.parent if source else Path.cwd()) / path
    try:
        found = path.is_file()
    except OSError as err:  # e.g. a name part longer than the file system allows
        raise CaseError("geometry.file", name, f"a readable file name ({err.strerror})") from None
    if not found:
        raise CaseError("geometry.file", name, f"an existing mesh file (looked for "
                        f"{shown_key(str(path), 120)})")
    unit = 1.0
    if "length_unit" in table:
        unit = check_positive("geometry.length_unit",
                              quantity(table["length_unit"] if not isinstance(
                                  table["length_unit"], str) or table["length_unit"][:1].isdigit()
                                  else "1 " + table["length_unit"], "length",
                                  "geometry.length_unit"))
    return {"file": path, "length_unit": unit}


def _parse_drive(table: dict, geometry: GeometrySpec) -> DriveSpec:
    where = "drive"
    if not geometry.is_axial:
        _check_keys(table, ("inner_angular_speed", "outer_angular_speed", "slip"), where)
        inner = _dimensional(table, "inner_angular_speed", where, "angular_speed", 0.0)
        outer = _dimensional(table, "outer_angular_speed", where, "angular_speed", 0.0)
        if inner == outer:
            raise CaseError("drive.inner_angular_speed", table.get("inner_angular_speed", 0),
                            "an angular speed different from drive.outer_angular_speed "
                            "(equal speeds give rigid rotation, no shear)")
        # slip of the fluid relative to a cylinder, azimuthal (gnflow.solver.slip)
        slip = _parse_slip(table["slip"], _wall_names(geometry)) if "slip" in table else {}
        return DriveSpec(inner_angular_speed=inner, outer_angular_speed=outer, slip=slip)
    rotation = ("inner_angular_speed", "outer_angular_speed")
    if geometry.shape != "annulus":
        for key in rotation:
            if key in table:
                raise CaseError(f"drive.{key}", message=(
                    f"unknown key drive.{key} for a {geometry.shape}: angular speeds apply "
                    "to shape = \"annulus\" (helical flow) and \"coaxial-cylinders\""))
    _check_keys(table, ("pressure_gradient", "flow_rate", "wall_speed", "slip", *rotation), where)
    inner = _dimensional(table, "inner_angular_speed", where, "angular_speed", 0.0)
    outer = _dimensional(table, "outer_angular_speed", where, "angular_speed", 0.0)
    has_gradient, has_rate = "pressure_gradient" in table, "flow_rate" in table
    if has_gradient == has_rate:
        raise CaseError("drive", message=(
            "drive: give exactly one of pressure_gradient (dp/dz, e.g. \"-3 kPa/m\") and "
            f"flow_rate; got {'both' if has_gradient else 'neither'}"))
    wall_speed = _parse_wall_speed(table.get("wall_speed", {}), geometry)
    gradient = rate = None
    if has_gradient:
        gradient = _dimensional(table, "pressure_gradient", where, "pressure_gradient")
        if gradient == 0 and not any(wall_speed.values()):
            raise CaseError("drive.pressure_gradient", table["pressure_gradient"],
                            "a non-zero pressure gradient, or a wall_speed (nothing drives "
                            "the axial flow)")
    else:
        dimension = "flow_rate_per_width" if geometry.shape == "slit" else "flow_rate"
        try:
            rate = _dimensional(table, "flow_rate", where, dimension)
        except CaseError as err:
            if geometry.shape == "slit" and "has dimension" in str(err):
                raise CaseError("drive.flow_rate", table["flow_rate"], (
                    "a slit's flow rate, which is per unit width (m^2/s, e.g. "
                    "\"0.5 L/s/m\")")) from None
            raise
        if rate == 0:
            raise CaseError("drive.flow_rate", table["flow_rate"], "a non-zero flow rate")
    slip = _parse_slip(table["slip"], _wall_names(geometry)) if "slip" in table else {}
    return DriveSpec(pressure_gradient=gradient, flow_rate=rate, wall_speed=wall_speed,
                     inner_angular_speed=inner, outer_angular_speed=outer, slip=slip)


def _parse_wall_speed(table, geometry: GeometrySpec) -> dict[str, float]:
    where = "drive.wall_speed"
    if not isinstance(table, dict):
        raise CaseError(where, table, 'a table of wall names and speeds, e.g. { inner = "0.5 m/s" }')
    if geometry.drawing is not None:
        drawing.check_wall_speeds(geometry.drawing, table)
    walls = WALLS.get(geometry.shape)
    if walls is not None:
        for name in table:
            if name not in walls:
                raise CaseError(f"{where}.{name}", message=(
                    f"{where}.{shown_key(name)}: the {geometry.shape} has no wall named "
                    f"{shorten(name)}{_suggest(name, walls)}; its walls are: {', '.join(walls)}"))
    return {name: _dimensional(table, name, where, "velocity") for name in table}


def _parse_mesh(table: dict, geometry: GeometrySpec) -> tuple[MeshSpec, tuple[str, ...]]:
    """The mesh spec, and the notice for the deprecated key ``grading``."""
    _check_keys(table, ("cells", "degree", "wall_refinement", "grading"), "mesh")
    one_d = geometry.is_one_dimensional
    high = MAX_CELLS_1D if one_d else MAX_CELLS_2D
    cells = _whole(table, "cells", "mesh", DEFAULT_CELLS_1D if one_d else 32, 1, high)
    if not one_d and cells < 2:
        raise CaseError("mesh.cells", cells, f"a whole number from 2 to {high}")
    total = _section_cells(geometry, cells)
    if total > MAX_SECTION_CELLS:
        raise CaseError("mesh.cells", cells, f"fewer cells or a less elongated section: "
                        f"this {geometry.shape} would have {total:.3g} cells in all (at most "
                        f"{MAX_SECTION_CELLS})")
    degree = _whole(table, "degree", "mesh", 2, 1, 2)
    notices: tuple[str, ...] = ()
    key = "wall_refinement"
    if "grading" in table:
        if "wall_refinement" in table:
            raise CaseError("mesh.grading", message="mesh.grading is the former name of "
                            "mesh.wall_refinement; give only wall_refinement")
        key = "grading"
        notices = ("mesh.grading is deprecated: write mesh.wall_refinement (same meaning, "
                   "the ratio of the largest cell to the cells at a wall)",)
    refinement = _number(table, key, "mesh", 1.0)
    if not 1.0 <= refinement <= 100.0:
        raise CaseError(f"mesh.{key}", refinement, "a number from 1 (uniform) to 100: the "
                        "ratio of the largest cell to the cells at a wall")
    adaptive = one_d and degree == 2 and not {"cells", "wall_refinement", "grading"} & set(table)
    return MeshSpec(cells, degree, refinement, adaptive), notices


def _section_cells(geometry: GeometrySpec, cells: int) -> float:
    """Cells (quadrilaterals) of the structured 2-D section :mod:`gnflow.geometry` builds
    for ``cells`` across the smallest dimension; ``cells`` for other shapes."""
    g = geometry  # in floats: an aspect ratio of 1e300 must give a large number, not fail
    if g.drawing is not None:
        return float(cells) ** 2   # about cells^2 triangles across a compact drawn section
    if g.shape == "rectangle":
        small = min(g.width, g.height)
        return max(cells * g.width / small, 1.0) * max(cells * g.height / small, 1.0)
    if g.shape == "annulus" and g.eccentricity > 0:
        around = math.pi * (g.inner_radius + g.outer_radius) / (g.outer_radius - g.inner_radius)
        return max(around * cells, 12.0) * cells
    return float(cells)


@functools.lru_cache(maxsize=None)
def _dimensional_keys(shape: str, model: str) -> tuple[tuple[str, str, str], ...]:
    """``(section, key, dimension)`` of the dimensional keys a case of this shape and
    model may give as bare numbers, in the order their notices are listed."""
    dimensional = {"geometry": {k: d for k, d in GEOMETRY_KEYS[shape].items() if d},
                   "fluid": {k: d for k, (d, _) in MODEL_KEYS[model].items()
                             if d != "dimensionless"},
                   "drive": {"pressure_gradient": "pressure_gradient",
                             "flow_rate": "flow_rate_per_width" if shape == "slit"
                             else "flow_rate",
                             "inner_angular_speed": "angular_speed",
                             "outer_angular_speed": "angular_speed"}}
    dimensional["fluid"].update(density="density", temperature="temperature",
                                reference_temperature="temperature",
                                activation_energy="molar_energy")
    return tuple((section, key, dimension) for section, keys in dimensional.items()
                 for key, dimension in keys.items())


def _bare_number_notices(mapping: dict, fluid: FluidSpec, geometry: GeometrySpec):
    """A notice for each bare number (read as SI) outside the usual range of its kind.

    Run on a case that has already validated, so every value looked at is a finite
    number or a string; only bare numbers are judged: a value with units says what the
    user meant.
    """
    checked = [(f"{section}.{key}", mapping[section][key], dimension)
               for section, key, dimension in _dimensional_keys(geometry.shape, fluid.name)
               if key in mapping.get(section, {})]
    walls = mapping.get("drive", {}).get("wall_speed", {})
    checked += [(f"drive.wall_speed.{shown_key(name)}", speed, "velocity")
                for name, speed in walls.items()]
    notices = []
    for key, value, dimension in checked:
        if isinstance(value, bool) or not isinstance(value, (int, float)) or value == 0:
            continue
        low, high = PLAUSIBLE_BARE_SI[dimension]
        size = abs(float(value))
        if low <= size <= high:
            continue
        unit = si_unit(dimension, getattr(fluid.model, "flow_index", 1.0)) or "(no unit)"
        notices.append(f"{key} = {shorten(value)} is a bare number, read as {float(value):g} {unit}: "
                       f"unusually {'large' if size > high else 'small'} for a "
                       f"{dimension.replace('_', ' ')}; bare numbers are SI, so give units "
                       "if another unit was meant")
    return tuple(notices)


def _wall_names(geometry: GeometrySpec) -> tuple[str, ...]:
    """The wall names of a shape (mesh files: read from the file when it is solved, so
    every name is let through here and checked against the file then)."""
    if geometry.drawing is not None:
        return tuple(geometry.drawing.walls)
    if geometry.shape in WALLS:
        return WALLS[geometry.shape]
    if geometry.shape == "coaxial-cylinders":
        return ("inner", "outer")
    return ()


HEAT_KEYS = ("conductivity", "wall_temperature", "insulated", "temperature_coefficient",
             "reference_temperature")
SLIP_KEYS = ("length", "coefficient", "exponent", "yield_stress")


def _parse_heat(table: dict, fluid: FluidSpec, walls):
    """The optional ``[heat]`` section: viscous heating with conduction to the walls.

    ``conductivity`` (W/(m K)); ``wall_temperature``, one temperature for every wall that is
    not insulated or a table per wall; ``insulated``, a list of wall names with no heat flux.
    The viscosity follows the fluid's Arrhenius law (``fluid.temperature_law``) or, without
    one, Nahme's exponential law ``a = exp(-b (T - T_ref))`` with ``temperature_coefficient``
    ``b`` (1/K) and ``reference_temperature`` ``T_ref``, the temperature at which the
    fluid's parameters hold.
    """
    from .specs import HeatSpec, TemperatureShift
    from .temperature import at_temperature
    where = "heat"
    _check_keys(table, HEAT_KEYS, where)
    conductivity = check_positive("heat.conductivity",
                                  _dimensional(table, "conductivity", where, "thermal_conductivity"))
    insulated = table.get("insulated", [])
    if not isinstance(insulated, list) or not all(isinstance(n, str) for n in insulated):
        raise CaseError("heat.insulated", insulated, "a list of wall names, e.g. [\"left\", \"right\"]")
    for name in insulated:
        if name not in walls:
            raise CaseError("heat.insulated", name, "one of the walls: " + ", ".join(walls)
                            + _suggest(name, walls))
    heated = [n for n in walls if n not in insulated]
    if not heated:
        raise CaseError("heat.insulated", insulated, (
            "at least one wall with a temperature: with every wall insulated the heat "
            "generated has nowhere to go and no steady state exists"))
    given = table.get("wall_temperature")
    if given is None:
        raise CaseError("heat.wall_temperature", message=(
            "missing key heat.wall_temperature (a temperature such as \"230 degC\", or a "
            "table per wall)"))
    if isinstance(given, dict):
        _check_keys(given, heated, "heat.wall_temperature")
        missing = [n for n in heated if n not in given]
        if missing:
            raise CaseError("heat.wall_temperature", message=(
                f"heat.wall_temperature: no temperature for wall(s) {', '.join(missing)}; "
                "give one or list them in heat.insulated"))
        temperatures = {n: _dimensional(given, n, "heat.wall_temperature", "temperature")
                        for n in heated}
    else:
        value = _dimensional(table, "wall_temperature", where, "temperature")
        temperatures = {n: value for n in heated}
    for name, value in temperatures.items():
        if not value > 0:
            raise CaseError(f"heat.wall_temperature.{name}", value,
                            "an absolute temperature above 0 K")
    law = fluid.temperature_law
    model = fluid.model
    if law and law.get("law") == "arrhenius":
        if "temperature_coefficient" in table or "reference_temperature" in table:
            raise CaseError("heat.temperature_coefficient", message=(
                "heat.temperature_coefficient: the fluid has an Arrhenius law already "
                "(fluid.temperature_law); give one temperature law, not two"))
        shift = TemperatureShift("arrhenius", law["activation_energy"],
                                 law["reference_temperature"])
        model = at_temperature(model, 1.0 / law["shift_factor"])   # back at the reference
    elif law:
        raise CaseError("fluid.temperature_law", law.get("law"),
                        '"arrhenius" (or none, with heat.temperature_coefficient) for viscous heating')
    elif "temperature_coefficient" in table:
        coefficient = _dimensional(table, "temperature_coefficient", where, "inverse_temperature")
        if not coefficient >= 0:
            raise CaseError("heat.temperature_coefficient", coefficient, "a value >= 0 in 1/K")
        reference = _dimensional(table, "reference_temperature", where, "temperature")
        if not reference > 0:
            raise CaseError("heat.reference_temperature", reference, "an absolute temperature above 0 K")
        shift = TemperatureShift("exponential", coefficient, reference)
    else:
        shift = None   # a viscosity that does not depend on temperature (Brinkman problem)
    return HeatSpec(conductivity, temperatures, tuple(insulated), shift, model)


def _parse_slip(table, walls) -> dict:
    """``[drive.slip.<wall>]``: per-wall slip laws (see :mod:`gnflow.solver.slip`).

    ``length`` (Navier slip length) or ``coefficient`` (m/s per Pa^exponent, SI number; with
    units only for linear slip, e.g. ``"0.2 mm/(s*Pa)"``) with ``exponent`` (default 1);
    ``yield_stress`` (Pa, default 0), the wall stress below which the wall does not slip.
    """
    from .specs import SlipLaw
    if not isinstance(table, dict):
        raise CaseError("drive.slip", table, "a table of walls, e.g. [drive.slip.wall]")
    laws = {}
    for name, spec in table.items():
        where = f"drive.slip.{name}"
        if walls and name not in walls:
            raise CaseError(where, message=(f"{where}: no wall named {shown_key(name)}"
                                            f"{_suggest(name, walls)}; walls: {', '.join(walls)}"))
        if not isinstance(spec, dict):
            raise CaseError(where, spec, "a table with length, or coefficient and exponent")
        _check_keys(spec, SLIP_KEYS, where)
        if ("length" in spec) == ("coefficient" in spec):
            raise CaseError(where, message=(f"{where}: give exactly one of length (Navier "
                                            "slip length) or coefficient (power-law slip)"))
        yield_stress = _dimensional(spec, "yield_stress", where, "stress", 0.0)
        if not yield_stress >= 0:
            raise CaseError(f"{where}.yield_stress", yield_stress, "a stress >= 0")
        if "length" in spec:
            if "exponent" in spec:
                raise CaseError(f"{where}.exponent", message=(
                    f"{where}.exponent belongs to coefficient (power-law slip), not length"))
            length = check_positive(f"{where}.length", _dimensional(spec, "length", where, "length"))
            laws[name] = SlipLaw(length=length, yield_stress=yield_stress)
            continue
        exponent = _number(spec, "exponent", where, 1.0)
        if not 0.05 <= exponent <= 10:
            raise CaseError(f"{where}.exponent", exponent, "a number from 0.05 to 10")
        if exponent == 1.0:
            coefficient = _dimensional(spec, "coefficient", where, "slip_coefficient")
        else:
            coefficient = _number(spec, "coefficient", where)
        laws[name] = SlipLaw(coefficient=check_positive(f"{where}.coefficient", coefficient),
                             exponent=exponent, yield_stress=yield_stress)
    return laws


def _parse_solver(table: dict) -> SolverSpec:
    _check_keys(table, ("method", "tolerance", "max_iterations", "linear_solver"), "solver")
    method = _choice(table, "method", "solver", ("newton", "picard"), "newton")
    tolerance = _number(table, "tolerance", "solver", 1e-10)
    if not 1e-14 <= tolerance <= 1e-2:
        raise CaseError("solver.tolerance", tolerance, "a number from 1e-14 to 1e-2")
    iterations = _whole(table, "max_iterations", "solver", 100, 1, 10_000)
    linear = _choice(table, "linear_solver", "solver", ("auto", "direct", "amg"), "auto")
    return SolverSpec(method, tolerance, iterations, linear)


def _parse_output(table: dict) -> OutputSpec:
    _check_keys(table, ("plots", "fields"), "output")
    return OutputSpec(_flag(table, "plots", "output", True), _flag(table, "fields", "output", True))


__all__ = ["assign", "Case", "FluidSpec", "GeometrySpec", "DriveSpec", "MeshSpec", "SolverSpec",
           "OutputSpec", "load_case"]
