"""The command line: parse arguments, call the API, print. No physics here.

Exit codes: 0 success; 2 bad input (one message, no traceback); 3 solved but not
converged; 130 interrupted.
"""

from __future__ import annotations

import argparse
import contextlib
import difflib
import io
import re
import sys
from importlib import resources
from pathlib import Path

from .errors import CaseError

DEMO_CASE = "paste_slit_die.toml"
QUIET_HELP = "print only warnings and errors"


def _example_names() -> list[str]:
    """The bundled example cases, without the .toml suffix."""
    folder = resources.files("gnflow").joinpath("examples")
    return sorted(p.name.removesuffix(".toml") for p in folder.iterdir()
                  if p.name.endswith(".toml"))


#: a value such as "-1 kPa/m" or "-2e3" after an option is a value, not an option: none of
#: gnflow's options starts with a digit or a point
_NEGATIVE_VALUE = re.compile(r"^-\.?\d")


class _Parser(argparse.ArgumentParser):
    """argparse with gnflow's manners: one-line errors with a "did you mean", and
    negative values with units accepted after an option."""

    def __init__(self, *args, **kwargs):
        kwargs.setdefault("allow_abbrev", False)  # "--ou" must not silently mean "--out"
        super().__init__(*args, **kwargs)
        self._negative_number_matcher = _NEGATIVE_VALUE

    def _all_names(self) -> list[str]:
        """Every option and subcommand name of this parser and its subcommands."""
        names = list(self._option_string_actions)
        for action in self._actions:
            if isinstance(action, argparse._SubParsersAction):
                for name, sub in action.choices.items():
                    names.append(name)
                    names += sub._all_names()
        return names

    def _names_in_use(self) -> list[str]:
        """The names a hint may suggest: those of the subcommand on the command line (the
        root parser reports its unrecognised arguments), else every name."""
        for action in self._actions:
            if isinstance(action, argparse._SubParsersAction):
                line = getattr(self, "command_line", None) or sys.argv[1:]
                given = [a for a in line if a in action.choices]
                if given:
                    return action.choices[given[0]]._all_names()
        return self._all_names()

    def error(self, message):  # argparse's own errors: exit 2 with one line
        words = re.findall(r"(?:^|\s|')(-{0,2}[A-Za-z][\w-]*)", message.split(":", 1)[-1])
        known = self._names_in_use()
        hints = [difflib.get_close_matches(w, known, n=1, cutoff=0.6) for w in words
                 if w not in known]
        hint = next((h[0] for h in hints if h), None)
        suffix = f" (did you mean {hint}?)" if hint else ""
        self.exit(2, f"gnflow: error: {message}{suffix}\n")


