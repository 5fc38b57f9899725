"""The shortcuts that cut a study's per-case overhead give exactly what the long ways give:
units read once per chunk, the size check without key paths, the finite check without
dotted names, the flattening of plain types, the mass matrix kept per basis, and the
raw mapping a grid point's case keeps. Speed itself is measured in bench/sweep.py."""

import copy
import math
import random

import numpy as np
import pytest

from gnflow import Case, CaseError, post
from gnflow import case as case_module
from gnflow.solver import solve as solve_flow
from gnflow.sweep import build_case, flatten_summary, hold_consistency
from gnflow.units import quantity, remembering_texts

PIPE = {"fluid": {"model": "power-law", "consistency": "0.8 Pa*s^0.5", "flow_index": 0.5,
                  "density": "1000 kg/m^3"},
        "geometry": {"shape": "pipe", "radius": "25 mm"},
        "drive": {"pressure_gradient": "-1 kPa/m"}, "mesh": {"cells": 20}}


# --------------------------------------------------------------------------- units

TEXTS = [("25 mm", "length", None), ("-1 kPa/m", "pressure_gradient", None),
         ("0.8 Pa*s^0.5", "consistency", 0.5), ("0.8 Pa*s^0.45", "consistency", 0.45),
         ("45 cP", "viscosity", None), ("40 degC", "temperature", None),
         ("0.5 dyn*s/cm^2", "viscosity", None), ("3", "length", None)]


def test_remembered_texts_give_the_values_read_afresh():
    fresh = [quantity(text, dimension, "k", n) for text, dimension, n in TEXTS]
    with remembering_texts():
        first = [quantity(text, dimension, "k", n) for text, dimension, n in TEXTS]
        again = [quantity(text, dimension, "k", n) for text, dimension, n in TEXTS]
    assert first == fresh and again == fresh
    # the flow index is part of what is remembered: Pa*s^0.5 is not Pa*s^0.45
    with remembering_texts():
        assert quantity("0.8 Pa*s^0.5", "consistency", "k", 0.5) == 0.8
        with pytest.raises(CaseError, match="has dimension"):
            quantity("0.8 Pa*s^0.5", "consistency", "k", 0.45)


def test_bad_texts_raise_each_time_naming_their_own_key():
    with remembering_texts():
        for key in ("geometry.radius", "geometry.gap"):
            with pytest.raises(CaseError) as err:
                quantity("3 kg", "length", key)
            assert str(err.value).startswith(f"{key} = '3 kg'")
        with pytest.raises(CaseError, match="fluid.density"):
            quantity("25 mm", "density", "fluid.density")   # another dimension: not reused
        assert quantity("25 mm", "length", "k") == 0.025


def test_the_store_is_emptied_after_the_block():
    from gnflow import units
    with remembering_texts():
        quantity("25 mm", "length", "k")
        assert units._REMEMBERED.get() == {("25 mm", "length", None): 0.025}
    assert units._REMEMBERED.get() is None


# --------------------------------------------------------------------------- case size check

def _walk_passes(mapping) -> bool:
    """The check as it walks with key paths, step for step, answering instead of raising."""
    stack, count = [((), mapping)], 0
    while stack:
        path, value = stack.pop()
        count += 1
        if count > case_module.MAX_ITEMS:
            return False
        if isinstance(value, (dict, list)):
            if len(path) >= case_module.MAX_DEPTH:
                return False
            items = value.items() if isinstance(value, dict) else enumerate(value)
            stack.extend((path + (k,), v) for k, v in items)
    return True


def test_size_check_shortcut_agrees_with_the_walk_that_names_keys():
    rng = random.Random(16)

    def make(depth, wide):
        if depth > 8 or rng.random() < 0.35:
            return rng.choice([1, "a", 2.0, True, [], {}])
        n = rng.choice([4990, 5010, 9990]) if wide and depth == 2 else rng.choice([0, 1, 2, 3])
        if rng.random() < 0.5:
            return {str(i): make(depth + 1, wide) for i in range(n)}
        return [make(depth + 1, wide) for _ in range(n)]

    outcomes = set()
    for trial in range(600):
        mapping = {"fluid": make(1, trial % 20 == 0)}
        passes = _walk_passes(mapping)
        assert case_module._within_size(mapping) == passes, trial
        outcomes.add(passes)
        if not passes:
            with pytest.raises(CaseError):
                case_module._check_size(mapping)
    assert outcomes == {True, False}
    limit = case_module.MAX_ITEMS
    assert case_module._within_size({"x": list(range(limit - 2))})
    assert not case_module._within_size({"x": list(range(limit - 1))})
    empty_deep = {"a": {"b": {"c": {"d": {"e": {"f": {}}}}}}}   # an empty table 6 deep
    assert not _walk_passes(empty_deep) and not case_module._within_size(empty_deep)


# --------------------------------------------------------------------------- a grid point's case

