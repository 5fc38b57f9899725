"""Benchmark: how the time and the peak memory of one square-duct solve grow with the
number of unknowns, 10k to 4M (P2), with the fitted power-law exponents.

Each point is one full ``gnflow.solve`` in a fresh interpreter (bench/sections.py
``--one``), so its peak resident memory is its own. The fitted exponent is the
least-squares slope of log(seconds) and log(peak MiB) against log(unknowns); linear
growth has slope 1. Prints a table and writes the log-log plot bench/scaling.png.

    python bench/scaling.py [--cells 50,100,200,500,1000] [--models newtonian,herschel-bulkley]
                            [--timeout 1800] [--plot bench/scaling.png] [--within-input-limit]

The 4M point is above the case files' limit of 500,000 cells (a guard for users); the
measuring processes raise it for themselves unless ``--within-input-limit`` is given.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
from types import SimpleNamespace

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from sections import SHORT, measure


def fitted_exponent(dofs, values) -> float:
    """Slope of the least-squares line through (log dofs, log values)."""
    if len(dofs) < 2:
        return math.nan
    return float(np.polyfit(np.log(dofs), np.log(values), 1)[0])


def plot(table: dict, path: str) -> None:
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    figure, (left, right) = plt.subplots(1, 2, figsize=(10, 4.2))
    for model, rows in table.items():
        dofs = [r["dofs"] for r in rows]
        left.loglog(dofs, [r["seconds"] for r in rows], "o-", label=SHORT.get(model, model))
        right.loglog(dofs, [r["peak_mib"] for r in rows], "s-", label=SHORT.get(model, model))
    for axis, what in ((left, "wall time of one solve (s)"), (right, "peak resident memory (MiB)")):
        all_dofs = sorted({r["dofs"] for rows in table.values() for r in rows})
        if all_dofs:
            # a slope-1 guide through the first point of the first model
            first = next(iter(table.values()))[0]
            key = "seconds" if axis is left else "peak_mib"
            guide = [first[key] * d / first["dofs"] for d in all_dofs]
            axis.loglog(all_dofs, guide, ":", color="0.5", label="linear growth")
        axis.set_xlabel("unknowns")
        axis.set_ylabel(what)
        axis.grid(True, which="both", alpha=0.3)
        axis.legend(fontsize=8)
    figure.suptitle("gnflow: square duct, P2, dp/dz = -1000 Pa/m")
    figure.tight_layout()
    figure.savefig(path, dpi=120)
    plt.close(figure)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", default="50,100,200,500,1000",
                        help="cells per side, comma-separated ((2 cells + 1)^2 unknowns)")
    parser.add_argument("--models", default="newtonian,herschel-bulkley")
    parser.add_argument("--solver", default="auto")
    parser.add_argument("--timeout", type=float, default=1800.0)
    parser.add_argument("--within-input-limit", action="store_true",
                        help="keep the case files' limit of 500,000 cells (refuses the 4M point)")
    parser.add_argument("--plot", default=os.path.join(os.path.dirname(os.path.abspath(__file__)),
                                                       "scaling.png"))
    args = parser.parse_args()
    # the 4M point (1000 cells per side: 2,000,000 triangles) is above the case files'
    # input limit, a guard for users: the measuring processes raise it for themselves
    options = SimpleNamespace(timeout=args.timeout, picard_seconds=0.0,
                              beyond_input_limit=not args.within_input_limit)
    sizes = [int(c) for c in args.cells.split(",") if c]
    models = [m for m in args.models.split(",") if m]
    print(f"gnflow scaling, square duct P2, linear solver {args.solver!r}; {os.cpu_count()} "
          f"cpus, load average at start {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    print(f"{'model':16s} {'unknowns':>10s} {'seconds':>9s} {'peak MiB':>9s} {'s/Munknown':>11s} "
          f"{'iter':>5s} {'converged':>9s}", flush=True)
    table = {}
    for model in models:
        rows = []
        for cells in sizes:
            result = measure(cells, model, args.solver, options)
            if result.get("kind") != "newton":
                print(f"{SHORT.get(model, model):16s} {(2 * cells + 1) ** 2:10,d} "
                      f"{result.get('kind')}: {result.get('message', '')}", flush=True)
                continue
            rows.append(result)
            print(f"{SHORT.get(model, model):16s} {result['dofs']:10,d} {result['seconds']:9.2f} "
                  f"{result['peak_mib']:9.0f} {1e6 * result['seconds'] / result['dofs']:11.2f} "
                  f"{result['iterations']:5d} {str(result['converged']):>9s}", flush=True)
        table[model] = rows
    print("fitted exponents (seconds ~ unknowns^a, memory ~ unknowns^b), over the sizes run:")
    for model, rows in table.items():
        dofs = [r["dofs"] for r in rows]
        print(f"  {SHORT.get(model, model):16s} a = {fitted_exponent(dofs, [r['seconds'] for r in rows]):.2f}"
              f"   b = {fitted_exponent(dofs, [r['peak_mib'] for r in rows]):.2f}")
    print(f"load average at end {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    plot(table, args.plot)
    print(f"plot: {args.plot}")


if __name__ == "__main__":
    main()