def _build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="gnflow", description=(
        "Laminar flows of generalized Newtonian fluids through passages and gaps."))
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)
    run = sub.add_parser("run", help="solve a case file and write its results")
    run.add_argument("case", help="case file (TOML)")
    run.add_argument("--out", help="results folder (default results/<case file stem>/)")
    run.add_argument("--quiet", action="store_true", help=QUIET_HELP)
    check = sub.add_parser("check", help="validate a case file and print it in SI units")
    check.add_argument("case", help="case file (TOML)")
    check.add_argument("--quiet", action="store_true", help="print only errors")
    section = sub.add_parser("section", help=(
        "draw a section given in the case file (ellipse, triangle, polygon, "
        "circular-sector, rounded rectangle) with its named walls and mesh, before any solve"))
    section.add_argument("case", help="case file (TOML) with a drawn section")
    section.add_argument("--out", help="PNG file (default results/<case stem>-section.png)")
    section.add_argument("--quiet", action="store_true", help="print only errors")
    demo = sub.add_parser("demo", help="run a bundled example case")
    demo.add_argument("--out", help="results folder (default results/demo/)")
    demo.add_argument("--list", action="store_true", help="list the bundled examples")
    demo.add_argument("--example", metavar="NAME", help=(
        f"a bundled example, with or without .toml; one of: {', '.join(_example_names())} "
        f"(default {DEMO_CASE.removesuffix('.toml')})"))
    demo.add_argument("--quiet", action="store_true", help=QUIET_HELP)
    verify = sub.add_parser("verify", help="mesh-convergence study of a case")
    verify.add_argument("case", help="case file (TOML)")
    verify.add_argument("--levels", type=int, default=4,
                        help="number of meshes, 2 to 8 (default 4)")
    verify.add_argument("--ratio", type=float, default=2.0,
                        help="refinement ratio between meshes, > 1 (default 2)")
    verify.add_argument("--out", help="results folder (default results/<case stem>-verify/)")
    verify.add_argument("--quiet", action="store_true", help=QUIET_HELP)
    sweep = sub.add_parser("sweep", help="solve a grid of cases varying dotted case keys")
    sweep.add_argument("case", help="case file (TOML)")
    sweep.add_argument("--vary", action="append", required=True, metavar="KEY=FROM..TO",
                       help="a key and the ends of its range, e.g. "
                            "drive.pressure_gradient=-1kPa/m..-10kPa/m (repeat for a grid; "
                            "the older KEY=START:STOP:COUNT is still read)")
    sweep.add_argument("--points", type=int, action="append", metavar="N",
                       help="values per --vary, ends included (default 5); once for all, "
                            "or once per --vary in order")
    sweep.add_argument("--log", action="store_true", help="geometric spacing")
    group = sweep.add_mutually_exclusive_group()
    group.add_argument("--workers", type=int, help="local worker processes (default: cores)")
    group.add_argument("--scheduler", help="address of a dask.distributed scheduler")
    sweep.add_argument("--plot", action="append", metavar="COLUMN",
                       help="summary column to plot against the first varied key, e.g. "
                            "flow_rate, pressure_drop_per_length, unyielded_fraction, "
                            "max_velocity, wall_shear_rate_mean, torque_per_length "
                            "(repeatable; default: the response of the varied drive)")
    sweep.add_argument("--out", help="results folder (default results/<case stem>-sweep/)")
    sweep.add_argument("--quiet", action="store_true", help=QUIET_HELP)
    for name, deprecated in (("system-curve", False), ("flow-curve", True)):
        curve = sub.add_parser(name, help=(
            "deprecated name of system-curve" if deprecated else
            "pressure drop per length against flow rate of a passage, for pump matching"))
        curve.add_argument("case", help="case file (TOML) of an axial passage")
        curve.add_argument("--from", dest="start", required=True,
                           help="first value, with units (e.g. \"-1 kPa/m\" or \"0.5 L/s\")")
        curve.add_argument("--to", dest="stop", required=True, help="last value, with units")
        curve.add_argument("--points", type=int, default=25, help="number of points (default 25)")
        curve.add_argument("--by", choices=("pressure_gradient", "flow_rate"),
                           default="pressure_gradient",
                           help="which quantity the range is of: pressure_gradient (dp/dz, "
                                "default) or flow_rate")
        curve.add_argument("--log", action="store_true", help="geometric spacing")
        curve.add_argument("--out", help="results folder (default "
                                         "results/<case stem>-system-curve/)")
        curve.add_argument("--quiet", action="store_true", help=QUIET_HELP)
    fit = sub.add_parser("fit", help="fit viscosity models to measured flow-curve data (CSV)")
    fit.add_argument("data", help="CSV with unit-labelled columns, e.g. 'shear_rate [1/s]' "
                                  "and 'shear_stress [Pa]' or 'viscosity [mPa*s]'")
    fit.add_argument("--models", nargs="+", metavar="MODEL",
                     help="models to fit (default: every one the data can determine): "
                          "newtonian, power-law, carreau, carreau-yasuda, cross, bingham, "
                          "herschel-bulkley")
    fit.add_argument("--out", help="results folder (default results/<data stem>-fit/)")
    fit.add_argument("--quiet", action="store_true", help=QUIET_HELP)
    return parser


def _fmt(value, unit="", digits=5) -> str:
    if value is None:
        return "n/a"
    if isinstance(value, bool):
        return "yes" if value else "no"
    text = f"{value:.{digits}g}"
    return f"{text} {unit}".rstrip()


_DIRECTION_WORDS = {"+z": "toward +z", "-z": "toward -z", "none": "none (no net flow)"}


