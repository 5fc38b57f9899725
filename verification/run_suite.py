"""Run the mesh-convergence suite and regenerate verification/REPORT.md and its figures.

    python verification/run_suite.py

Every case in verification/cases/ is run at P1 and P2 on six meshes (8 to 256 cells,
ratio 2) through :func:`gnflow.verify.run_verification`; the regularisation study solves
a Bingham pipe and a Herschel-Bulkley slit for growing Papanastasiou exponents and
compares them with the exact (unregularised) solutions. The 2-D sections (rectangles
and eccentric annuli) are run at P1 and P2 from 4 cells across (ratio 2): Newtonian ones
against the flow-rate series of gnflow.analytic, the others by the three-grid GCI. Takes
about a minute.
"""

from __future__ import annotations

import math
import sys
import time
import tomllib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from gnflow import analytic  # noqa: E402
from gnflow.case import Case  # noqa: E402
from gnflow import solve  # noqa: E402
from gnflow.verify import convergence_plot, run_verification  # noqa: E402

CASES = HERE / "cases"
FIGURES = HERE / "figures"
REPORT = HERE / "REPORT.md"
LEVELS, RATIO = 6, 2.0
TOLERANCE = 0.15


@dataclass(frozen=True)
class Expectation:
    """Expected L2 and H1 orders per degree and why."""

    orders: dict[int, tuple[float, float]]
    why: str


SMOOTH = "smooth profile: formal orders k + 1 (L2) and k (H1)"
FORMAL = {1: (2.0, 1.0), 2: (3.0, 2.0)}


def _regularity_orders(alpha: float, weighted: bool = False) -> dict[int, tuple[float, float]]:
    """Orders for a profile ~ |x - x0|^alpha (x0 at a node or in a cell).

    Such a function lies in H^s for every s < alpha + 1/2 (1-D), so the interpolation error
    on the cell that holds x0 goes as h^(alpha + 1/2) in L2 and h^(alpha - 1/2) in H1; the
    smooth cells give the formal orders. With the area weight r at x0 = 0 (pipe axis) the
    weight adds 1/2 to both. The observed order is the smaller of the two.
    """
    shift = 0.5 if weighted else 0.0
    return {k: (min(k + 1.0, alpha + 0.5 + shift), min(float(k), alpha - 0.5 + shift))
            for k in (1, 2)}


SECTIONS = {
    "smooth": ("Smooth cases: formal orders of P1 and P2", [
        ("carreau_slit", Expectation(FORMAL, SMOOTH)),
        ("carreau_yasuda_pipe", Expectation(FORMAL, SMOOTH)),
        ("cross_coaxial", Expectation(FORMAL, SMOOTH + "; the rate never vanishes")),
        ("power_law_coaxial", Expectation(FORMAL, SMOOTH + "; the rate never vanishes")),
        ("newtonian_coaxial", Expectation(FORMAL, SMOOTH)),
    ]),
    "curved": ("Curved walls: the concentric annulus (1-D)", [
        ("newtonian_annulus", Expectation(FORMAL, SMOOTH + "; log r term")),
        ("carreau_annulus_moving_core", Expectation(FORMAL, SMOOTH + "; moving core")),
    ]),
    "power": ("Power law: order limited by the regularity of the exact profile", [
        ("power_law_slit_n08", Expectation(_regularity_orders(1 + 1 / 0.8),
                                           "w ~ |y - h/2|^2.25 at the mid-plane (a node)")),
        ("power_law_annulus_n08", Expectation(_regularity_orders(1 + 1 / 0.8),
                                              "w ~ |r - lambda|^2.25 inside a cell")),
        ("power_law_slit_n15", Expectation(_regularity_orders(1 + 1 / 1.5),
                                           "w ~ |y - h/2|^(5/3) at the mid-plane")),
        ("power_law_pipe_n05", Expectation(_regularity_orders(1 + 1 / 0.5, weighted=True),
                                           "w ~ R^3 - r^3: a polynomial, weighted by r")),
    ]),
    "yield": ("Yield-stress fluids: discretisation error against the regularised model", [
        ("bingham_pipe", Expectation(FORMAL, "regularised model: smooth, with a steep layer "
                                             "at the yield surface")),
        ("herschel_bulkley_slit", Expectation(FORMAL, "regularised model: smooth, steep layer")),
        ("bingham_coaxial", Expectation(FORMAL, "regularised model: smooth, steep layer")),
    ]),
}
NO_REFERENCE = ["herschel_bulkley_slit_flow_rate"]

