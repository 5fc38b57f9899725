"""`gnflow fit` on flow rates from several radii: Mooney's analysis separates slip from
bulk flow and writes both (Mooney 1931, J. Rheol. 2, 210; the bulk rates corrected by
Weissenberg-Rabinowitsch, Rabinowitsch 1929).

The data are computed by gnflow itself for a power-law paste with a power-law slip law
(each point checked against the closed form in tests/test_slip.py), so the fit must give
back the parameters put in.
"""

from __future__ import annotations

import json
import math
import tomllib

import pytest

from gnflow.case import Case
from gnflow.cli import main
from gnflow.errors import CaseError
from gnflow.mooney import analyse, read_slip_data
from gnflow.solver import solve

K, N, BETA, P = 12.0, 0.45, 3e-6, 1.3        # Pa s^n, -, m/s/Pa^P, -
RADII = (0.002, 0.004, 0.008)
STRESSES = (30.0, 60.0, 120.0, 240.0)


def _flow_rate(radius: float, wall_stress: float) -> float:
    case = Case.from_dict({
        "fluid": {"model": "power-law", "consistency": K, "flow_index": N},
        "geometry": {"shape": "pipe", "radius": radius},
        "drive": {"pressure_gradient": -2 * wall_stress / radius,
                  "slip": {"wall": {"coefficient": BETA, "exponent": P}}}})
    solution = solve(case)
    assert solution.converged
    return solution.problem().flow_rate(solution.u)


@pytest.fixture(scope="module")
def slip_file(tmp_path_factory):
    path = tmp_path_factory.mktemp("mooney") / "tubes.csv"
    lines = ["# three bores, same wall stresses", "wall_shear_stress [Pa],radius [mm],flow_rate [mL/s]"]
    for stress in STRESSES:
        for radius in RADII:
            lines.append(f"{stress},{radius * 1e3},{_flow_rate(radius, stress) * 1e6!r}")
    path.write_text("\n".join(lines) + "\n")
    return path


def test_analysis_recovers_slip_and_bulk(slip_file):
    analysis = analyse(read_slip_data(slip_file))
    assert analysis.slip.coefficient == pytest.approx(BETA, rel=1e-3)
    assert analysis.slip.exponent == pytest.approx(P, rel=1e-4)
    # the slip-free wall rates lie on the power law tau = K rate^n (Rabinowitsch-corrected
    # from finite differences of four points: a few 1e-3)
    for stress, rate in zip(analysis.stresses, analysis.bulk_rates):
        assert rate == pytest.approx((stress / K) ** (1 / N), rel=5e-3)


def test_fit_command_writes_the_slip_law_beside_the_fluid(slip_file, tmp_path, capsys):
    out = tmp_path / "fit"
    assert main(["fit", str(slip_file), "--models", "power-law", "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "wall slip (Mooney analysis of 4 wall stresses)" in printed
    definition = tomllib.loads((out / "fluid.toml").read_text())
    assert definition["fluid"]["model"] == "power-law"
    assert definition["fluid"]["flow_index"] == pytest.approx(N, rel=3e-3)
    consistency = float(definition["fluid"]["consistency"].split()[0])
    assert consistency == pytest.approx(K, rel=2e-2)
    slip = definition["drive"]["slip"]["wall"]
    assert slip["coefficient"] == pytest.approx(BETA, rel=1e-3)
    assert slip["exponent"] == pytest.approx(P, rel=1e-4)
    report = json.loads((out / "fit.json").read_text())
    assert len(report["slip"]["points"]) == 4
    # the written definition is a valid case fragment: slip and fluid together solve
    case = Case.from_dict({"fluid": definition["fluid"],
                           "geometry": {"shape": "pipe", "radius": 0.004},
                           "drive": {"pressure_gradient": -30000.0, **definition["drive"]}})
    assert solve(case).converged
    assert math.isfinite(case.drive.slip["wall"].coefficient)


def test_one_radius_is_refused(tmp_path):
    path = tmp_path / "one.csv"
    path.write_text("wall_shear_stress [Pa],radius [mm],flow_rate [mL/s]\n30,2,0.1\n60,2,0.3\n")
    with pytest.raises(CaseError, match="two or more radii"):
        analyse(read_slip_data(path))