def _axial_rows(summary: dict) -> list[tuple[str, str]]:
    per_width = summary["shape"] == "slit"
    power_unit = "W/m^2" if per_width else "W/m"
    rows = [
        ("flow direction", _DIRECTION_WORDS[summary["flow_direction"]]
         + "; speeds below are magnitudes"),
        ("pressure gradient dp/dz", _fmt(summary["pressure_gradient"], "Pa/m")),
        ("pressure drop per length", _fmt(summary["pressure_drop_per_length"], "Pa/m")
         + (" (along the flow)" if summary["pressure_drop_per_length"] >= 0 else
            " (negative: the pressure rises along the flow, which the moving walls drive)")),
        ("flow rate", _fmt(abs(summary["flow_rate"]), "m^2/s (per unit width)" if per_width
                           else "m^3/s")),
        ("mean velocity", _fmt(summary["mean_velocity"], "m/s")),
        ("peak velocity", _fmt(summary["max_velocity"], "m/s")),
        ("hydraulic diameter", _fmt(summary["hydraulic_diameter"], "m")),
    ]
    power = summary["power_per_length"]
    if "pumping_power_per_length" in summary:
        rows.append(("pumping power per length", _fmt(summary["pumping_power_per_length"],
                                                      power_unit)))
    if power["walls"]:
        if "pumping_power_per_length" not in summary:
            rows.append(("pressure work per length", _fmt(power["pressure"], power_unit)))
        rows.append(("moving-wall work per length", _fmt(power["walls"], power_unit)))
    start = summary.get("flow_start_pressure_gradient")
    if start:
        rows.append(("flow starts at |dp/dz|", _fmt(start["value"], "Pa/m")
                     + f"  ({start['source']})"))
    return rows


def _wall_rows(summary: dict) -> list[tuple[str, str]]:
    stress, rate = summary["wall_shear_stress"], summary["wall_shear_rate"]
    directions = stress.get("force_direction", {})
    moving = summary.get("moving_walls", ())
    flow = summary.get("flow_direction")
    rows = [("wall shear stress", "magnitudes; per wall = |axial force on it| / perimeter"
             if "flow_rate" in summary else "magnitudes, azimuthal, on each cylinder")]
    for name, value in stress["per_wall"].items():
        text = _fmt(value, "Pa")
        direction = directions.get(name)
        if direction in ("+z", "-z") and flow in ("+z", "-z") and direction != flow:
            why = "the moving wall drives the flow" if name in moving else \
                "backflow along this wall"
            text += f"  (force on the wall toward {direction}, against the flow: {why})"
        rows.append((f"  {name}", text))
    rows += [("  mean, max", f"{_fmt(stress['mean'], 'Pa')}, {_fmt(stress['max'], 'Pa')}")]
    for name, value in rate["per_wall"].items():
        rows.append((f"wall shear rate, {name}", _fmt(value, "1/s")))
    return rows


def _dimensionless_rows(summary: dict) -> list[tuple[str, str]]:
    rows = []
    if "reynolds_number" in summary:
        rows.append(("Reynolds number", _fmt(summary["reynolds_number"], "", 4)
                     + f"  ({summary['reynolds_definition']})"))
    if "plastic_reynolds_number" in summary:
        rows += [("plastic Reynolds number", _fmt(summary["plastic_reynolds_number"], "", 4)
                  + "  (rho V D_h / mu_p)"),
                 ("Hedstrom number", _fmt(summary["hedstrom_number"], "", 4)
                  + "  (rho tau_y D_h^2 / mu_p^2)")]
    if "fanning_friction_factor" in summary:
        rows.append(("Fanning friction factor", _fmt(summary["fanning_friction_factor"], "", 4)))
    if "taylor_number" in summary:
        rows.append(("Taylor number", _fmt(summary["taylor_number"], "", 4)))
    if "laminar_limit" in summary:
        limit = summary["laminar_limit"]
        compared = {"plastic_reynolds_number": "plastic Reynolds number"}.get(
            limit["compared"], "Reynolds number")
        rows.append(("laminar check", f"{summary['laminar_check']}: {compared} against "
                     f"{_fmt(limit['reynolds_number'], '', 4)} ({limit['criterion']})"))
    elif "taylor_number" in summary:
        rows.append(("laminar check", f"{summary['laminar_check']}: Taylor number against "
                     "1708 (narrow gap, Taylor 1923)"))
    elif "laminar_check" in summary:
        rows.append(("laminar check", summary["laminar_check"]))
    return rows


