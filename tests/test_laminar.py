"""Laminar limits: Ryan-Johnson, Hanks and the common-practice 2100, and the warning.

Sources: Ryan & Johnson (1959), AIChE J. 5, 433; Hanks (1963), AIChE J. 9, 306;
Hedstrom (1952). Values marked "recalled" are from memory of the published curves
(read to about 10 %); values marked "arithmetic" follow from the formulas by hand.
"""

import inspect
import math

import numpy as np
import pytest

import gnflow.post
from gnflow import Case, rheology, solve
from gnflow.laminar import (COMMON_PRACTICE_REYNOLDS, bingham_plastic_reynolds,
                            hanks_critical_plug_ratio, hanks_critical_reynolds,
                            hedstrom_number, laminar_limit, laminar_warning,
                            ryan_johnson_critical_reynolds)


# --------------------------------------------------------------------------- Ryan-Johnson

def test_ryan_johnson_is_2100_for_newtonian():
    # arithmetic: 6464 * 3^1.5 / 16 = 2099.25
    assert ryan_johnson_critical_reynolds(1.0) == pytest.approx(6464 * 3 ** 1.5 / 16, rel=1e-14)
    assert ryan_johnson_critical_reynolds(1.0) == pytest.approx(2100, abs=1)


def test_ryan_johnson_worked_value():
    # arithmetic: n = 0.5 -> 3232 * 2.5^(5/3) / 6.25
    assert ryan_johnson_critical_reynolds(0.5) == pytest.approx(3232 * 2.5 ** (5 / 3) / 6.25)


def test_ryan_johnson_maximum_near_2400_at_n_about_0_4():
    # recalled: the Ryan-Johnson curve peaks at about 2400 near n = 0.4
    n = np.linspace(0.05, 2.0, 3901)
    values = np.array([ryan_johnson_critical_reynolds(x) for x in n])
    peak = int(np.argmax(values))
    assert 0.35 <= n[peak] <= 0.45
    assert values[peak] == pytest.approx(2400, rel=0.02)
    # it falls on both sides of the peak: below 2100 for shear-thickening fluids
    assert np.all(np.diff(values[peak:]) < 0) and np.all(np.diff(values[:peak + 1]) > 0)
    assert ryan_johnson_critical_reynolds(1.5) < 2100


@pytest.mark.parametrize("bad", [0.0, -0.3, math.nan, math.inf])
def test_ryan_johnson_rejects_bad_flow_index(bad):
    with pytest.raises(ValueError, match="flow_index"):
        ryan_johnson_critical_reynolds(bad)


# --------------------------------------------------------------------------- Hanks

def test_hedstrom_number_arithmetic():
    # arithmetic: 1200 * 5 * 0.1^2 / 0.02^2 = 150000
    assert hedstrom_number(1200.0, 5.0, 0.02, 0.1) == pytest.approx(1.5e5, rel=1e-14)
    assert hedstrom_number(1000.0, 0.0, 0.01, 0.05) == 0.0
    with pytest.raises(ValueError):
        hedstrom_number(1000.0, 1.0, 0.0, 0.05)
    with pytest.raises(ValueError):
        hedstrom_number(1000.0, -1.0, 0.01, 0.05)


@pytest.mark.parametrize("he", [1e-12, 1e-3, 1.0, 50.0, 3e3, 1e5, 1e8, 1e12])
def test_hanks_plug_ratio_solves_its_equation(he):
    phi = hanks_critical_plug_ratio(he)
    assert 0 < phi < 1
    assert phi / (1 - phi) ** 3 == pytest.approx(he / 16800, rel=1e-10)


def test_hanks_worked_value():
    # arithmetic: phi_c = 0.2 needs He = 16800 * 0.2 / 0.8^3 = 6562.5;
    # Re_c = 6562.5 (1 - 0.8/3 + 0.0016/3) / 1.6 = 3010
    assert hanks_critical_plug_ratio(6562.5) == pytest.approx(0.2, rel=1e-12)
    assert hanks_critical_reynolds(6562.5) == pytest.approx(3010.0, rel=1e-12)


def test_hanks_tends_to_2100_as_hedstrom_vanishes():
    # the Newtonian limit: phi_c ~ He/16800 and Re_c -> 16800/8 = 2100
    assert hanks_critical_reynolds(0.0) == 2100.0
    assert hanks_critical_reynolds(1e-9) == pytest.approx(2100, rel=1e-9)
    assert hanks_critical_reynolds(1.0) == pytest.approx(2100, rel=1e-3)


@pytest.mark.parametrize("he, expected", [(1e4, 3300), (1e5, 6800), (1e6, 15000)])
def test_hanks_against_the_published_curve(he, expected):
    # recalled: read from Hanks' chart of critical Reynolds against Hedstrom number
    assert hanks_critical_reynolds(he) == pytest.approx(expected, rel=0.10)


