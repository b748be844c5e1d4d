"""Start designs: grid, Sobol', Latin hypercube and map slices, made chunk by chunk."""
from __future__ import annotations

import warnings

import numpy as np
import pytest
from scenario_files import data_columns, scenario_toml
from scipy.stats import qmc

from audit.errors import InputError
from audit.inputs.scenario import load_scenario
from audit.sweep.permutation import keyed_permutation, permutation_keys
from audit.sweep.starts import SearchSpace, make_design, map_axis_values, map_design, search_space

SPACE = SearchSpace(names=("amplitude", "rate", "offset"), lower=np.array([0.0, 1e-3, -1.0]),
                    upper=np.array([10.0, 10.0, 1.0]), log=np.array([False, True, False]))


def in_chunks(design, size: int) -> np.ndarray:
    return np.vstack([design.unit(first, min(first + size, design.count)) for first in range(0, design.count, size)])


def test_grid_axes_are_linspace_and_geomspace():
    design = make_design(SPACE, "grid", 1000, seed=1)
    assert design.count == 10**3 and design.per_axis == 10
    starts = design.starts(0, design.count)
    # Reference: numpy.linspace / numpy.geomspace give the points of an evenly spaced axis.
    np.testing.assert_allclose(np.unique(starts[:, 0]), np.linspace(0, 10, 10), rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(np.unique(starts[:, 1]), np.geomspace(1e-3, 10, 10), rtol=1e-12)
    np.testing.assert_allclose(np.unique(starts[:, 2]), np.linspace(-1, 1, 10), rtol=1e-12, atol=1e-12)
    assert len(np.unique(starts, axis=0)) == design.count


def test_grid_rounds_down_to_whole_points_per_axis():
    assert make_design(SPACE, "grid", 999, seed=1).count == 9**3
    assert make_design(SPACE, "grid", 3, seed=1).count == 2**3


def test_sobol_chunks_equal_scipys_sequence():
    design = make_design(SPACE, "sobol", 1024, seed=7)
    # Reference: scipy.stats.qmc.Sobol drawn in one piece with the same scrambling seed.
    whole = qmc.Sobol(3, scramble=True, rng=np.random.default_rng(design.sobol_seed)).random(1024)
    np.testing.assert_array_equal(in_chunks(design, 100), whole)
    np.testing.assert_array_equal(in_chunks(design, 256), whole)


def test_latin_hypercube_is_one_valid_design_whatever_the_chunks():
    design = make_design(SPACE, "lhs", 1000, seed=11)
    whole = design.unit(0, 1000)
    # Definition of a Latin hypercube (McKay, Beckman & Conover 1979): on every axis each of the
    # N equal strata holds exactly one point.
    for axis in range(3):
        np.testing.assert_array_equal(np.sort(np.floor(whole[:, axis] * 1000)), np.arange(1000))
    np.testing.assert_array_equal(in_chunks(design, 97), whole)
    np.testing.assert_array_equal(design.unit(500, 503), whole[500:503])


def test_latin_hypercube_spreads_like_scipys():
    ours = qmc.discrepancy(make_design(SPACE, "lhs", 512, seed=3).unit(0, 512))
    # Reference: scipy.stats.qmc.LatinHypercube (random permutations) over ten seeds; a keyed
    # permutation should spread its points no worse than the worst of them.
    theirs = [qmc.discrepancy(qmc.LatinHypercube(3, rng=seed).random(512)) for seed in range(10)]
    assert ours <= max(theirs)


def test_designs_depend_on_the_seed_only():
    for kind in ("sobol", "lhs"):
        first = make_design(SPACE, kind, 64, seed=5).unit(0, 64)
        np.testing.assert_array_equal(first, make_design(SPACE, kind, 64, seed=5).unit(0, 64))
        assert not np.array_equal(first, make_design(SPACE, kind, 64, seed=6).unit(0, 64))


@pytest.mark.parametrize("size", [1, 2, 3, 5, 64, 1000, 4097])
def test_keyed_permutation_is_a_permutation(size):
    keys = permutation_keys(np.random.default_rng(size), 1)[0]
    # Definition of a permutation: every index 0..N-1 exactly once.
    np.testing.assert_array_equal(np.sort(keyed_permutation(np.arange(size), size, keys)), np.arange(size))


def test_unit_coordinates_round_trip():
    values = np.array([[2.5, 0.1, 0.0], [10.0, 1e-3, -1.0]])
    np.testing.assert_allclose(SPACE.from_unit(SPACE.to_unit(values)), values, rtol=1e-12, atol=1e-15)
    # On a log axis the middle of the unit interval is the geometric mean of the ends.
    assert SPACE.from_unit(np.array([0.5, 0.5, 0.5]))[1] == pytest.approx(np.sqrt(1e-3 * 10))


def test_map_varies_two_parameters_and_holds_the_rest_exactly():
    base = np.array([3.3, 0.123456789, 0.25])
    plane = map_design(SPACE, (1, 0), 6, base)
    starts = plane.starts(0, plane.count)
    x_values, y_values = map_axis_values(plane)
    np.testing.assert_allclose(x_values, np.geomspace(1e-3, 10, 6), rtol=1e-12)
    np.testing.assert_allclose(y_values, np.linspace(0, 10, 6), atol=1e-12)
    assert np.all(starts[:, 2] == base[2])
    # Row-major: x (rate) runs fastest, y (amplitude) along rows.
    np.testing.assert_allclose(starts[:6, 1], x_values, rtol=1e-12)
    np.testing.assert_allclose(starts[::6, 0], y_values, atol=1e-12)


def test_map_needs_two_distinct_parameters():
    with pytest.raises(InputError):
        map_design(SPACE, (1, 1), 5, np.ones(3))
    with pytest.raises(InputError):
        map_design(SPACE, (0, 1), 1, np.ones(3))


def test_a_parameter_without_range_is_an_error(write_scenario):
    folder = write_scenario(scenario_toml(data=data_columns("t", "y"), parameters={"k": {"start": 2.0}}),
                            model="def model(t, k):\n    return k * t\n", data="t,y\n1,2\n2,4\n3,6\n")
    with pytest.raises(InputError, match=r"\[parameters\] k: the sweep needs a range.*range = \[0.2, 20\]"):
        search_space(load_scenario(folder))


def test_a_linear_range_beyond_the_power_limit_maps_without_overflow():
    # A linear axis is a straight interpolation (reference: numpy.interp); only log axes take a
    # power of ten, so 10**1000 must never be formed for the linear one (an overflow warning).
    space = SearchSpace(names=("shift", "scale"), lower=np.array([0.0, 1.0]), upper=np.array([1000.0, 100.0]),
                        log=np.array([False, True]))
    unit = np.array([[0.0, 0.0], [0.5, 0.5], [1.0, 1.0]])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        values = space.from_unit(unit)
    assert np.array_equal(values[:, 0], np.interp(unit[:, 0], [0, 1], [0.0, 1000.0]))
    assert np.allclose(values[:, 1], [1.0, 10.0, 100.0], rtol=1e-15)
