"""Mesh-convergence numerics: a published worked example, exact synthetic sequences,
oscillation and divergence, and the degenerate inputs."""

import dataclasses
import doctest
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import gnflow.convergence
from gnflow.convergence import (gci_of_finest, grid_convergence_index, observed_orders,
                                representative_cell_size, richardson_extrapolate)

# Celik, Ghia, Roache, Freitas, Coleman & Raad (2008), J. Fluids Eng. 130(7), 078001,
# Table 1 "Sample calculations of discretization error": three 2-D meshes of N1, N2, N3
# cells (h = N^(-1/2)) and phi1, phi2, phi3 for three quantities, with the reported
# apparent order, extrapolated value and relative errors (percent, rounded as printed).
# (values recalled from memory of Celik et al. 2008, Table 1)
# The inputs and phi_ext are recalled to all printed digits and reproduced to all of
# them, which is good evidence the recollection is right. Column 2's e_ext (0.85 % by
# the definition) sits on a rounding boundary and is not recalled with confidence, so
# it is checked against the definition only; column 3's order is recalled as 1.5 and
# compared to one decimal.
CELIK_2008_TABLE_1 = {
    "reattachment length, monotone": dict(
        cells=(18000, 8000, 4500), values=(6.063, 5.972, 5.863),
        r21=1.5, r32=1.333, p=(1.53, 2), phi_ext=(6.1685, 4),
        e_a=1.5, e_ext=1.7, gci=2.2, oscillatory=False),
    "axial velocity, y = 0.0526": dict(
        cells=(18000, 4500, 980), values=(10.7880, 10.7250, 10.6050),
        r21=2.0, r32=2.143, p=(0.75, 2), phi_ext=(10.8801, 4),
        e_a=0.6, e_ext=None, gci=1.1, oscillatory=False),
    "axial velocity, y = 0.105, oscillatory": dict(
        cells=(18000, 4500, 980), values=(6.0042, 5.9624, 6.0909),
        r21=2.0, r32=2.143, p=(1.5, 1), phi_ext=(6.0269, 4),
        e_a=0.7, e_ext=0.4, gci=0.5, oscillatory=True),
}


@pytest.mark.parametrize("column", CELIK_2008_TABLE_1.values(), ids=CELIK_2008_TABLE_1.keys())
def test_celik_2008_table_1(column):
    h = representative_cell_size(column["cells"], dimension=2)
    study = grid_convergence_index(h, column["values"])

    assert round(study.refinement_ratio_21, 3) == column["r21"]
    assert round(study.refinement_ratio_32, 3) == column["r32"]
    assert round(study.apparent_order, column["p"][1]) == column["p"][0]
    assert round(study.extrapolated_value, column["phi_ext"][1]) == column["phi_ext"][0]
    assert round(100 * study.approximate_relative_error, 1) == column["e_a"]
    if column["e_ext"] is not None:
        assert round(100 * study.extrapolated_relative_error, 1) == column["e_ext"]
    assert round(100 * study.gci_fine, 1) == column["gci"]
    assert study.converging
    assert study.oscillatory == column["oscillatory"]


def test_celik_example_is_independent_of_level_order():
    column = CELIK_2008_TABLE_1["reattachment length, monotone"]
    h = representative_cell_size(column["cells"], dimension=2)
    forward = grid_convergence_index(h, column["values"])
    backward = grid_convergence_index(h[::-1], column["values"][::-1])
    assert forward == backward
    assert forward.h[0] < forward.h[1] < forward.h[2]


def test_definitions_hold_between_the_reported_quantities():
    column = CELIK_2008_TABLE_1["axial velocity, y = 0.0526"]
    study = grid_convergence_index(representative_cell_size(column["cells"], 2),
                                   column["values"])
    phi1, phi2, _ = study.values
    gain = study.refinement_ratio_21 ** study.apparent_order - 1
    assert study.extrapolated_value == pytest.approx(phi1 + (phi1 - phi2) / gain, rel=1e-14)
    assert study.extrapolated_relative_error == pytest.approx(
        abs((study.extrapolated_value - phi1) / study.extrapolated_value), rel=1e-14)
    assert study.gci_fine == pytest.approx(1.25 * study.approximate_relative_error / gain,
                                           rel=1e-14)