def test_a_grid_point_case_keeps_its_own_mapping():
    case = Case.from_dict(PIPE)
    raw = hold_consistency(case.raw, case, ["drive.pressure_gradient"])
    before = copy.deepcopy(raw)
    point = build_case(raw, ("drive.pressure_gradient",), (-2000.0,))
    expected = copy.deepcopy(raw)
    expected["drive"]["pressure_gradient"] = -2000.0
    assert point.raw == expected
    assert point.raw == Case.from_dict(expected).raw
    point.raw["geometry"]["radius"] = "1 m"    # the study's mapping is not the case's
    assert raw == before
    # from_dict's own default still keeps a copy
    mapping = copy.deepcopy(PIPE)
    kept = Case.from_dict(mapping)
    mapping["geometry"]["radius"] = "9 mm"
    assert kept.raw["geometry"]["radius"] == "25 mm"
    assert Case.from_dict(mapping, copy_raw=False).raw is mapping


# --------------------------------------------------------------------------- summary checks

def _random_summary(rng, depth=0):
    choices = [1.5, -2.0, 0.0, 3, True, "text", None, np.float64(2.5), np.int64(4),
               np.float32(1.0), math.nan, math.inf, -math.inf, np.float64(math.nan),
               np.float32(math.inf)]
    if depth > 3 or rng.random() < 0.4:
        # mostly finite, so both outcomes turn up
        return rng.choice(choices[:10] * 6 + choices[10:])
    if rng.random() < 0.6:
        return {f"k{i}": _random_summary(rng, depth + 1) for i in range(rng.randint(0, 4))}
    kind = rng.choice([list, tuple])
    return kind(_random_summary(rng, depth + 1) for _ in range(rng.randint(0, 4)))


def test_finite_shortcut_agrees_with_the_named_check():
    rng = random.Random(7)
    outcomes = set()
    for _ in range(2000):
        summary = {"a": _random_summary(rng), "b": _random_summary(rng)}
        finite = post._all_finite(summary)
        assert finite == (post._non_finite(summary) == []), summary
        outcomes.add(finite)
    assert outcomes == {True, False}
    assert not post._all_finite({"a": [{"b": (1.0, np.float64(-np.inf))}]})
    assert not post._all_finite({"a": [np.float32(np.nan)]})   # a numpy float, not a float
    assert post._all_finite({"a": np.array([np.nan])})   # arrays are not summary numbers


def _flatten_by_rules(summary):
    """flatten_summary's rules, written out: isinstance checks only."""
    from gnflow.sweep import column_unit
    flat = {}

    def add(prefix, value):
        if isinstance(value, dict):
            for key, inner in value.items():
                add(prefix if key == "per_wall" else f"{prefix}_{key}", inner)
        elif isinstance(value, (int, float)) and not isinstance(value, bool):
            if column_unit(prefix) is not None:
                flat[prefix] = float(value) if isinstance(value, float) else int(value)

    for key, value in summary.items():
        if key == "regularisation" and isinstance(value, dict):
            flat["regularisation_error_estimate"] = float(value["error_estimate"])
        else:
            add(key, value)
    limit = flat.get("laminar_limit_reynolds_number")
    compared = flat.get("plastic_reynolds_number", flat.get("reynolds_number"))
    if limit is not None and compared is not None:
        flat["beyond_laminar_limit"] = bool(compared > limit)
    return flat


def test_flattening_plain_and_numpy_numbers_follows_the_rules():
    summary = {"flow_rate": np.float64(2.0), "mean_velocity": 1.5, "iterations": 7,
               "dofs": 41, "residual": np.int64(3), "converged": True, "yields": False,
               "max_velocity": None, "moving_walls": ["wall"], "title": "x",
               "wall_shear_stress": {"mean": 3.0, "per_wall": {"wall": np.float64(3.0)},
                                     "convention": "text"},
               "laminar_limit": {"reynolds_number": 2100, "criterion": "2100"},
               "reynolds_number": 3000.0, "regularisation": {"error_estimate": 1e-4}}
    flat = flatten_summary(summary)
    assert flat == _flatten_by_rules(summary)
    assert list(flat) == list(_flatten_by_rules(summary))
    assert type(flat["flow_rate"]) is float and type(flat["iterations"]) is int
    assert "residual" not in flat and "dofs" not in flat   # np.int64 is no int; no unit
    solved = solve_flow(Case.from_dict(PIPE))
    real = post.summarise(solved, None, None)
    assert flatten_summary(real) == _flatten_by_rules(real)


# --------------------------------------------------------------------------- projection

def test_projection_with_the_kept_mass_matrix_is_the_fresh_one():
    from skfem import asm
    import scipy.sparse as sp
    import scipy.sparse.linalg as spla

    solved = solve_flow(Case.from_dict(PIPE))
    basis = solved.domain.basis
    gradient = basis.interpolate(solved.u).grad[0]
    mass = asm(post._mass, basis).tocsr()
    load = asm(post._load_of, basis, value_at_points=gradient)
    fresh, _ = spla.cg(mass, load, rtol=1e-12, maxiter=500, M=sp.diags(1.0 / mass.diagonal()))
    first, second = post.project(basis, gradient), post.project(basis, gradient)
    assert np.array_equal(first, fresh) and np.array_equal(second, fresh)
    assert post._mass_system(basis) is post._mass_system(basis)
    other = solve_flow(Case.from_dict({**PIPE, "mesh": {"cells": 12}})).domain.basis
    assert post._mass_system(other)[0].shape != post._mass_system(basis)[0].shape
