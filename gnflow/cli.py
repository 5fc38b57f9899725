"""The command line: parse arguments, call the API, print. No physics here.

Exit codes: 0 success; 2 bad input (one message, no traceback); 3 solved but not
converged; 130 interrupted.
"""

from __future__ import annotations

import argparse
import sys
from importlib import resources
from pathlib import Path

from .errors import CaseError

DEMO_CASE = "paste_slit_die.toml"


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # argparse's own errors: exit 2 with one line
        self.exit(2, f"gnflow: error: {message}\n")


def _build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="gnflow", description=(
        "Laminar flows of generalized Newtonian fluids through passages and gaps."))
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)
    run = sub.add_parser("run", help="solve a case file and write its results")
    run.add_argument("case", help="case file (TOML)")
    run.add_argument("--out", help="results folder (default results/<case file stem>/)")
    run.add_argument("--quiet", action="store_true", help="print only warnings and errors")
    check = sub.add_parser("check", help="validate a case file and print it in SI units")
    check.add_argument("case")
    demo = sub.add_parser("demo", help="run a bundled example case")
    demo.add_argument("--out", help="results folder (default results/demo/)")
    demo.add_argument("--list", action="store_true", help="list the bundled examples")
    demo.add_argument("--example", help="name of a bundled example (default: %s)" % DEMO_CASE)
    verify = sub.add_parser("verify", help="mesh-convergence study of a case")
    verify.add_argument("case")
    verify.add_argument("--levels", type=int, default=4, help="number of meshes (default 4)")
    verify.add_argument("--ratio", type=float, default=2.0, help="refinement ratio (default 2)")
    verify.add_argument("--out", help="results folder (default results/<case stem>-verify/)")
    sweep = sub.add_parser("sweep", help="solve a grid of cases varying dotted case keys")
    sweep.add_argument("case")
    sweep.add_argument("--vary", action="append", required=True, metavar="KEY=START:STOP:COUNT",
                       help="e.g. drive.pressure_gradient=-1kPa/m:-10kPa/m:10 (repeat for a grid)")
    sweep.add_argument("--log", action="store_true", help="geometric spacing")
    group = sweep.add_mutually_exclusive_group()
    group.add_argument("--workers", type=int, help="local worker processes (default: cores)")
    group.add_argument("--scheduler", help="address of a dask.distributed scheduler")
    sweep.add_argument("--plot", help="output to plot against the first varied key")
    sweep.add_argument("--out", help="results folder (default results/<case stem>-sweep/)")
    curve = sub.add_parser("flow-curve", help="flow rate against pressure gradient, for pump "
                           "matching")
    curve.add_argument("case")
    curve.add_argument("--from", dest="start", required=True, help="first value, with units")
    curve.add_argument("--to", dest="stop", required=True, help="last value, with units")
    curve.add_argument("--points", type=int, default=25, help="number of points (default 25)")
    curve.add_argument("--by", choices=("pressure_gradient", "flow_rate"),
                       default="pressure_gradient", help="which quantity the range is of")
    curve.add_argument("--log", action="store_true", help="geometric spacing")
    curve.add_argument("--out", help="results folder (default results/<case stem>-flow-curve/)")
    fit = sub.add_parser("fit", help="fit viscosity models to flow-curve data (CSV)")
    fit.add_argument("data", help="CSV with unit-labelled columns, e.g. 'shear_rate [1/s]'")
    fit.add_argument("--models", nargs="+", help="models to fit (default: all)")
    fit.add_argument("--out", help="results folder (default results/<data stem>-fit/)")
    return parser


def _fmt(value, unit="", digits=5) -> str:
    if value is None:
        return "n/a"
    if isinstance(value, bool):
        return "yes" if value else "no"
    text = f"{value:.{digits}g}"
    return f"{text} {unit}".rstrip()


