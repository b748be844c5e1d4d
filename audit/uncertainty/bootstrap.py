"""The uncertainty stage: bootstrap refits beside the asymptotic standard errors and t intervals.

``run_bootstrap`` draws replicate data sets with one of the schemes of ``resampling``, refits
every one through ``fit_batch`` starting from the best fit, and does the same for the m
leave-one-out (jackknife) data sets that give BCa its acceleration. The refits run in chunks
(``chunk_size``) through ``parallel.map_chunks`` (``refits``); chunk k draws from a generator
seeded by the scenario's seed and k alone, so the result is the same for any number of jobs or
backend. Given an output folder, every finished chunk is stored at once, so that an interrupted
or repeated bootstrap computes only the chunks that are missing.

Only the refits that reached the best fit's solution enter the statistics: those that end where a
Levenberg-Marquardt descent from the best fit on the same replicate data ends (see
``replicates``), however far from the best fit that is. The share and kind of the others are
reported as a robustness finding of their own. The leave-one-out estimates are such descents.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
from scipy import stats

from ..engine.batch import RefitSettings
from ..engine.best_fit import KnownFit, SweepReference, best_known_fit
from ..engine.estimates import Estimates, estimate
from ..engine.problem import Problem
from ..errors import InputError
from ..inputs.scenario import Scenario
from ..jsonable import jsonable
from ..parallel.chunk_cache import cache_root
from ..parallel.plan import ParallelPlan
from .disagreement import Flag, IntervalComparison, compare_intervals
from .intervals import BcaInterval, bca_interval, jackknife_acceleration, percentile_interval
from .refits import KINDS, Refitter, refit_all, refit_cache_folder, split
from .replicates import FATE_MEANINGS, RefitEnds, ReplicateFits, classify, distance_scale
from .resampling import build_scheme

#: Refits per chunk: up to MAX_CHUNK (large enough for the batched solver to amortise numpy's
#: per-call cost and a worker its per-task cost), and fewer for many observations, so that a
#: chunk's (refits × observations) working arrays stay near CHUNK_ELEMENTS values each.
MAX_CHUNK = 1000
MIN_CHUNK = 8
CHUNK_ELEMENTS = 250_000
#: Fewer used replicates than this and no interval is drawn at all.
MIN_USED = 10
#: Percentile and BCa intervals at the 95% level need about this many replicates for their ends
#: to settle (Efron & Tibshirani 1993; value from memory).
ADVISED_REPLICATES = 1000
#: Below this many observations a bootstrap resamples too few points to stand beside the
#: t interval (common practice; the README's cautions say the same).
FEW_OBSERVATIONS = 20


@dataclass
class BootstrapResult:
    """Bootstrap and asymptotic uncertainty of one fit.

    Attributes:
        names: parameter names (n).
        method: resampling scheme, "residual", "wild" or "pairs".
        wild_multipliers: "rademacher" or "mammen" (wild only, else None).
        leverage_adjusted: residuals divided by sqrt(1 − leverage) (residual and wild only).
        samples: replicates drawn (B).
        seed: seed of the draws.
        confidence: level of every interval.
        refit: solver settings of the refits.
        best: (n,) the best fit, where every refit starts.
        asymptotic: linearised standard errors, covariance and t intervals at ``best``.
        replicates: the B bootstrap refits and their fates.
        jackknife: the m leave-one-out refits and their fates.
        mean, bias, std_error: (n,) over the used replicates; bias = mean − best.
        percentile_lower, percentile_upper: (n,) percentile interval.
        bca: BCa interval with z0 and acceleration.
        comparison: bootstrap vs asymptotic, with the flags.
        pair_region_scale: radius, in standard units, of the asymptotic joint confidence region
            of a parameter pair: sqrt(2·F(confidence; 2, m − n)).
        notes: plain-language remarks on how far the intervals can be trusted.
        audited_fit: which fit ``best`` is and any lower SSR known (set by ``bootstrap_scenario``).
        chunks: chunks of refits {"total", "reused" (read from the cache), "computed"}.
        cache: the folder of the stored chunks, or None.
    """

    names: tuple[str, ...]
    method: str
    wild_multipliers: str | None
    leverage_adjusted: bool
    samples: int
    seed: int
    confidence: float
    refit: RefitSettings
    best: np.ndarray
    asymptotic: Estimates
    replicates: ReplicateFits
    jackknife: ReplicateFits
    mean: np.ndarray
    bias: np.ndarray
    std_error: np.ndarray
    percentile_lower: np.ndarray
    percentile_upper: np.ndarray
    bca: BcaInterval
    comparison: IntervalComparison
    pair_region_scale: float
    notes: list[str] = field(default_factory=list)
    audited_fit: KnownFit | None = None
    chunks: dict[str, int] = field(default_factory=dict)
    cache: str | None = None

    @property
    def flags(self) -> list[Flag]:
        return self.comparison.flags

    @property
    def used(self) -> int:
        """Replicates the intervals are built from."""
        return self.replicates.used_count

    def to_dict(self) -> dict:
        return jsonable({
            "names": list(self.names), "method": self.method, "wild_multipliers": self.wild_multipliers,
            "leverage_adjusted": self.leverage_adjusted, "samples": self.samples, "seed": self.seed,
            "confidence": self.confidence, "refit": self.refit.__dict__, "best": self.best,
            "used": self.used, "failure_share": self.replicates.failure_share,
            "fate_meanings": FATE_MEANINGS,
            "parameters": [self._parameter(j) for j in range(len(self.names))],
            "flags": [flag.to_dict() for flag in self.flags], "notes": self.notes,
            "asymptotic": self.asymptotic, "comparison": self.comparison,
            "pair_region_scale": self.pair_region_scale,
            "replicates": self.replicates, "jackknife": self.jackknife, "audited_fit": self.audited_fit,
            "chunks": self.chunks, "cache": self.cache,
        })

    def _parameter(self, j: int) -> dict:
        return {
            "name": self.names[j], "estimate": self.best[j],
            "asymptotic": {"std_error": self.asymptotic.std_errors[j], "lower": self.asymptotic.lower[j],
                           "upper": self.asymptotic.upper[j]},
            "bootstrap": {"mean": self.mean[j], "bias": self.bias[j], "std_error": self.std_error[j],
                          "percentile": [self.percentile_lower[j], self.percentile_upper[j]],
                          "bca": [self.bca.lower[j], self.bca.upper[j]],
                          "bias_correction": self.bca.bias_correction[j], "acceleration": self.bca.acceleration[j]},
            "width_ratio": self.comparison.width_ratio[j], "arm_ratio": self.comparison.arm_ratio[j],
        }


def run_bootstrap(problem: Problem, best: np.ndarray, *, method: str = "residual", samples: int = 2000,
                  seed: int = 0, confidence: float = 0.95, refit: RefitSettings | None = None,
                  wild_multipliers: str = "rademacher", leverage_adjusted: bool = False,
                  plan: ParallelPlan | None = None, progress: Callable[[int], None] | None = None,
                  cache: Path | None = None, fingerprint: str = "") -> BootstrapResult:
    """Bootstrap the fit ``best`` of ``problem`` and compare with its asymptotic uncertainty.

    Args:
        problem: the fitted problem (m > n observations).
        best: (n,) a converged best fit; every refit starts here.
        method: "residual", "wild" or "pairs" (see ``resampling``).
        samples: number of bootstrap replicates B, at least 2.
        seed: seed of the draws (the scenario's [bootstrap] seed).
        confidence: level of all intervals, in (0, 1).
        refit: step factor and solver settings of the refits (default: Gauss-Newton, α = 1).
        wild_multipliers: "rademacher" or "mammen" (wild only).
        leverage_adjusted: leverage-adjust the residuals (residual and wild only).
        plan: where the chunks run (default: one process).
        progress: called with the number of refits finished after every chunk (stored or computed).
        cache: folder under which finished chunks are stored and found again (a subfolder named
            by these settings and ``fingerprint``), so that an interrupted or repeated bootstrap
            computes only what is missing; None: nothing stored.
        fingerprint: what identifies ``problem`` (its model's code and data) in the cache's name;
            needed with ``cache`` (``bootstrap_scenario`` gives the scenario's fingerprint).

    Returns:
        BootstrapResult; the B + m refits are also in it.

    Raises:
        InputError: for arguments out of range, or fewer observations than parameters + 1.
    """
    refit = refit or RefitSettings()
    best = np.asarray(best, dtype=float)
    if best.shape != (problem.n_params,) or not np.all(np.isfinite(best)):
        raise InputError(f"the best fit must be {problem.n_params} finite values, got shape {best.shape}")
    if isinstance(samples, bool) or int(samples) != samples or samples < 2:
        raise InputError(f"samples must be a whole number of at least 2, got {samples!r}")
    if not 0 < refit.step_factor <= 1:
        raise InputError(f"step factor must lie in (0, 1], got {refit.step_factor}")
    asymptotic = estimate(problem, best, confidence)
    scheme = build_scheme(method, problem, best, wild_multipliers=wild_multipliers,
                          leverage_adjusted=leverage_adjusted and method != "pairs")
    size = chunk_size(problem)
    chunks = split("bootstrap", int(samples), size) + split("jackknife", problem.n_obs, size)
    scale = distance_scale(asymptotic.std_errors, best, problem.typical)
    worker = Refitter(problem=problem, scheme=scheme, best=best, scale=scale, refit=refit, seed=int(seed))
    folder = None
    if cache is not None:
        if not fingerprint:
            raise InputError("a bootstrap cache needs the fingerprint of the problem it belongs to")
        folder = refit_cache_folder(cache, fingerprint, {
            "best": best, "method": method, "samples": int(samples), "seed": int(seed), "chunk": size,
            "wild_multipliers": wild_multipliers if method == "wild" else None, "refit": refit.__dict__,
            "leverage_adjusted": bool(leverage_adjusted and method != "pairs")})
    pieces, counters = refit_all(worker, chunks, plan or ParallelPlan(jobs=1), folder, progress)
    replicates, jackknife = (_classified(pieces[kind]) for kind in KINDS)
    result = _summarise(problem, best, asymptotic, replicates, jackknife, method=method,
                        wild_multipliers=wild_multipliers if method == "wild" else None,
                        leverage_adjusted=leverage_adjusted and method != "pairs", samples=int(samples),
                        seed=int(seed), confidence=confidence, refit=refit)
    result.chunks, result.cache = counters, None if folder is None else str(folder)
    if leverage_adjusted and method == "pairs":
        result.notes.insert(0, "leverage adjustment applies to resampled residuals; the pairs bootstrap "
                               "resamples observations, so it was not used")
    return result


def chunk_size(problem: Problem) -> int:
    """Refits per chunk for ``problem``: set by its size alone, never by the number of jobs."""
    return int(np.clip(CHUNK_ELEMENTS // problem.n_obs, MIN_CHUNK, MAX_CHUNK))


def _classified(pieces: list[RefitEnds]) -> ReplicateFits:
    def joined(name: str) -> np.ndarray:
        return np.concatenate([getattr(piece, name) for piece in pieces])
    return classify(joined("params"), joined("ssr"), joined("outcome"), joined("iterations"), joined("descent"),
                    joined("descent_outcome"), joined("same_point"))


def _summarise(problem: Problem, best: np.ndarray, asymptotic: Estimates, replicates: ReplicateFits,
               jackknife: ReplicateFits, **settings) -> BootstrapResult:
    n, confidence = problem.n_params, settings["confidence"]
    used = replicates.params[replicates.used]
    notes = []
    nan = np.full(n, np.nan)
    if len(used) >= MIN_USED:
        mean, spread = used.mean(axis=0), used.std(axis=0, ddof=1)
        percentile = percentile_interval(used, confidence)
    else:
        mean, spread, percentile = nan, nan, (nan, nan)
        notes.append(f"only {len(used)} of {settings['samples']} refits reached the best fit's solution: "
                     f"too few for any bootstrap statistic (at least {MIN_USED} are needed)")
    m = problem.n_obs
    if m < FEW_OBSERVATIONS:
        shrunk = settings["method"] != "pairs" and not settings["leverage_adjusted"]
        notes.append(f"only {m} observations: the bootstrap resamples from {m} values, so its spread is rough"
                     + (f" and, with m − n = {m - n} left for the residuals, shrunk by about sqrt({m - n}/{m}) = "
                        f"{np.sqrt((m - n) / m):.2f} against the t interval" if shrunk else "")
                     + f"; below {FEW_OBSERVATIONS} observations read the t and profile intervals, not these")
    if MIN_USED <= len(used) < ADVISED_REPLICATES:
        notes.append(f"the intervals rest on {len(used)} replicates; at least {ADVISED_REPLICATES} are advisable "
                     f"for the ends of a {confidence:.0%} interval to settle")
    jackknife_used = jackknife.params[jackknife.used]
    if len(used) >= MIN_USED and len(jackknife_used) >= 3:
        bca = bca_interval(used, best, jackknife_acceleration(jackknife_used), confidence)
    else:
        bca = BcaInterval(lower=nan, upper=nan, bias_correction=nan, acceleration=nan)
    if len(jackknife_used) < 3:
        notes.append(f"only {len(jackknife_used)} of {len(jackknife.fate)} leave-one-out refits reached the best "
                     "fit's solution: no BCa interval")
    elif len(jackknife_used) < len(jackknife.fate):
        notes.append(f"{len(jackknife.fate) - len(jackknife_used)} leave-one-out refits failed; the BCa "
                     "acceleration uses the others")
    if replicates.used_count < len(replicates.fate):
        left_out = ", ".join(f"{count} {label.replace('_', ' ')}" for label, count in replicates.counts().items()
                             if count and label != "best")
        notes.append(f"{len(replicates.fate) - replicates.used_count} of {len(replicates.fate)} refits are left "
                     f"out of the intervals ({left_out})")
    timed_out = replicates.counts()["timed_out"] + jackknife.counts()["timed_out"]
    if timed_out:
        notes.append(f"{timed_out} refits timed out: their chunk of refits used up [model] time_limit; raise it so "
                     "that a whole chunk can finish, and run again")
    tail = (1.0 - confidence) / 2.0
    if replicates.failure_share > tail:
        notes.append(f"{replicates.failure_share:.1%} of the refits are left out, more than the {tail:.1%} beyond "
                     "each end of the intervals: if they belong to one tail (a parameter running off towards "
                     "infinity or another solution), the interval's end on that side is too close to the estimate")
    comparison = compare_intervals(problem.names, best, asymptotic.lower, asymptotic.upper, percentile,
                                   (bca.lower, bca.upper), spread, mean - best,
                                   used if len(used) else np.empty((0, n)))
    region = float(np.sqrt(2.0 * stats.f.ppf(confidence, 2, asymptotic.dof)))
    return BootstrapResult(
        names=problem.names, best=best, asymptotic=asymptotic, replicates=replicates, jackknife=jackknife,
        mean=mean, bias=mean - best, std_error=spread, percentile_lower=percentile[0],
        percentile_upper=percentile[1], bca=bca, comparison=comparison, pair_region_scale=region, notes=notes,
        **settings)


def total_refits(problem: Problem, samples: int) -> int:
    """Refits ``run_bootstrap`` makes: the replicates and one leave-one-out refit per observation."""
    return int(samples) + problem.n_obs


def bootstrap_scenario(scenario: Scenario, *, method: str | None = None, samples: int | None = None,
                       step_factor: float | None = None, wild_multipliers: str | None = None,
                       leverage_adjusted: bool | None = None, reference: SweepReference | None = None,
                       known: KnownFit | None = None, plan: ParallelPlan | None = None,
                       progress: Callable[[int], None] | None = None, folder: Path | None = None) -> BootstrapResult:
    """``run_bootstrap`` with the scenario's [bootstrap] and [solver] settings.

    Args:
        scenario: the loaded scenario.
        method, samples, wild_multipliers, leverage_adjusted: override [bootstrap] method, samples,
            wild_weights and leverage_adjusted.
        step_factor: step factor of the refits (default: the first of [solver] step_factors).
        reference: what a sweep of this scenario found; the refits start from the best known
            fit (``best_fit.best_known_fit``): its in-range reference, else the best from the start.
        known: that best known fit when the caller has it already (the audit run); ``reference``
            is then not used.
        plan, progress: as for ``run_bootstrap``.
        folder: output folder; finished chunks are stored under ``folder/cache`` and reused by a
            later run with the same scenario and settings. None: nothing stored.

    Raises:
        InputError: when no fit from the start converges, or for settings out of range.
    """
    solver, settings = scenario.solver, scenario.bootstrap
    refit = RefitSettings(step_factor=solver.step_factors[0] if step_factor is None else float(step_factor),
                          method=solver.method, tolerance=solver.tolerance, max_iterations=solver.max_iterations)
    if not 0 < refit.step_factor <= 1:
        raise InputError(f"step factor {refit.step_factor}: must lie in (0, 1]")
    if known is None:
        known = best_known_fit(scenario.problem, scenario.start, **solver.fit_options(), reference=reference)
    if known is None:
        raise InputError(f"{scenario.path}: no fit from the scenario's start converged, with any of the step "
                         "factors or with Levenberg-Marquardt; the bootstrap needs a converged fit: find a "
                         "working start first ('fitaudit fit', 'fitaudit sweep')")
    if leverage_adjusted is None:
        leverage_adjusted = settings.leverage_adjusted
    result = run_bootstrap(scenario.problem, known.params, method=method or settings.method,
                           samples=settings.samples if samples is None else samples, seed=settings.seed,
                           confidence=settings.confidence, refit=refit,
                           wild_multipliers=wild_multipliers or settings.wild_weights,
                           leverage_adjusted=leverage_adjusted, plan=plan, progress=progress,
                           cache=None if folder is None else cache_root(folder), fingerprint=scenario.fingerprint)
    return replace(result, audited_fit=known)
