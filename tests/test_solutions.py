"""Clustering converged end points into distinct solutions, per chunk and merged."""
from __future__ import annotations

import numpy as np
from scipy.cluster.hierarchy import fcluster, linkage
from scipy.optimize import least_squares

from audit.engine.problem import Problem
from audit.sweep.equivalent_solutions import EXCHANGE, MIRROR, find_equivalent
from audit.sweep.recommend import choose_step_factor
from audit.sweep.solutions import UNCATALOGUED, SolutionTolerance, cluster, merge_catalogues

TOLERANCE = SolutionTolerance(parameter_relative=1e-4, floor=np.array([1e-3, 1e-3]), ssr_relative=1e-6,
                              ssr_floor=1e-20)


def end_points(seed: int = 0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Three optima, each reached with scatter far below the tolerance (test construction)."""
    rng = np.random.default_rng(seed)
    optima = np.array([[2.0, 0.5], [-1.0, 3.0], [5.0, 5.0]])
    levels = np.array([1.0, 4.0, 4.0])  # the last two share an SSR: only the parameters tell them apart
    which = rng.integers(0, 3, size=300)
    params = optima[which] * (1 + 1e-9 * rng.standard_normal((300, 2)))
    return params, levels[which] * (1 + 1e-12 * rng.standard_normal(300)), which


def test_clusters_match_single_linkage_on_relative_distance():
    params, ssr, _ = end_points()
    catalogue, labels = cluster(params, ssr, TOLERANCE)
    # Reference: scipy's hierarchical clustering (single linkage, Chebyshev distance on
    # parameters divided by their size) cut at the same tolerance: the same partition.
    reference = fcluster(linkage(params / np.abs(params).max(axis=0), method="single", metric="chebyshev"),
                         t=1e-4, criterion="distance")
    assert len(catalogue) == len(np.unique(reference)) == 3
    pairs = {(a, b) for a, b in zip(labels, reference)}
    assert len(pairs) == 3
    assert np.all(np.diff(catalogue.ssr) >= 0) and catalogue.count.sum() == 300
    np.testing.assert_allclose(catalogue.params[0], [2.0, 0.5], rtol=1e-8)


def test_merging_chunk_catalogues_equals_clustering_everything():
    params, ssr, _ = end_points(seed=1)
    whole, whole_labels = cluster(params, ssr, TOLERANCE)
    starts = range(0, 300, 70)
    pieces = [cluster(params[i:i + 70], ssr[i:i + 70], TOLERANCE) for i in starts]
    merged, mappings = merge_catalogues([catalogue for catalogue, _ in pieces], TOLERANCE)
    np.testing.assert_array_equal(merged.count, whole.count)
    np.testing.assert_array_equal(merged.params, whole.params)
    for first, (_, labels), mapping in zip(starts, pieces, mappings):
        np.testing.assert_array_equal(mapping[labels], whole_labels[first:first + 70])


def test_catalogue_limit_marks_the_rest_uncatalogued():
    params = np.column_stack([np.arange(1.0, 11.0), np.ones(10)])
    catalogue, labels = cluster(params, np.arange(10.0), TOLERANCE, limit=4)
    assert len(catalogue) == 4
    np.testing.assert_array_equal(labels, [0, 1, 2, 3] + [UNCATALOGUED] * 6)


def test_solutions_inside_the_ranges_lead_and_survive_the_cap():
    # Ten distinct points with SSR 0..9; only the two worst lie inside the ranges (a > 8). With a
    # cap of 4 the inside ones are kept first (the reference is the lowest SSR inside), then the
    # two lowest outside; the definition of the ordering is the reference.
    params = np.column_stack([np.arange(1.0, 11.0), np.ones(10)])
    catalogue, labels = cluster(params, np.arange(10.0), TOLERANCE, limit=4, contains=lambda p: p[:, 0] > 8)
    assert list(catalogue.ssr) == [8.0, 9.0, 0.0, 1.0]
    np.testing.assert_array_equal(labels, [2, 3] + [UNCATALOGUED] * 6 + [0, 1])


def test_recommendation_never_picks_a_setting_that_did_not_reach_the_best():
    # Settings with no start reaching the best have no iterations to compare: they cannot tie.
    share = np.array([[0.0, 0.003, 0.0]])
    median = np.array([[np.nan, 38.0, np.nan]])
    no_region = np.full((1, 3), np.nan)
    assert choose_step_factor(share, median, np.array([1.0, 0.5, 0.25]), ("gn",), no_region, np.zeros((1, 3)),
                              no_region)[0] == (0, 1)


def two_decays_problem() -> tuple[Problem, np.ndarray]:
    """y = a·exp(−b·x) + c·exp(−d·x), noisy (constructed data); the model is unchanged when the
    terms swap places, (a, b, c, d) → (c, d, a, b) (calculus: the sum is symmetric)."""
    x = np.linspace(0, 10, 200)

    def model(x, a, b, c, d):
        return a * np.exp(-b * x) + c * np.exp(-d * x)

    y = model(x, 5.0, 1.3, 2.0, 0.2) + 0.01 * np.random.default_rng(3).standard_normal(x.size)
    return Problem(model, x, y, ("a", "b", "c", "d")), x


def test_exchanged_terms_are_the_same_curve_and_named():
    problem, _ = two_decays_problem()
    # Reference: scipy.optimize.least_squares from a start near each labelling.
    fits = [least_squares(lambda p: problem.residuals(p[None, :])[0], start, method="lm", xtol=1e-14).x
            for start in ([4.0, 1.0, 1.0, 0.1], [1.0, 0.1, 4.0, 1.0])]
    np.testing.assert_allclose(fits[1], fits[0][[2, 3, 0, 1]], rtol=1e-6)
    found = find_equivalent(problem, np.array(fits), np.array([False, True]), 1e-4, np.full(4, 1e-6))
    assert list(found.same_curve) == [False, True]
    assert found.relation == ["", "a↔c, b↔d"] and found.kind == ["", EXCHANGE]


def test_exchanged_terms_of_exact_data_are_the_same_curve():
    # Noise-free data: the best fit's residuals vanish, the exchanged terms (converged only to
    # about 1e-12, as a solver leaves them) still give its curve.
    x = np.linspace(0, 10, 50)
    problem = Problem(lambda x, a, b, c, d: a * np.exp(-b * x) + c * np.exp(-d * x), x,
                      5.0 * np.exp(-1.3 * x) + 2.0 * np.exp(-0.2 * x), ("a", "b", "c", "d"))
    params = np.array([[5.0, 1.3, 2.0, 0.2], [2.0, 0.2, 5.0, 1.3 * (1 + 1e-12)]])
    found = find_equivalent(problem, params, np.array([False, True]), 1e-4, np.full(4, 1e-6))
    assert list(found.same_curve) == [False, True] and found.relation[1] == "a↔c, b↔d"


def test_mirrored_width_is_named_as_a_sign_change():
    # A Gaussian peak depends on its width only through w², so w and −w give one curve (calculus).
    x = np.linspace(-3, 3, 60)
    problem = Problem(lambda x, h, w: h * np.exp(-(x / w) ** 2), x,
                      2.0 * np.exp(-(x / 0.8) ** 2) + 0.01 * np.cos(7 * x), ("h", "w"))
    best = least_squares(lambda p: problem.residuals(p[None, :])[0], [1.5, 1.0], method="lm", xtol=1e-14).x
    params = np.array([best, best * [1, -1]])
    found = find_equivalent(problem, params, np.array([False, True]), 1e-4, np.full(2, 1e-6))
    assert list(found.same_curve) == [False, True] and found.relation[1] == "w → −w"
    assert found.kind[1] == MIRROR


def test_a_structurally_undetermined_pair_is_not_called_a_symmetry():
    # y = a·b·x: (2, 3) and (3, 2) give one curve, but so does every a·b = 6; the information
    # matrix is singular there (its columns b·x and a·x are proportional), the standard errors
    # are not finite, and the two points are not separate minima.
    x = np.linspace(1, 5, 20)
    problem = Problem(lambda x, a, b: a * b * x, x, 6.0 * x + 0.01 * np.sin(5 * x), ("a", "b"))
    # Reference: the least-squares slope of y on x (numpy.linalg.lstsq) is the fitted product.
    product = np.linalg.lstsq(x[:, None], problem.y, rcond=None)[0][0]
    best = np.array([2.0, product / 2.0])
    found = find_equivalent(problem, np.array([best, best[::-1]]), np.array([False, True]), 1e-4, np.full(2, 1e-6))
    assert not found.same_curve.any()


def test_a_different_curve_with_a_level_ssr_is_not_the_same_curve():
    problem, x = two_decays_problem()
    best = least_squares(lambda p: problem.residuals(p[None, :])[0], [4.0, 1.0, 1.0, 0.1], method="lm",
                         xtol=1e-14).x
    other = best * [1.0, 1.0, 1.0, 1.01]
    found = find_equivalent(problem, np.array([best, other]), np.array([False, True]), 1e-4, np.full(4, 1e-6))
    assert not found.same_curve.any() and found.relation == ["", ""]
