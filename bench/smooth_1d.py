"""Sweep of the smooth 1-D cases (issue 17): relative error of the flow rate (torque) of
``gnflow.solve`` at the default mesh against an independent reference, and the time of
each solve. Not part of the test suite (about 208 solves; references take minutes on a
first run for the non-power-law fluids, so ``--cache`` keeps them).

Fluids: Newtonian, power law (n = 0.1 to 3), Carreau, Carreau-Yasuda, Cross; shapes: slit,
slit with a moving wall, pipe, annuli (radius ratios 0.1 to 0.95, one with a moving inner
wall), each pressure-driven and (six shapes) flow-rate-driven, and coaxial cylinders.
References: ``gnflow.analytic``, except the power law in axial flow, whose flow curve is
inverted in closed form here (adaptive quadrature of ``u' = (|tau| / K)^(1/n)`` with the
zero-stress point found by root-finding). A flow-rate-driven case's error is the flow
rate the exact solution has at the solved pressure gradient, to first order.

    python bench/smooth_1d.py [NAME ...] [--cells N] [--no-adapt] [--cache FILE]

Each line: case, error, converged, iterations, residual, time, cells ("A": adapted mesh).
"""

import argparse
import itertools
import json
import math
import os
import pickle
import time

import numpy as np
from scipy.integrate import quad
from scipy.optimize import brentq

from gnflow import analytic, solve
from gnflow.case import Case

adapt = __import__("importlib").import_module("gnflow.solver.adapt")


def _rate(tau, K, n):
    return np.sign(tau) * (abs(tau) / K) ** (1.0 / n)


def _flow(K, n, G, lo, hi, w_lo, w_hi, axisym):
    """Flow rate of a power law in a slit (axisym False, x = y) or an annulus or pipe
    (x = r), walls at lo and hi moving at w_lo and w_hi; the stress is G x + C (slit) or
    G r / 2 + C / r, with C found from the wall speeds."""
    def tau_of(C):
        if axisym:
            return lambda x: G * x / 2 + C / x
        return lambda x: G * x + C

    def roots(C):
        if axisym:
            if G == 0 or -2 * C / G <= 0:
                return []
            r0 = math.sqrt(-2 * C / G)
        else:
            r0 = -C / G if G != 0 else None
        return [r0] if r0 is not None and lo < r0 < hi else []

    def integral(f, C):
        pts = [lo] + roots(C) + [hi]
        return sum(quad(f, a, b, epsabs=0, epsrel=2e-14, limit=400)[0]
                   for a, b in zip(pts[:-1], pts[1:]))

    def residual(C):
        tau = tau_of(C)
        return integral(lambda x: _rate(tau(x), K, n), C) - (w_hi - w_lo)

    if lo == 0.0 and axisym:   # pipe
        C = 0.0
    else:
        s = abs(G) * hi * hi + K * (abs(w_hi - w_lo) / (hi - lo)) ** n * hi + 1e-300
        a, b = -s, s
        while residual(a) > 0:
            a *= 2
        while residual(b) < 0:
            b *= 2
        C = brentq(residual, a, b, xtol=1e-16 * s, rtol=1e-15, maxiter=500)
    tau = tau_of(C)
    if axisym:
        return math.pi * (hi ** 2 * w_hi - lo ** 2 * w_lo) - math.pi * integral(
            lambda x: x * x * _rate(tau(x), K, n), C)
    return hi * w_hi - lo * w_lo - integral(lambda x: x * _rate(tau(x), K, n), C)


def power_law_flow_rate(case, G=None):
    g, d, m = case.geometry, case.drive, case.fluid.model
    G = d.pressure_gradient if G is None else G
    sp = d.wall_speed
    K, n = m.consistency, m.flow_index
    if g.shape == "slit":
        return _flow(K, n, G, 0.0, g.gap, sp.get("bottom", 0.0), sp.get("top", 0.0), False)
    if g.shape == "pipe":
        return _flow(K, n, G, 0.0, g.radius, 0.0, sp.get("wall", 0.0), True)
    return _flow(K, n, G, g.inner_radius, g.outer_radius, sp.get("inner", 0.0), sp.get("outer", 0.0), True)