def _heat_slip_rows(summary: dict) -> list[tuple[str, str]]:
    """Viscous heating and wall slip, when the case has them: the numbers that say how
    far the flow is from the isothermal, no-slip picture."""
    rows = []
    heat = summary.get("heat")
    if heat and "max_temperature_rise" in heat:
        rows += [("temperature rise, max", _fmt(heat["max_temperature_rise"], "K")
                  + f"  (max temperature {_fmt(heat['max_temperature'], 'K')})"),
                 ("temperature rise, mean", _fmt(heat["mean_temperature_rise"], "K"))]
        if heat.get("nahme_griffith_number") is not None:
            rows.append(("Nahme-Griffith number", _fmt(heat["nahme_griffith_number"], "", 4)))
        if heat.get("brinkman_number") is not None:
            rows.append(("Brinkman number", _fmt(heat["brinkman_number"], "", 4)))
    slip = summary.get("slip") or {}
    mean = summary.get("mean_velocity")
    for name, wall in slip.items():
        if not isinstance(wall, dict) or "slip_speed" not in wall:
            continue
        speed = wall["slip_speed"]
        text = _fmt(abs(speed), "m/s")
        if mean:
            text += f"  ({100 * abs(speed) / mean:.3g} % of the mean velocity)"
        if "torque_per_length" in summary and speed:   # coaxial: along +theta
            text += ("; the fluid leads the wall" if speed > 0 else
                     "; the fluid lags the wall") + " (+theta: a positive angular speed)"
        elif speed and summary.get("flow_direction") in ("+z", "-z"):
            along = (speed > 0) == (summary["flow_direction"] == "+z")
            text += ("; the fluid runs ahead of the wall" if along else
                     "; the fluid runs behind the wall, against the net flow")
        rows.append((f"slip speed, {name}", text))
    return rows


def _adapted_note(summary: dict) -> str:
    """`` (adapted: ...)`` when the default 1-D mesh was adapted, else nothing."""
    adapted = summary.get("mesh_adapted")
    if not adapted:
        return ""
    return (f" (adapted from the default {adapted['default_cells']}, whose estimated "
            f"relative error was {adapted['estimate_default_mesh']:.1e})")


def format_summary(summary: dict) -> str:
    """The printed summary: key results with units, notes, warnings and assumptions.

    The cautions come separately (:func:`format_cautions`), after the list of files, so
    that the printout ends with them."""
    lines = [f"gnflow: {summary['title']}",
             f"  {summary['model']} fluid, {summary['shape']}; {summary['cells']} cells"
             f"{_adapted_note(summary)}, P{summary['degree']}, {summary['dofs']} unknowns",
             f"  solver: {summary['message']}"]
    rows = _axial_rows(summary) if "flow_rate" in summary else []
    if "torque_per_length" in summary:
        rows += [("torque per length (inner)", _fmt(summary["torque_per_length"], "N*m/m")),
                 ("power per length", _fmt(summary["power_per_length"], "W/m"))]
    rows += _wall_rows(summary)
    if "unyielded_fraction" in summary:
        shown = _fmt(summary["unyielded_fraction"], "", 4)
        spread = summary.get("unyielded_fraction_uncertainty")
        if spread:
            shown += f" +- {spread:.2g}"
        rows.append(("unyielded area fraction", shown))
    if summary.get("regularisation"):
        r = summary["regularisation"]
        rows.append((f"regularisation ({r['method']})", _fmt(r["parameter"], r["unit"], 4)
                     + f" [{r['chosen']}]"))
        if r.get("error_estimate") is not None:
            rows.append(("regularisation error (est.)", f"{100 * r['error_estimate']:.3g} %"))
    if "wall_torque_per_length" in summary:   # helical flow: rotation with axial flow
        for name, value in summary["wall_torque_per_length"].items():
            rows.append((f"torque per length, {name}", _fmt(value, "N*m/m")
                         + "  (signed, about the cylinder's axis)"))
        power = summary.get("power_per_length") or {}
        if isinstance(power, dict) and power.get("rotation") is not None:
            rows.append(("rotation power per length", _fmt(power["rotation"], "W/m")))
    rows += _heat_slip_rows(summary)
    rows += _dimensionless_rows(summary)
    width = max(len(r[0]) for r in rows)
    lines += [f"  {name:<{width}}  {value}" for name, value in rows]
    lines += [f"  note: {note}" for note in summary.get("notes", ())]
    lines += [f"  WARNING: {warning}" for warning in summary["warnings"]]
    lines.append(f"  assumes: {summary['assumptions']}")
    return "\n".join(lines)