#: 2-D sections: 4 cells across the gap or the smaller side, refined by RATIO; the
#: cell size is (area / triangles)^(1/2) (see gnflow.verify)
LEVELS_2D_REFERENCE, LEVELS_2D_GCI = 5, 4
FLOW_RATE_TOLERANCE = 0.25
SECTIONS_2D_REFERENCE = [
    ("newtonian_eccentric_annulus", "curved walls: P1 on chords, P2 isoparametric"),
    ("newtonian_rectangle", "straight walls; a corner term r^2 ln r (see below)"),
]
SECTIONS_2D_GCI = [
    ("power_law_rectangle_n05", "infinite viscosity where the rate vanishes: the centre "
                                "and the four corners"),
    ("herschel_bulkley_eccentric_annulus", "fixed exponent 0.2 s: discretisation error only; "
                                           "a steep layer at the yield surface"),
]


def load(stem: str, degree: int) -> Case:
    data = tomllib.loads((CASES / f"{stem}.toml").read_text(encoding="utf-8"))
    data.setdefault("mesh", {})["degree"] = degree
    return Case.from_dict(data)


def fmt(x, digits=2) -> str:
    return "-" if x is None or not np.isfinite(x) else f"{x:.{digits}f}"


def study_section(title, entries, lines, summary):
    lines += [f"## {title}", "",
              "| case | P | L2 order | expected | H1 order | expected | flow rate / torque "
              "order | finest L2 error | why |", "|---|---|---|---|---|---|---|---|---|"]
    notes = []
    for stem, expectation in entries:
        for degree in (1, 2):
            result = run_verification(load(stem, degree), LEVELS, RATIO)
            figure = FIGURES / f"{stem}-p{degree}.png"
            convergence_plot(result, figure)
            p_l2, p_h1 = result.l2_orders[-1], result.h1_orders[-1]
            e_l2, e_h1 = expectation.orders[degree]
            ok = abs(p_l2 - e_l2) <= TOLERANCE and abs(p_h1 - e_h1) <= TOLERANCE
            summary.append((stem, degree, p_l2, e_l2, p_h1, e_h1, result.value_orders[-1], ok))
            lines.append(
                f"| [{stem}](cases/{stem}.toml) | {degree} | {fmt(p_l2)} | {e_l2:.2f} | "
                f"{fmt(p_h1)} | {e_h1:.2f} | {fmt(result.value_orders[-1])} | "
                f"{result.levels[-1].l2_error:.2e} | {expectation.why} |")
            history = ", ".join(fmt(p) for p in result.l2_orders[1:])
            verdict = (f"agrees with the expected {e_l2:.2f} / {e_h1:.2f} to within "
                       f"{TOLERANCE}" if ok else
                       f"differs from the expected {e_l2:.2f} / {e_h1:.2f} by more than "
                       f"{TOLERANCE}")
            notes.append(f"* **{stem}, P{degree}**: observed {fmt(p_l2)} (L2) / "
                         f"{fmt(p_h1)} (H1) on the finest pair, which {verdict} "
                         f"(L2 orders level by level: {history}). "
                         f"[plot](figures/{figure.name})")
    lines += [""] + notes + [""]


def plug_size(solution) -> float:
    """Width of the unyielded zone of a 1-D axial flow (pipe: its radius).

    The stress computed from the FE shear rate through the model is compared with the
    yield stress at the quadrature points, and each crossing is placed by linear
    interpolation between the two points that bracket it, so the size is not quantised
    to the spacing of the points.
    """
    problem = solution.problem()
    x = np.asarray(solution.domain.basis.global_coordinates())[0].ravel()
    rate = np.maximum(problem.shear_rate(solution.u), problem.rate_floor).ravel()
    excess = solution.model.stress(rate) - solution.model.yield_stress
    order = np.argsort(x)
    x, excess = x[order], excess[order]
    change = np.flatnonzero(np.sign(excess[:-1]) != np.sign(excess[1:]))
    crossings = [x[i] - excess[i] * (x[i + 1] - x[i]) / (excess[i + 1] - excess[i])
                 for i in change]
    if solution.domain.shape == "pipe":
        return float(crossings[0])
    return float(crossings[-1] - crossings[0])