def test_hanks_rises_with_hedstrom():
    he = np.logspace(-2, 10, 200)
    values = [hanks_critical_reynolds(x) for x in he]
    assert np.all(np.diff(values) > 0)


# --------------------------------------------------------------------------- the choice

def test_laminar_limit_chooses_the_criterion_per_model():
    power_law = rheology.PowerLaw(2.0, 0.4)
    critical, name = laminar_limit(power_law, 1000.0, 0.05)
    assert critical == ryan_johnson_critical_reynolds(0.4) and "Ryan & Johnson" in name

    bingham = rheology.Bingham(25.0, 0.05)
    critical, name = laminar_limit(bingham, 1000.0, 0.1)
    assert critical == pytest.approx(hanks_critical_reynolds(1e5)) and "Hanks" in name

    for model in (rheology.Newtonian(1e-3), rheology.Carreau(10.0, 0.0, 0.5, 0.5),
                  rheology.HerschelBulkley(5.0, 2.0, 0.5)):
        assert laminar_limit(model, 1000.0, 0.05) == (COMMON_PRACTICE_REYNOLDS,
                                                      "2100, common practice for pipes")


def test_laminar_warning_only_past_the_limit():
    assert laminar_warning(2099.0, 2100.0, "x") is None
    assert laminar_warning(2100.0, 2100.0, "x") is None
    text = laminar_warning(2101.0, 2100.0, "Hanks (1963)")
    assert "laminar limit 2100" in text and "Hanks (1963)" in text and "do not hold" in text


def test_bingham_plastic_reynolds():
    assert bingham_plastic_reynolds(1000.0, -2.0, 0.1, 0.05) == pytest.approx(4000.0)


# --------------------------------------------------------------------------- in summaries

def _pipe(fluid: dict, radius: float, mean_velocity: float, cells: int = 80) -> Case:
    return Case.from_dict({"fluid": fluid, "geometry": {"shape": "pipe", "radius": radius},
                           "drive": {"flow_rate": mean_velocity * math.pi * radius ** 2},
                           "mesh": {"cells": cells}})


def _laminar_warnings(case: Case) -> list[str]:
    summary = solve(case).summary()
    assert summary["converged"]
    return [w for w in summary["warnings"] if "laminar limit" in w]


@pytest.mark.parametrize("factor, warned", [(0.95, False), (1.05, True)])
def test_newtonian_summary_warns_past_2100_only(factor, warned):
    # Re = rho V D / mu = 1000 V 0.05 / 0.01 = 5000 V
    velocity = factor * 2100 / 5000
    case = _pipe({"model": "newtonian", "viscosity": 0.01, "density": 1000.0}, 0.025, velocity)
    assert bool(_laminar_warnings(case)) is warned


_WIRED = "laminar_limit" in inspect.getsource(gnflow.post)


@pytest.mark.skipif(not _WIRED, reason="post.py does not use gnflow.laminar yet")
@pytest.mark.parametrize("factor, warned", [(0.97, False), (1.03, True)])
def test_power_law_summary_uses_ryan_johnson(factor, warned):
    # n = 0.4: Ryan-Johnson gives about 2397, so 0.97 of it is past 2100 and must not warn
    n, K, rho, D = 0.4, 0.5, 1000.0, 0.05
    re = factor * ryan_johnson_critical_reynolds(n)
    # Metzner-Reed: Re = rho V^(2-n) D^n / (K 8^(n-1) ((3n+1)/(4n))^n), solved for V
    velocity = (re * K * 8 ** (n - 1) * ((3 * n + 1) / (4 * n)) ** n / (rho * D ** n)) ** (
        1 / (2 - n))
    case = _pipe({"model": "power-law", "consistency": K, "flow_index": n, "density": rho},
                 D / 2, velocity)
    found = _laminar_warnings(case)
    assert bool(found) is warned
    if warned:
        assert "Ryan & Johnson" in found[0]


@pytest.mark.skipif(not _WIRED, reason="post.py does not use gnflow.laminar yet")
@pytest.mark.parametrize("factor, warned", [(0.95, False), (1.05, True)])
def test_bingham_summary_uses_hanks_on_the_plastic_reynolds_number(factor, warned):
    # He = 1000 * 25 * 0.1^2 / 0.05^2 = 1e5 -> Hanks Re_c about 6816 on rho V D / mu_p
    rho, tau_y, mu_p, D = 1000.0, 25.0, 0.05, 0.1
    critical = hanks_critical_reynolds(hedstrom_number(rho, tau_y, mu_p, D))
    velocity = factor * critical * mu_p / (rho * D)
    case = _pipe({"model": "bingham", "yield_stress": tau_y, "plastic_viscosity": mu_p,
                  "density": rho}, D / 2, velocity, cells=100)
    found = _laminar_warnings(case)
    assert bool(found) is warned
    if warned:
        assert "Hanks" in found[0]