FLUIDS = {
    "newt": {"model": "newtonian", "viscosity": 0.8},
    "pl0.1": {"model": "power-law", "consistency": 3.0, "flow_index": 0.1},
    "pl0.2": {"model": "power-law", "consistency": 3.0, "flow_index": 0.2},
    "pl0.3": {"model": "power-law", "consistency": 3.0, "flow_index": 0.3},
    "pl0.5": {"model": "power-law", "consistency": 3.0, "flow_index": 0.5},
    "pl0.7": {"model": "power-law", "consistency": 3.0, "flow_index": 0.7},
    "pl1.5": {"model": "power-law", "consistency": 0.2, "flow_index": 1.5},
    "pl2": {"model": "power-law", "consistency": 0.02, "flow_index": 2.0},
    "pl3": {"model": "power-law", "consistency": 0.002, "flow_index": 3.0},
    "carreau": {"model": "carreau", "zero_shear_viscosity": 12.0,
                "infinite_shear_viscosity": 0.01, "time_constant": 0.5, "flow_index": 0.4},
    "carreau-thin": {"model": "carreau", "zero_shear_viscosity": 50.0,
                     "infinite_shear_viscosity": 0.0, "time_constant": 20.0, "flow_index": 0.2},
    "cy": {"model": "carreau-yasuda", "zero_shear_viscosity": 12.0,
           "infinite_shear_viscosity": 0.0, "time_constant": 0.5,
           "flow_index": 0.4, "transition_exponent": 0.7},
    "cross": {"model": "cross", "zero_shear_viscosity": 8.0,
              "infinite_shear_viscosity": 0.02, "time_constant": 0.3, "rate_exponent": 0.75},
}
SHAPES = {
    "slit": ({"shape": "slit", "gap": 0.02}, {"pressure_gradient": -6000.0}),
    "slit+couette": ({"shape": "slit", "gap": 0.02},
                     {"pressure_gradient": -6000.0, "wall_speed": {"top": 0.3}}),
    "pipe": ({"shape": "pipe", "radius": 0.015}, {"pressure_gradient": -6000.0}),
    "ann0.1": ({"shape": "annulus", "inner_radius": 0.003, "outer_radius": 0.03},
               {"pressure_gradient": -3000.0}),
    "ann0.33+in": ({"shape": "annulus", "inner_radius": 0.01, "outer_radius": 0.03},
                   {"pressure_gradient": -3000.0, "wall_speed": {"inner": 0.2}}),
    "ann0.5": ({"shape": "annulus", "inner_radius": 0.015, "outer_radius": 0.03},
               {"pressure_gradient": -3000.0}),
    "ann0.9": ({"shape": "annulus", "inner_radius": 0.027, "outer_radius": 0.03},
               {"pressure_gradient": -30000.0}),
    "ann0.95": ({"shape": "annulus", "inner_radius": 0.0285, "outer_radius": 0.03},
                {"pressure_gradient": -60000.0}),
}
ROT = {"cyl0.8": ({"shape": "coaxial-cylinders", "inner_radius": 0.04, "outer_radius": 0.05},
                  {"inner_angular_speed": "120 rpm", "outer_angular_speed": "-20 rpm"}),
       "cyl0.3": ({"shape": "coaxial-cylinders", "inner_radius": 0.015, "outer_radius": 0.05},
                  {"inner_angular_speed": "60 rpm"})}
EXTRA = {}   # extra case tables (e.g. {"mesh": {"cells": 400}}), from --extra
FLOW_DRIVEN = ("slit", "pipe", "ann0.1", "ann0.9", "slit+couette", "ann0.33+in")


class _Q:
    def __init__(self, q):
        self.flow_rate = q


def reference(case, G=None):
    if case.fluid.model.name == "power-law" and case.geometry.shape != "coaxial-cylinders":
        # the power law's flow curve inverted in closed form: seconds, where the generic
        # inversion of gnflow.analytic takes minutes for n = 2 (it agrees to 5e-13)
        return _Q(power_law_flow_rate(case, G))
    g, d, model = case.geometry, case.drive, case.fluid.model
    G = d.pressure_gradient if G is None else G
    speeds = d.wall_speed
    if g.shape == "slit":
        return analytic.slit_flow(model, g.gap, G, speeds.get("bottom", 0.0), speeds.get("top", 0.0))
    if g.shape == "pipe":
        return analytic.pipe_flow(model, g.radius, G)
    if g.shape == "annulus":
        return analytic.annulus_flow(model, g.inner_radius, g.outer_radius, G,
                                     speeds.get("inner", 0.0), speeds.get("outer", 0.0))
    return analytic.coaxial_flow(model, g.inner_radius, g.outer_radius, d.inner_angular_speed,
                                 d.outer_angular_speed)