def format_summary(summary: dict) -> str:
    """The printed summary: key results with units, warnings, assumptions, caution."""
    lines = [f"gnflow: {summary['title']}",
             f"  {summary['model']} fluid, {summary['shape']}; {summary['cells']} cells, "
             f"P{summary['degree']}, {summary['dofs']} unknowns",
             f"  solver: {summary['message']}"]
    rows = []
    if "flow_rate" in summary:
        per_width = summary["shape"] == "slit"
        rows += [
            ("pressure gradient dp/dz", _fmt(summary["pressure_gradient"], "Pa/m")),
            ("flow rate", _fmt(summary["flow_rate"], "m^2/s (per unit width)" if per_width
                               else "m^3/s")),
            ("mean velocity", _fmt(summary["mean_velocity"], "m/s")),
            ("max velocity", _fmt(summary["max_velocity"], "m/s")),
            ("hydraulic diameter", _fmt(summary["hydraulic_diameter"], "m")),
            ("pumping power per length", _fmt(summary["pumping_power_per_length"],
                                              "W/m^2" if per_width else "W/m")),
        ]
    if "torque_per_length" in summary:
        rows += [("torque per length (inner)", _fmt(summary["torque_per_length"], "N*m/m")),
                 ("power per length", _fmt(summary["power_per_length"], "W/m"))]
    for name, value in summary["wall_shear_stress"]["per_wall"].items():
        rows.append((f"wall shear stress, {name}", _fmt(value, "Pa")))
    for name, value in summary["wall_shear_rate"]["per_wall"].items():
        rows.append((f"wall shear rate, {name}", _fmt(value, "1/s")))
    if "unyielded_fraction" in summary:
        rows.append(("unyielded area fraction", _fmt(summary["unyielded_fraction"], "", 4)))
    if summary.get("regularisation"):
        r = summary["regularisation"]
        rows.append((f"regularisation ({r['method']})", _fmt(r["parameter"], r["unit"], 4)
                     + f" [{r['chosen']}]"))
        if r.get("error_estimate") is not None:
            rows.append(("regularisation error (est.)", f"{100 * r['error_estimate']:.3g} %"))
    if "reynolds_number" in summary:
        rows += [("Reynolds number", _fmt(summary["reynolds_number"], "", 4)
                  + f"  ({summary['reynolds_definition']})"),
                 ("Fanning friction factor", _fmt(summary["fanning_friction_factor"], "", 4))]
    if "taylor_number" in summary:
        rows.append(("Taylor number", _fmt(summary["taylor_number"], "", 4)))
    width = max(len(r[0]) for r in rows)
    lines += [f"  {name:<{width}}  {value}" for name, value in rows]
    for warning in summary["warnings"]:
        lines.append(f"  WARNING: {warning}")
    lines.append(f"  assumes: {summary['assumptions']}")
    lines.append(f"  caution: {summary['caution']}")
    return "\n".join(lines)


def _progress_line(entry) -> None:
    """One overwritten line on a terminal while the solver iterates."""
    sharpness = (f", regularisation {entry.regularisation_parameter:.3g}"
                 if entry.regularisation_parameter else "")
    print(f"\r  {entry.method} iteration {entry.iteration}: relative residual "
          f"{entry.residual:.2e}{sharpness}   ", end="", file=sys.stderr, flush=True)


def _run_case(case_path, out, quiet: bool) -> int:
    from .case import load_case
    from .export import write_outputs
    from .solver import solve

    case = load_case(case_path)
    out_dir = Path(out) if out else Path("results") / Path(case_path).stem
    progress = _progress_line if sys.stderr.isatty() and not quiet else None
    solution = solve(case, progress=progress)
    if progress:
        print(file=sys.stderr)
    summary = solution.summary()
    written = write_outputs(solution, summary, out_dir)
    if quiet:
        for warning in summary["warnings"]:
            print(f"WARNING: {warning}", file=sys.stderr)
    else:
        print(format_summary(summary))
        print(f"  wrote {out_dir}/: {', '.join(written)}")
    if not solution.converged:
        print(f"gnflow: {solution.message}", file=sys.stderr)
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
        return "m" if key not in ("shape", "eccentricity", "file", "length_unit") else ""
    if section == "drive":
        if key == "flow_rate":
            return "m^2/s" if case.geometry.shape == "slit" else "m^3/s"
        return {"pressure_gradient": "Pa/m", "wall_speed": "m/s",
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
    print(f"{case_path}: valid. Interpreted in SI units:")
    print(format_case(case))
    return 0


def _demo(args) -> int:
    examples = sorted(p.name for p in resources.files("gnflow").joinpath("examples").iterdir()
                      if p.name.endswith(".toml"))
    if args.list:
        print("\n".join(examples))
        return 0
    name = args.example or DEMO_CASE
    if name not in examples:
        raise CaseError("--example", name, "one of " + ", ".join(examples))
    with resources.as_file(resources.files("gnflow").joinpath("examples", name)) as path:
        out = args.out or str(Path("results") / "demo")
        print(f"gnflow demo: running the bundled example {name}")
        return _run_case(path, out, False)


def main(argv: list[str] | None = None) -> int:
    parser = _build_parser()
    args = parser.parse_args(argv)
    try:
        if args.command == "run":
            return _run_case(args.case, args.out, args.quiet)
        if args.command == "check":
            return _check(args.case)
        if args.command == "demo":
            return _demo(args)
        if args.command == "verify":
            from .verify import run_verify_command
            return run_verify_command(args.case, args.levels, args.ratio, args.out)
        if args.command == "sweep":
            from .sweep import run_sweep_command
            return run_sweep_command(args.case, args.vary, args.log, args.workers,
                                     args.scheduler, args.out, args.plot)
        if args.command == "flow-curve":
            from .sweep import run_flow_curve_command
            return run_flow_curve_command(args.case, args.start, args.stop, args.points,
                                          args.by, args.out, args.log)
        if args.command == "fit":
            from .fit import run_fit_command
            return run_fit_command(args.data, args.models, args.out)
    except CaseError as err:
        print(f"gnflow: error: {err}", file=sys.stderr)
        return 2
    except BrokenPipeError:  # output piped into a command that stopped reading
        sys.stderr.close()
        return 0
    except KeyboardInterrupt:
        print("gnflow: interrupted; results of this run were not written", file=sys.stderr)
        return 130
    return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