def format_cautions(cautions) -> str:
    """The caution lines that end every printout of design numbers."""
    return "\n".join(f"  caution: {text}" for text in cautions)


def _progress_line(entry) -> None:
    """One overwritten line on a terminal while the solver iterates."""
    sharpness = (f", regularisation {entry.regularisation_parameter:.3g}"
                 if entry.regularisation_parameter else "")
    print(f"\r  {entry.method} iteration {entry.iteration}: relative residual "
          f"{entry.residual:.2e}{sharpness}   ", end="", file=sys.stderr, flush=True)


def _run_case(case_path, out, quiet: bool) -> int:
    from . import solve
    from .case import load_case
    from .export import write_outputs

    case = load_case(case_path)
    out_dir = Path(out) if out else Path("results") / Path(case_path).stem
    progress = _progress_line if sys.stderr.isatty() and not quiet else None
    results = solve(case, progress=progress)
    if progress:
        print(file=sys.stderr)
    summary = results.summary()
    written = write_outputs(results, summary, out_dir)
    if quiet:
        for warning in summary["warnings"]:
            print(f"WARNING: {warning}", file=sys.stderr)
    else:
        print(format_summary(summary))
        print(f"  wrote {out_dir}/: {', '.join(written)}")
        print(format_cautions(summary["cautions"]))
    if not results.converged:
        print(f"gnflow: {results.message}", file=sys.stderr)
        return 3
    return 0


def _si_unit(section: str, key: str, case) -> str:
    from .case import MODEL_KEYS
    from .units import si_unit

    if section == "fluid":
        if key == "consistency":
            return si_unit("consistency", case.fluid.model.flow_index)
        dims = {k: d for k, (d, _) in MODEL_KEYS[case.fluid.name].items()}
        dims.update(density="density", temperature="temperature")
        dimension = dims.get(key)
        return si_unit(dimension) if dimension and dimension != "dimensionless" else ""
    if section == "geometry":
        if key == "area":
            return "m^2"
        if key in ("shape", "eccentricity", "file", "length_unit", "walls", "angle"):
            return ""
        drawn = case.geometry.drawing is not None and key not in ("area", "inscribed_diameter")
        # a drawn section's keys are shown as the case gave them (with their own units)
        return "" if drawn else "m"
    if section == "heat":
        return {"conductivity": "W/(m*K)", "wall_temperature": "K",
                "temperature_coefficient": "1/K", "reference_temperature": "K"}.get(key, "")
    if section == "drive":
        if key == "flow_rate":
            return "m^2/s" if case.geometry.shape == "slit" else "m^3/s"
        return {"pressure_gradient": "Pa/m", "wall_speed": "m/s", "slip": "",
                "inner_angular_speed": "rad/s", "outer_angular_speed": "rad/s"}.get(key, "")
    return ""


def format_case(case) -> str:
    """The interpreted case, one dotted key a line, every number in SI with its unit."""
    lines = [f"title: {case.title}"]
    for section, table in case.to_si().items():
        if not isinstance(table, dict):
            continue
        for key, value in table.items():
            unit = _si_unit(section, key, case)
            if isinstance(value, dict):
                shown = ", ".join(f"{k} = {_fmt(v, unit, 8) if isinstance(v, float) else v}"
                                  for k, v in value.items())
            elif isinstance(value, float):
                shown = _fmt(value, unit, 8)
            else:
                shown = str(value)
            lines.append(f"  {section}.{key} = {shown}")
    return "\n".join(lines)


def _check(case_path) -> int:
    from .case import load_case

    case = load_case(case_path)
    if case.geometry.shape == "mesh":  # read and check the mesh file as run would
        from .meshfile import read_case_section
        read_case_section(case.geometry, case.drive.wall_speed)
    print(f"{case_path}: valid. Interpreted in SI units:")
    print(format_case(case))
    for notice in case.notices:
        print(f"  notice: {notice}")
    return 0