# Exact sequences phi = phi_exact + C h^p: the procedure must give back p and phi_exact,
# and, since e_a21 / (r21^p - 1) = |phi_exact - phi1| / |phi1| for such data, a GCI of
# Fs |phi_exact - phi1| / |phi1|.
@pytest.mark.parametrize("order, r21, r32", [
    (2.0, 2.0, 2.0), (2.0, 1.5, 1.3333), (1.0, 1.4, 2.1), (3.0, 2.5, 1.3),
    (0.6, 1.7, 1.2),
    (2.0, 1.1, 4.0),   # ratios this different defeat the fixed-point iteration
])
def test_exact_power_law_sequence_is_recovered(order, r21, r32):
    phi_exact, coefficient, h1 = 0.731, -4.2, 0.02
    h = np.array([h1, h1 * r21, h1 * r21 * r32])
    values = phi_exact + coefficient * h ** order
    study = grid_convergence_index(h, values, safety_factor=1.25)

    assert study.apparent_order == pytest.approx(order, rel=1e-9)
    assert study.extrapolated_value == pytest.approx(phi_exact, rel=1e-12)
    assert study.gci_fine == pytest.approx(
        1.25 * abs(phi_exact - values[0]) / abs(values[0]), rel=1e-9)
    assert study.extrapolated_relative_error == pytest.approx(
        abs(phi_exact - values[0]) / abs(phi_exact), rel=1e-9)
    assert study.converging and not study.oscillatory
    assert study.note.startswith("monotone convergence")


@settings(max_examples=200, deadline=None)
@given(order=st.floats(0.3, 4.0), r21=st.floats(1.1, 4.0), r32=st.floats(1.1, 4.0),
       coefficient=st.floats(0.1, 10.0), sign=st.sampled_from([-1.0, 1.0]))
def test_apparent_order_of_exact_sequences(order, r21, r32, coefficient, sign):
    h = 0.05 * np.array([1.0, r21, r21 * r32])
    values = 1.0 + sign * coefficient * h ** order
    study = grid_convergence_index(h, values)
    assert study.apparent_order == pytest.approx(order, rel=1e-6)
    assert study.extrapolated_value == pytest.approx(1.0, abs=1e-9)


def test_bracketing_takes_over_when_the_fixed_point_iteration_fails():
    h = 0.02 * np.array([1.0, 1.1, 4.4])
    study = grid_convergence_index(h, 1.0 + h ** 2)
    assert "bracketing" in study.note
    assert study.apparent_order == pytest.approx(2.0, rel=1e-9)


def test_exact_oscillating_sequence_is_recovered():
    # phi_i = phi_exact + C (-1)^i h_i^p alternates about phi_exact; with s = -1 the
    # equation for p is exact for it, as for the monotone sequence with s = +1.
    phi_exact, order = 2.5, 1.5
    h = np.array([0.01, 0.017, 0.03])
    values = phi_exact + 3.0 * np.array([1, -1, 1]) * h ** order
    study = grid_convergence_index(h, values)
    assert study.oscillatory and study.converging
    assert study.apparent_order == pytest.approx(order, rel=1e-10)
    assert "oscillatory convergence" in study.note


@pytest.mark.parametrize("values", [(1.0, 1.1, 1.3), (4.0, 3.7, 3.4), (1.0, 1.3, 2.2)])
def test_constant_ratio_reduces_to_the_closed_form(values):
    r = 2.0
    study = grid_convergence_index([1.0, r, r * r], values)
    eps21, eps32 = values[1] - values[0], values[2] - values[1]
    assert study.apparent_order == pytest.approx(math.log(eps32 / eps21) / math.log(r),
                                                 rel=1e-13)


def test_oscillatory_sequence_is_flagged():
    study = grid_convergence_index([0.1, 0.2, 0.4], [1.00, 1.02, 0.95])
    assert study.oscillatory
    assert study.difference_32 / study.difference_21 < 0
    assert study.converging   # |eps32| > |eps21| with a constant ratio
    assert "oscillatory" in study.note


@pytest.mark.parametrize("values, oscillatory", [
    ((1.0, 1.1, 1.15), False),    # differences halve toward the coarse mesh: diverging
    ((1.0, 1.1, 1.05), True),     # oscillation that grows with refinement
    ((1.0, 1.5, 2.0), False),     # equal differences with equal ratios: p = 0
])
def test_non_converging_sequence_is_flagged(values, oscillatory):
    study = grid_convergence_index([0.1, 0.2, 0.4], values)
    assert not study.converging
    assert study.oscillatory == oscillatory
    assert study.apparent_order <= 1e-12
    assert math.isnan(study.gci_fine) and math.isnan(study.extrapolated_value)
    assert "divergence" in study.note


def test_exact_diverging_sequence_gives_its_negative_order():
    h = np.array([0.1, 0.15, 0.4])
    study = grid_convergence_index(h, 1.0 + h ** -0.5)
    assert not study.converging
    assert study.apparent_order == pytest.approx(-0.5, rel=1e-10)


@pytest.mark.parametrize("values, which", [
    ((1.0, 1.0, 1.1), "two finest"), ((1.0, 1.1, 1.1), "two coarsest"),
    ((3.0, 3.0, 3.0), "all three")])
def test_zero_difference_leaves_the_order_undefined(values, which):
    study = grid_convergence_index([0.1, 0.2, 0.4], values)
    assert math.isnan(study.apparent_order) and math.isnan(study.gci_fine)
    assert not study.converging
    assert which in study.note


def test_result_is_frozen():
    study = grid_convergence_index([0.1, 0.2, 0.4], [1.01, 1.04, 1.16])
    with pytest.raises(dataclasses.FrozenInstanceError):
        study.apparent_order = 3.0


