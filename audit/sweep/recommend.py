"""From tallies to advice: iteration percentiles, the safe starting region, the step factor to use.

The sweep streams over its chunks and keeps only histograms (iterations per category, and the
distance of each start from the best fit); everything here works on those, so the advice
costs the same for a thousand starts as for a million.

Safe region. Distances are measured in unit-cube coordinates (each axis linear or logarithmic
as declared, 0 and 1 at its range ends) as the largest coordinate difference from the best
fit, so the set of starts within distance t is a cube of half-width t around the best fit,
clipped to the ranges. The safe region for a step factor is the largest such cube inside which
at least ``REGION_LEVEL`` of the starts reached the best solution and which holds at least
``REGION_MIN_STARTS`` starts (with fewer, one failure would already move the share by more
than the 1% allowed, so the share would say little). Its per-parameter ranges are the extent,
along each axis, of the starts inside it.
"""
from __future__ import annotations

import numpy as np

#: Share of starts inside the safe region that must reach the best solution.
REGION_LEVEL = 0.99
REGION_MIN_STARTS = 100
#: Resolution of the distance histogram: the region's half-width is known to 1/DISTANCE_BINS
#: of the unit cube.
DISTANCE_BINS = 1000
#: Basin shares closer than this are treated as equal when choosing a step factor; then the
#: one needing fewer iterations wins. Half a percentage point: a smaller difference does not
#: pay for slower convergence.
SHARE_TIE = 0.005