def _section(case_path, out, quiet: bool) -> int:
    """Draw a drawn section and its mesh to a PNG (written to a temporary name first)."""
    import os
    import tempfile

    from . import drawing
    from .case import load_case

    case = load_case(case_path)
    if getattr(case.geometry, "drawing", None) is None:
        raise CaseError("geometry.shape", case.geometry.shape, message=(
            f"geometry.shape: {case.geometry.shape!r} is not a drawn section; 'gnflow section' "
            f"draws {', '.join(drawing.SHAPES)} and rectangles with a corner_radius"))
    mesh, walls = drawing.mesh(case.geometry.drawing, case.mesh.cells, case.mesh.degree,
                               case.mesh.wall_refinement)
    target = Path(out) if out else Path("results") / f"{Path(case_path).stem}-section.png"
    target.parent.mkdir(parents=True, exist_ok=True)
    handle, temporary = tempfile.mkstemp(suffix=".png", dir=target.parent)
    os.close(handle)
    try:
        drawing.draw_png(case.geometry.drawing, mesh, walls, temporary)
        os.chmod(temporary, 0o666 & ~_umask())
        os.replace(temporary, target)
    finally:
        if os.path.exists(temporary):
            os.remove(temporary)
    if not quiet:
        print(f"{case_path}: {case.geometry.shape} with walls {', '.join(sorted(walls))}; "
              f"{mesh.t.shape[1]} triangles -> {target}")
    return 0


def _umask() -> int:
    import os
    current = os.umask(0)
    os.umask(current)
    return current


def _demo(args) -> int:
    examples = _example_names()
    if args.list:
        print("\n".join(examples))
        return 0
    name = (args.example or DEMO_CASE).removesuffix(".toml")
    if name not in examples:
        close = [e for e in examples if name and name in e][:1] or difflib.get_close_matches(
            name, examples, n=1)
        hint = f"did you mean {close[0]}? " if close else ""
        raise CaseError("--example", name, message=(
            f"--example {name!r}: no such bundled example; {hint}"
            "'gnflow demo --list' lists them"))
    with resources.as_file(resources.files("gnflow").joinpath("examples", name + ".toml")) \
            as path:
        out = args.out or str(Path("results") / "demo")
        if not args.quiet:
            print(f"gnflow demo: running the bundled example {name}")
        return _run_case(path, out, args.quiet)


def main(argv: list[str] | None = None) -> int:
    import warnings
    parser = _build_parser()
    parser.command_line = list(sys.argv[1:] if argv is None else argv)
    args = parser.parse_args(argv)
    # numerical warnings (overflow in an extreme iterate, deprecations inside libraries)
    # are not messages for the user: every failure they lead to is reported by the
    # solver's own checks as one line with exit code 3
    warnings.filterwarnings("ignore", category=RuntimeWarning)
    warnings.filterwarnings("ignore", category=DeprecationWarning)
    try:
        if args.command == "run":
            return _run_case(args.case, args.out, args.quiet)
        if args.command == "check":
            if args.quiet:
                with contextlib.redirect_stdout(io.StringIO()):
                    return _check(args.case)
            return _check(args.case)
        if args.command == "demo":
            return _demo(args)
        if args.command == "section":
            return _section(args.case, args.out, args.quiet)
        if args.command == "verify":
            from .verify import run_verify_command
            return run_verify_command(args.case, args.levels, args.ratio, args.out,
                                      quiet=args.quiet)
        if args.command == "sweep":
            from .sweep import run_sweep_command
            return run_sweep_command(args.case, args.vary, args.log, args.workers,
                                     args.scheduler, args.out, args.plot, args.points,
                                     quiet=args.quiet)
        if args.command in ("system-curve", "flow-curve"):
            from .sweep import run_system_curve_command
            if args.command == "flow-curve":
                print("gnflow: note: flow-curve is deprecated (a rheologist's flow curve is "
                      "stress against shear rate); use system-curve", file=sys.stderr)
            return run_system_curve_command(args.case, args.start, args.stop, args.points,
                                            args.by, args.out, args.log, quiet=args.quiet)
        if args.command == "fit":
            from .fit import run_fit_command
            return run_fit_command(args.data, args.models, args.out, quiet=args.quiet)
    except CaseError as err:
        print(f"gnflow: error: {err}", file=sys.stderr)
        return 2
    except ArithmeticError as err:
        # a last line of defence: the models and the solver guard overflow where it arises
        print(f"gnflow: not solved: the numbers of this case leave the floating-point range "
              f"({type(err).__name__}: {str(err)[:80]}); check the units and sizes",
              file=sys.stderr)
        return 3
    except BrokenPipeError:  # output piped into a command that stopped reading
        sys.stderr.close()
        return 0
    except KeyboardInterrupt:
        print("gnflow: interrupted; results of this run were not written", file=sys.stderr)
        return 130
    return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