def test_safety_factor_scales_only_the_gci():
    h, values = [0.1, 0.2, 0.4], [1.01, 1.04, 1.16]
    roache = grid_convergence_index(h, values)
    doubled = grid_convergence_index(h, values, safety_factor=2.5)
    assert doubled.gci_fine == pytest.approx(2 * roache.gci_fine, rel=1e-15)
    assert doubled.apparent_order == roache.apparent_order


@pytest.mark.parametrize("h, values", [
    ([0.1, 0.2], [1.0, 1.1]),                    # two levels
    ([0.1, 0.2, 0.4, 0.8], [1, 2, 3, 4]),        # four: that is gci_of_finest's job
    ([0.1, 0.1, 0.4], [1.0, 1.1, 1.2]),          # repeated size
    ([0.1, -0.2, 0.4], [1.0, 1.1, 1.2]),         # negative size
    ([0.1, 0.2, 0.4], [1.0, float("nan"), 1.2]),
    ([0.1, 0.2, 0.4], [1.0, 1.1]),
])
def test_bad_levels_are_refused(h, values):
    with pytest.raises(ValueError):
        grid_convergence_index(h, values)


def test_bad_safety_factor_is_refused():
    with pytest.raises(ValueError):
        grid_convergence_index([0.1, 0.2, 0.4], [1.01, 1.04, 1.16], safety_factor=0)


def test_gci_of_finest_uses_the_three_finest_levels():
    h = np.array([0.05, 0.1, 0.2, 0.4, 0.8])
    values = 1.0 + 0.3 * h ** 2
    values[-1] = 40.0   # a wild coarsest level must not matter
    shuffle = [3, 0, 4, 2, 1]
    study = gci_of_finest(h[shuffle], values[shuffle])
    assert study == grid_convergence_index(h[:3], values[:3])
    assert study.apparent_order == pytest.approx(2.0, rel=1e-10)


def test_gci_of_finest_needs_three_levels():
    with pytest.raises(ValueError):
        gci_of_finest([0.1, 0.2], [1.0, 1.1])


def test_observed_orders_of_synthetic_errors():
    h = np.array([0.4, 0.2, 0.1, 0.07, 0.03])
    errors = 0.8 * h ** 2.0
    orders = observed_orders(h, errors)
    assert math.isnan(orders[0])
    assert np.allclose(orders[1:], 2.0, rtol=1e-12)
    # the same levels fine to coarse, and signed errors, give the same orders
    assert np.allclose(observed_orders(h[::-1], -errors[::-1])[1:], 2.0, rtol=1e-12)


def test_observed_orders_show_a_change_of_regime():
    h = np.array([0.4, 0.2, 0.1, 0.05])
    errors = np.array([1.0, 0.25, 0.125, 0.0625])   # second order, then first
    assert np.allclose(observed_orders(h, errors)[1:], [2.0, 1.0, 1.0])


def test_observed_orders_are_nan_where_an_error_is_zero():
    orders = observed_orders([0.4, 0.2, 0.1, 0.05], [1e-2, 0.0, 1e-4, 2.5e-5])
    assert np.isnan(orders[:3]).all()
    assert orders[3] == pytest.approx(2.0)


def test_observed_orders_refuse_mismatched_input():
    with pytest.raises(ValueError):
        observed_orders([0.4, 0.2], [1e-2, 1e-3, 1e-4])


def test_richardson_extrapolation_is_exact_for_two_term_data():
    phi_exact, order = -3.25, 2.0
    h_fine, h_coarse = 0.013, 0.031
    def phi(h):
        return phi_exact + 7.0 * h ** order
    assert richardson_extrapolate(h_fine, phi(h_fine), h_coarse, phi(h_coarse), order) \
        == pytest.approx(phi_exact, rel=1e-13)


def test_richardson_extrapolation_of_fields():
    nodes = np.linspace(0.0, 1.0, 7)
    exact = np.sin(nodes)
    fine, coarse = exact + 0.01 * nodes, exact + 0.04 * nodes   # first order, r = 4
    extrapolated = richardson_extrapolate(0.25, fine, 1.0, coarse, order=1)
    assert extrapolated.shape == nodes.shape
    assert np.allclose(extrapolated, exact, atol=1e-15)


def test_richardson_extrapolation_refuses_equal_sizes():
    with pytest.raises(ValueError):
        richardson_extrapolate(0.1, 1.0, 0.1, 1.1, order=2)


def test_representative_cell_size():
    assert representative_cell_size([100, 400], dimension=2, measure=4.0) \
        == pytest.approx([0.2, 0.1])
    assert representative_cell_size(1000, dimension=3) == pytest.approx(0.1)
    with pytest.raises(ValueError):
        representative_cell_size([10], dimension=4)


def test_docstring_examples_run():
    failures, attempted = doctest.testmod(gnflow.convergence)
    assert attempted > 0 and failures == 0