def start_distances(unit: np.ndarray, centre: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distances (c,) of starts from ``centre`` and their histogram bins (c,).

    Args:
        unit: (c, n) unit coordinates of the starts; centre: (n,) of the best fit.
    """
    distance = np.max(np.abs(unit - centre), axis=1)
    return distance, np.minimum((distance * DISTANCE_BINS).astype(np.int64), DISTANCE_BINS - 1)


def histogram_percentile(histogram: np.ndarray, q: float) -> np.ndarray:
    """Percentile ``q`` (0..100) of integer values given as counts (..., L) of 0..L-1.

    The inverted-CDF definition (numpy's ``method="inverted_cdf"``): the smallest value whose
    cumulative share reaches q/100. NaN where the histogram is empty.
    """
    histogram = np.asarray(histogram)
    cumulative = np.cumsum(histogram, axis=-1)
    total = cumulative[..., -1:]
    reached = cumulative >= np.maximum(q / 100.0 * total, 1e-12)
    value = np.argmax(reached, axis=-1).astype(float)
    return np.where(total[..., 0] > 0, value, np.nan)


def safe_regions(total: np.ndarray, best: np.ndarray, farthest: np.ndarray, level: float = REGION_LEVEL,
                 min_starts: int = REGION_MIN_STARTS) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The largest cube around the best fit that is safe, per method and step factor.

    The cube's half-width is the distance of the farthest start inside it, not the edge of its
    histogram bin, so that the region never claims space beyond the starts that were tried.

    Args:
        total: (DISTANCE_BINS,) starts per distance bin.
        best: (M, F, DISTANCE_BINS) of them reaching the best solution.
        farthest: (DISTANCE_BINS,) largest distance seen in each bin (−inf where empty).

    Returns:
        last (M, F) the last distance bin inside the cube (−1 when no cube qualifies), radius
        (M, F) its half-width (NaN when none), starts (M, F) inside it, and share (M, F) of
        those reaching the best.
    """
    inside = np.cumsum(total)
    reached = np.cumsum(best, axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = reached / inside
    good = (share >= level) & (inside >= min_starts)
    any_good = good.any(axis=-1)
    last = np.where(any_good, len(total) - 1 - np.argmax(good[..., ::-1], axis=-1), -1)
    chosen = np.maximum(last, 0)
    radius = np.where(any_good, np.maximum.accumulate(farthest)[chosen], np.nan)
    starts = np.where(any_good, inside[chosen], 0)
    chosen_share = np.where(any_good, np.take_along_axis(share, chosen[..., None], axis=-1)[..., 0], np.nan)
    return last, radius, starts, chosen_share


def region_box(last: np.ndarray, unit_low: np.ndarray, unit_high: np.ndarray, space) -> tuple[np.ndarray, np.ndarray]:
    """Per-parameter ranges of the safe regions: the extent of the starts tried inside each.

    Taking the starts' extent rather than the cube's sides keeps every claimed range within
    values that were tried (the cube may reach past the last start along some axis).

    Args:
        last: (M, F) last distance bin of each region, −1 for none.
        unit_low, unit_high: (DISTANCE_BINS, n) smallest and largest unit coordinate of the
            starts in each bin (±inf where empty).
        space: the ``SearchSpace``, to turn unit coordinates into parameter values.

    Returns:
        lower and upper (M, F, n) parameter values, NaN where there is no region.
    """
    low = np.minimum.accumulate(unit_low, axis=0)[np.maximum(last, 0)]
    high = np.maximum.accumulate(unit_high, axis=0)[np.maximum(last, 0)]
    missing = (last < 0)[..., None]
    return (np.where(missing, np.nan, space.from_unit(np.where(missing, 0.0, low))),
            np.where(missing, np.nan, space.from_unit(np.where(missing, 0.0, high))))


def choose_step_factor(basin_share: np.ndarray, median_iterations: np.ndarray, step_factors: np.ndarray,
                       methods: tuple[str, ...], region_radius: np.ndarray, region_starts: np.ndarray,
                       region_share: np.ndarray) -> tuple[tuple[int, int] | None, str]:
    """The (method, step factor) to recommend, with the starting region it is safe from, and why.

    A recommendation is only as good as the region it can be used from, so the settings that
    have a safe region come first; among them (or among all settings that reached the best,
    when none has a region) the highest basin share wins; shares within ``SHARE_TIE`` of it
    count as equal and among those the fewest median iterations win, then the larger step
    factor, then the first method.

    Args:
        basin_share: (M, F) share of starts reaching the best solution.
        median_iterations: (M, F) median iterations of those runs.
        step_factors: (F,); methods: (M,) their names.
        region_radius: (M, F) half-width of each setting's safe region in unit-cube
            coordinates, NaN where it has none; region_starts, region_share: (M, F) the starts
            inside it and the share of them reaching the best.

    Returns:
        (m, f) indices, or None when no start reached the best solution; and the reason, which
        names the region the choice is safe from.
    """
    reached = basin_share > 0
    if not reached.any():
        return None, "no start reached the best solution (a converged solution inside the searched ranges)"
    safe = reached & np.isfinite(region_radius)
    pool = safe if safe.any() else reached
    top = float(np.max(np.where(pool, basin_share, -1.0)))
    # A setting that never reached the best has no iterations to compare: it cannot tie.
    contenders = np.argwhere(pool & (basin_share >= top - SHARE_TIE))
    keys = [(median_iterations[m, f], -step_factors[f], m) for m, f in contenders]
    m, f = (int(i) for i in contenders[min(range(len(keys)), key=keys.__getitem__)])
    if len(contenders) == 1:
        reason = "highest share of starts reaching the best solution"
    else:
        reason = (f"{len(contenders)} settings reach the best solution from shares within "
                  f"{SHARE_TIE:.1%} of the highest; this one needs the fewest iterations")
    if not safe.any():
        return (m, f), (f"{reason}; no setting has a safe starting region (a box around the best fit holding at "
                        f"least {REGION_MIN_STARTS} starts of which {REGION_LEVEL:.0%} reach it), so start close "
                        "to the best fit or sweep more starts to find one")
    region = (f"safe from starts within {region_radius[m, f]:.3f} of each range's width around the best fit "
              f"({region_share[m, f]:.1%} of the {int(region_starts[m, f])} starts there reached it)")
    unsafe = reached & ~safe & (basin_share > basin_share[m, f] + SHARE_TIE)
    if unsafe.any():
        um, uf = np.unravel_index(np.argmax(np.where(unsafe, basin_share, -1.0)), basin_share.shape)
        return (m, f), (f"{region}; {methods[um]} with step factor {step_factors[uf]:g} reaches the best from "
                        f"more starts ({basin_share[um, uf]:.1%} against {basin_share[m, f]:.1%}) but from no box "
                        f"around the best fit reliably, so it cannot be recommended from any starting region")
    return (m, f), f"{reason} among the settings with a safe starting region; {region}"