def regularisation_study(lines):
    """Flow rate and unyielded-zone size against the exact solutions as m grows."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    exponents = [0.001, 0.003, 0.01, 0.03, 0.1, 0.3, 1.0, 3.0]
    setups = [
        ("Bingham pipe vs Buckingham-Reiner",
         {"model": "bingham", "yield_stress": 15.0, "plastic_viscosity": 0.6},
         {"shape": "pipe", "radius": 0.015}, -6000.0,
         lambda: analytic.pipe_bingham(0.015, 15.0, 0.6, -6000.0),
         (45.0 - 15.0) / 0.6, "plug radius"),
        ("Herschel-Bulkley slit vs exact slit solution",
         {"model": "herschel-bulkley", "yield_stress": 15.0, "consistency": 2.0,
          "flow_index": 0.5}, {"shape": "slit", "gap": 0.02}, -6000.0, None,
         ((60.0 - 15.0) / 2.0) ** 2, "plug width"),
    ]
    fig, axes = plt.subplots(1, 2, figsize=(10, 4))
    lines += ["## Regularisation error of Bingham and Herschel-Bulkley fluids", "",
              "Papanastasiou regularisation `tau = tau_y (1 - exp(-m rate)) + ...`, solved "
              "on 400 P2 cells (discretisation error below 1e-8, see the sections above) "
              "for growing exponents `m`, compared with the exact unregularised solutions. "
              "`m rate_w` is the exponent times the exact wall shear rate. The unyielded "
              "zone of the regularised solution is where the stress computed from its shear "
              "rate is below the yield stress; its edges are interpolated between quadrature "
              "points.", ""]
    for (title, fluid, geometry, G, exact_of, wall_rate, size_name), ax in zip(setups, axes):
        base = Case.from_dict({"fluid": fluid, "geometry": geometry,
                               "drive": {"pressure_gradient": G}})
        exact = exact_of() if exact_of else analytic.slit_flow(
            base.fluid.model, geometry["gap"], G, regularised=False)
        (lower, upper), = exact.plugs
        exact_size = upper - lower
        lines += [f"### {title}", "",
                  f"Exact flow rate {exact.flow_rate:.6e} at dp/dz = {G:g} Pa/m, exact "
                  f"{size_name} {1e3 * exact_size:.4f} mm.", "",
                  f"| m [s] | m rate_w | flow rate error at the set dp/dz | dp/dz error at "
                  f"the exact flow rate | {size_name} [mm] at the exact flow rate | "
                  f"{size_name} error |", "|---|---|---|---|---|---|"]
        q_err, g_err, s_err = [], [], []
        for m in exponents:
            def run(drive):
                case = Case.from_dict({"fluid": {**fluid, "regularisation": {
                    "method": "papanastasiou", "exponent": m}}, "geometry": geometry,
                    "drive": drive, "mesh": {"cells": 400, "degree": 2},
                    "solver": {"tolerance": 1e-11}})
                solution = solve(case)
                return solution, solution.summary()
            by_gradient, s = run({"pressure_gradient": G})
            by_rate, t = run({"flow_rate": exact.flow_rate})
            size = plug_size(by_rate)
            q_err.append(abs(s["flow_rate"] / exact.flow_rate - 1))
            g_err.append(abs(t["pressure_gradient"] / G - 1))
            s_err.append(abs(size / exact_size - 1))
            flag = "" if by_gradient.converged and by_rate.converged else " (not converged)"
            lines.append(f"| {m:g} | {m * wall_rate:.3g} | {q_err[-1]:.2e} | {g_err[-1]:.2e} "
                         f"| {1e3 * size:.4f} | {s_err[-1]:.2e} |{flag}")
        slope_q = np.polyfit(np.log(exponents[-4:]), np.log(q_err[-4:]), 1)[0]
        slope_s = np.polyfit(np.log(exponents[-4:]), np.log(s_err[-4:]), 1)[0]
        lines += ["", f"Over the four sharpest exponents the flow-rate error falls as "
                      f"m^{slope_q:.2f} and the {size_name} error as m^{slope_s:.2f}: the "
                      f"regularisation error is a modelling error that shrinks roughly as "
                      f"1/m, so the regularised solution approaches the exact yield-stress "
                      f"flow as the exponent grows. At a set pressure gradient the "
                      f"stress field is fixed by statics, so the stress criterion would "
                      f"place the yield surface exactly whatever m; the {size_name} is "
                      f"therefore measured at the exact flow rate, where the solver must "
                      f"find the pressure gradient and the yield surface moves with it."]
        if s_err[-1] > 2 * g_err[-1]:
            lines[-1] += (f" At the sharpest exponents the {size_name} error levels off near "
                          f"{s_err[-1]:.0e} while the pressure-gradient error keeps falling: "
                          f"there the edge of the nearly rigid plug, located from a shear "
                          f"rate close to zero, is resolved only to the mesh (400 cells), "
                          f"not to the regularisation.")
        lines.append("")
        mr = np.array(exponents) * wall_rate
        ax.loglog(mr, q_err, "o-", ms=4, label="flow rate (set dp/dz)")
        ax.loglog(mr, g_err, "^-", ms=4, label="dp/dz (set flow rate)")
        ax.loglog(mr, s_err, "s-", ms=4, label=f"{size_name} (set flow rate)")
        ax.loglog(mr, q_err[-1] * (mr / mr[-1]) ** -1, ":", color="0.4", label="slope -1")
        ax.set_xlabel("m x exact wall shear rate")
        ax.set_ylabel("relative error against exact")
        ax.set_title(title, fontsize=9)
        ax.grid(True, which="both", alpha=0.3)
        ax.legend(fontsize=7)
    fig.tight_layout()
    fig.savefig(FIGURES / "regularisation.png", dpi=110)
    plt.close(fig)
    lines += ["![regularisation error](figures/regularisation.png)", ""]


def gci_section(lines):
    lines += ["## No analytic reference: Richardson extrapolation (Richardson & Gaunt 1927) "
              "and the GCI", "",
              "A flow-rate target has no closed-form counterpart for the pressure gradient, "
              "so the study reports the three-grid procedure of Celik et al. (2008) with "
              "safety factor 1.25 on the finest level.", "",
              "| case | P | apparent order | extrapolated dp/dz [Pa/m] | finest dp/dz | GCI |",
              "|---|---|---|---|---|---|"]
    notes = []
    for stem in NO_REFERENCE:
        for degree in (1, 2):
            result = run_verification(load(stem, degree), LEVELS, RATIO)
            convergence_plot(result, FIGURES / f"{stem}-p{degree}.png")
            g = result.finest_gci
            lines.append(f"| [{stem}](cases/{stem}.toml) | {degree} | {fmt(g.apparent_order)} "
                         f"| {g.extrapolated_value:.10g} | {result.levels[-1].value:.10g} | "
                         f"{100 * g.gci_fine:.2g} % |")
            notes.append(f"* **P{degree}**: apparent order {fmt(g.apparent_order)} against "
                         f"a formal {2 * degree} for a functional like the flow rate at a set "
                         f"pressure gradient ({g.note}); the GCI says the finest pressure "
                         f"gradient is within {100 * g.gci_fine:.2g} % of the mesh-converged "
                         f"value. [plot](figures/{stem}-p{degree}.png)")
    lines += [""] + notes + [""]


def sections_2d(lines, summary_2d):
    """2-D rectangles and eccentric annuli: flow-rate orders against the series, or GCI."""
    lines += ["## 2-D sections and curved walls", "",
              "Rectangles (cells across the smaller side) and eccentric annuli (cells across "
              "the gap, the angular count rounded to keep the cells near square) from 4 cells "
              "at ratio 2. The cell size is the representative `h = (area / triangles)^(1/2)` "
              "of Celik et al. (2008), counted on the triangles actually meshed. There is no "
              "velocity-field reference in 2-D, so the Newtonian cases are compared on the "
              "flow rate alone, with the Fourier series of the rectangular duct and the "
              "bipolar-coordinate series of the eccentric annulus (`gnflow.analytic`); the "
              "flow rate is a smooth functional and converges as h^(2k) for P_k when the "
              "solution and the walls are smooth enough. 'agrees' means within "
              f"+-{FLOW_RATE_TOLERANCE}. The concentric annulus (1-D, section above) and the "
              "eccentric one together cover curved walls.", "",
              "| case | P | levels (cells across) | flow-rate order | expected | finest rel. "
              "error | orders level by level | why |", "|---|---|---|---|---|---|---|---|"]
    notes = []
    for stem, why in SECTIONS_2D_REFERENCE:
        for degree in (1, 2):
            result = run_verification(load(stem, degree), LEVELS_2D_REFERENCE, RATIO)
            figure = FIGURES / f"{stem}-p{degree}.png"
            convergence_plot(result, figure)
            p, expected = result.value_orders[-1], 2.0 * degree
            ok = abs(p - expected) <= FLOW_RATE_TOLERANCE
            summary_2d.append(ok)
            cells = [lv.cells for lv in result.levels]
            history = ", ".join(fmt(x) for x in result.value_orders[1:])
            lines.append(f"| [{stem}](cases/{stem}.toml) | {degree} | {cells[0]}-{cells[-1]} "
                         f"| {fmt(p)} | {expected:.0f} | {result.levels[-1].value_error:.2e} "
                         f"| {history} | {why} |")
            notes.append((stem, degree, p, expected, ok, figure.name))
    lines.append("")
    for stem, degree, p, expected, ok, figure in notes:
        verdict = (f"agrees with the expected {expected:.0f}" if ok else
                   f"differs from the expected {expected:.0f} by more than "
                   f"{FLOW_RATE_TOLERANCE}")
        if stem == "newtonian_eccentric_annulus" and degree == 1:
            why = ("straight-sided P1 triangles put the walls on chords, an O(h^2) change of "
                   "the section, which is the order of P1's own flow-rate error, so P1 is "
                   "not held back")
        elif stem == "newtonian_eccentric_annulus":
            why = ("with the edge midpoints on the circles the wall error is O(h^3) in "
                   "position and the flow-rate error keeps the h^4 of P2; straight chords "
                   "would cap it at h^2")
        elif degree == 1:
            why = "the corners do not limit P1"
        else:
            why = ("the right-angle corners carry a term r^2 ln r (the Newtonian duct "
                   "solution is only in H^(3 - eps) there; derived from the corner "
                   "expansion, not from a source), so P2 approaches 4 slowly from below "
                   "with a logarithmic factor")
        notes_line = (f"* **{stem}, P{degree}**: flow-rate order {fmt(p)}, which {verdict}: "
                      f"{why}. [plot](figures/{figure})")
        lines.append(notes_line)
    lines += ["", "Without a reference: three-grid GCI on the flow rate at the set pressure "
                  "gradient (Celik et al. 2008, Fs = 1.25), "
                  f"{LEVELS_2D_GCI} levels from 4 cells across.", "",
              "| case | P | apparent order | extrapolated flow rate [m^3/s] | finest flow rate "
              "| GCI | why |", "|---|---|---|---|---|---|---|"]
    notes = []
    for stem, why in SECTIONS_2D_GCI:
        for degree in (1, 2):
            result = run_verification(load(stem, degree), LEVELS_2D_GCI, RATIO)
            convergence_plot(result, FIGURES / f"{stem}-p{degree}.png")
            g = result.finest_gci
            lines.append(f"| [{stem}](cases/{stem}.toml) | {degree} | {fmt(g.apparent_order)} "
                         f"| {g.extrapolated_value:.8g} | {result.levels[-1].value:.8g} | "
                         f"{100 * g.gci_fine:.2g} % | {why} |")
            notes.append(f"* **{stem}, P{degree}**: apparent order {fmt(g.apparent_order)} "
                         f"against {2 * degree} for a smooth solution; the finest "
                         f"flow rate is within {100 * g.gci_fine:.2g} % of the mesh-converged "
                         f"value. " + _gci_2d_comment(stem, degree, g.apparent_order)
                         + f" [plot](figures/{stem}-p{degree}.png)")
    lines += [""] + notes + [""]


def _gci_2d_comment(stem, degree, order) -> str:
    if not np.isfinite(order):
        return "No apparent order: the levels do not converge monotonically."
    shortfall = 2 * degree - order
    if stem.startswith("power_law"):
        return (f"The shortfall from the formal order ({shortfall:.2f}) is likely the "
                "limited regularity where the shear rate vanishes, as in the 1-D power-law "
                "cases above; measured, not derived for this section.")
    return ("With the exponent fixed the regularised model is smooth; the remaining "
            f"shortfall ({shortfall:.2f}) is likely the steep layer at the yield surface, "
            "not fully resolved on the coarser levels (not tested separately here).")


def main() -> int:
    started = time.perf_counter()
    FIGURES.mkdir(exist_ok=True)
    for old in FIGURES.glob("*.png"):
        old.unlink()
    lines = ["# Verification report", "",
             "Generated by `python verification/run_suite.py` (do not edit by hand). Each "
             "case in [cases/](cases/) is solved at P1 and P2 on "
             f"{LEVELS} meshes from 8 to {8 * 2 ** (LEVELS - 1)} cells (ratio {RATIO:g}) and "
             "compared with `gnflow.analytic` (semi-analytic quadrature or closed forms, "
             "independent of the FE code). Errors: L2 norm and H1 seminorm of the velocity "
             "(angular speed) error with the area weight, and the relative error of the "
             "flow rate (torque). Observed orders are between the two finest levels; "
             f"'agrees' means within +-{TOLERANCE}.", "",
             "Expected orders: P1 and P2 Lagrange elements on smooth solutions converge as "
             "h^(k+1) in L2 and h^k in H1; the flow rate, a smooth functional, as h^(2k). A "
             "profile behaving as |x - x0|^alpha near one point lies in H^s for s < alpha + "
             "1/2, which caps the orders at alpha + 1/2 (L2) and alpha - 1/2 (H1).", ""]
    summary = []
    for key in ("smooth", "curved", "power", "yield"):
        study_section(*SECTIONS[key], lines, summary)
        if key == "power":
            lines += [
                "Interpretation: a power law with n < 1 has an infinite viscosity where the "
                "stress vanishes, and the profile there goes as |x - x0|^(1 + 1/n). For "
                "n = 0.8 (alpha = 2.25) P1 keeps its formal orders but P2 is capped at 2.75 "
                "(L2) and 1.75 (H1), which the slit shows to two decimals; in the annulus "
                "the zero-stress radius lands at a different place inside a cell on each "
                "mesh, so the orders scatter about the same values. n = 0.5 in a pipe gives "
                "R^3 - r^3, a polynomial of degree 3, and keeps the formal orders. The "
                "shear-thickening n = 1.5 (alpha = 5/3) limits even P1 slightly and P2 to "
                "2.17 / 1.17. The flow-rate order follows alpha + 1 (3.25, 2.67) in these "
                "cases, measured, not derived here.", ""]
    regularisation_study(lines)
    gci_section(lines)
    summary_2d = []
    sections_2d(lines, summary_2d)
    agreed = sum(1 for row in summary if row[-1])
    lines.insert(2, f"**Summary: {agreed} of {len(summary)} case/degree pairs agree with "
                    f"their expected L2 and H1 orders (1-D); {sum(summary_2d)} of "
                    f"{len(summary_2d)} 2-D pairs agree with their expected flow-rate "
                    f"order.** Suite time "
                    f"{time.perf_counter() - started:.0f} s.\n")
    REPORT.write_text("\n".join(lines), encoding="utf-8")
    print(f"wrote {REPORT} and {len(list(FIGURES.glob('*.png')))} figures "
          f"({agreed}/{len(summary)} agree) in {time.perf_counter() - started:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
