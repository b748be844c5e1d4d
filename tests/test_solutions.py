"""Clustering converged end points into distinct solutions, per chunk and merged."""
from __future__ import annotations

import numpy as np
from scipy.cluster.hierarchy import fcluster, linkage

from audit.recommend import choose_step_factor
from audit.solutions import UNCATALOGUED, Catalogue, SolutionTolerance, cluster, inside_first, merge_catalogues, relabel

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


def test_inside_first_reorders_and_relabels():
    # The reference row is the lowest SSR among the solutions inside the ranges; labels follow.
    catalogue = Catalogue(params=np.array([[0.0], [1.0], [2.0]]), ssr=np.array([1.0, 2.0, 3.0]),
                          count=np.array([5, 6, 7]))
    reordered, new_row = inside_first(catalogue, np.array([False, True, True]))
    assert list(reordered.ssr) == [2.0, 3.0, 1.0] and list(reordered.count) == [6, 7, 5]
    assert list(relabel(np.array([0, 1, 2, UNCATALOGUED]), new_row)) == [2, 0, 1, UNCATALOGUED]


def test_recommendation_never_picks_a_setting_that_did_not_reach_the_best():
    # Settings with no start reaching the best have no iterations to compare: they cannot tie.
    share = np.array([[0.0, 0.003, 0.0]])
    median = np.array([[np.nan, 38.0, np.nan]])
    assert choose_step_factor(share, median, np.array([1.0, 0.5, 0.25]))[0] == (0, 1)