def cases():
    for f, s in itertools.product(FLUIDS, SHAPES):
        geo, drive = SHAPES[s]
        yield f"{f}/{s}/dp", Case.from_dict({"fluid": FLUIDS[f], "geometry": geo, "drive": drive, **EXTRA}), "dp"
    for f, s in itertools.product(FLUIDS, FLOW_DRIVEN):
        geo, drive = SHAPES[s]
        c = Case.from_dict({"fluid": FLUIDS[f], "geometry": geo, "drive": drive})
        q = cached(f"{f}/{s}/dp", c, "dp")[0]
        d2 = {k: v for k, v in drive.items() if k != "pressure_gradient"}
        d2["flow_rate"] = q
        c2 = Case.from_dict({"fluid": FLUIDS[f], "geometry": geo, "drive": d2, **EXTRA})
        object.__setattr__(c2, "extra_shape", s)
        yield f"{f}/{s}/Q", c2, ("Q", q)
    for f, s in itertools.product(FLUIDS, ROT):
        geo, drive = ROT[s]
        yield f"{f}/{s}/rot", Case.from_dict({"fluid": FLUIDS[f], "geometry": geo, "drive": drive, **EXTRA}), "rot"


CACHE = None   # --cache PATH: references kept between runs
_cache = {}


def cached(name, case, kind):
    """(reference value, d ln Q / d ln G) of a case, computed once."""
    if name not in _cache:
        t = time.perf_counter()
        if kind == "rot":
            _cache[name] = (reference(case).torque_per_length, None)
        elif kind == "dp":
            _cache[name] = (reference(case).flow_rate, None)
        else:
            G0 = base_gradient(case)
            q0 = reference(case, G0).flow_rate
            q1 = reference(case, G0 * (1 + 1e-5)).flow_rate
            _cache[name] = (q0, math.log(q1 / q0) / math.log(1 + 1e-5), G0)
        if CACHE:
            with open(CACHE, "wb") as f:
                pickle.dump(_cache, f)
        print(f"  (reference {name}: {time.perf_counter() - t:.1f} s)", flush=True)
    return _cache[name]


def base_gradient(case):
    return {s: d for s, (g, d) in SHAPES.items()}[case.extra_shape]["pressure_gradient"]


def run(cells=None, only=None, verbose=True):
    rows = []
    for name, case, kind in cases():
        if only and not any(o in name for o in only):
            continue
        t = time.perf_counter()
        sol = solve(case, cells=cells)
        dt = time.perf_counter() - t
        if kind == "dp":
            err = sol.problem().flow_rate(sol.u) / cached(name, case, kind)[0] - 1
        elif kind == "rot":
            err = sol.summary()["torque_per_length"] / cached(name, case, kind)[0] - 1
        else:
            q0, slope, G0 = cached(name, case, kind)
            # the flow rate the exact solution has at the FE pressure gradient, to first order
            err = slope * (sol.pressure_gradient / G0 - 1)
        rows.append((name, abs(err), sol.converged, sol.iterations, sol.residual, dt))
        adapted = sol.domain.extra.get("adapted")
        if verbose:
            flag = "" if abs(err) < 1e-8 and sol.converged else "  <-- MISS"
            print(f"{name:28s} err {abs(err):9.2e} conv {sol.converged!s:5} it {sol.iterations:3d} "
                  f"res {sol.residual:8.1e} {dt*1e3:7.1f} ms cells {sol.domain.cells:4d}{' A' if adapted else ''}{flag}", flush=True)
    return rows


def main():
    global CACHE, _cache
    parser = argparse.ArgumentParser()
    parser.add_argument("only", nargs="*", help="run only cases whose name contains one")
    parser.add_argument("--cells", type=int, help="solve on this many uniform cells")
    parser.add_argument("--no-adapt", action="store_true", help="never adapt the default mesh")
    parser.add_argument("--cache", help="pickle file for the references (kept between runs)")
    parser.add_argument("--extra", default="{}", help="extra case tables, as JSON")
    args = parser.parse_args()
    EXTRA.update(json.loads(args.extra))
    if args.no_adapt:
        adapt.TRIGGER = math.inf
    if args.cache:
        CACHE = args.cache
        if os.path.exists(CACHE):
            with open(CACHE, "rb") as f:
                _cache = pickle.load(f)
    rows = run(args.cells, args.only or None)
    miss = [r for r in rows if not (r[1] < 1e-8 and r[2])]
    worst = max(rows, key=lambda r: r[1])
    times = np.array([r[5] for r in rows])
    print(f"\n{len(rows) - len(miss)} of {len(rows)} reach 1e-8 (converged); worst {worst[0]} "
          f"{worst[1]:.2e}; median time {np.median(times)*1e3:.1f} ms, mean {times.mean()*1e3:.1f} ms")


if __name__ == "__main__":
    main()
