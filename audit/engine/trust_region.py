"""Levenberg-Marquardt as a trust-region method, batched: the damping is chosen so that the step
has a given length in the scaled parameter space.

In coordinates u = D·p, where D holds the largest column norms of the Jacobian seen so far
(so that a parameter whose derivative fades cannot take ever larger steps), the damped step
solves (M + μ·I)·u = ĝ, with M the scaled Gram matrix and ĝ the scaled gradient. A trust radius
Δ per run sets μ: μ = 0 when the Gauss-Newton step fits inside, else the μ with ‖u(μ)‖ ≈ Δ, found
by a few vectorised Newton iterations on 1/‖u(μ)‖ (the secular equation; its near-linearity in
μ makes Newton converge fast and monotonically from below). Each iteration costs one Cholesky
factorisation of M + μ·I, written out over the runs, and three triangular solves: two for u,
one more for the derivative, ‖L⁻¹·u‖² (Moré's form of the iteration).

Runs whose M is not safely positive definite take the same iteration on an eigen-decomposition
(``Spectrum``): the runs the step problem solves carefully (QR/SVD) and those whose M might have
an eigenvalue below the rank tolerance, whose undamped step then leaves that direction out
(the minimum-norm Gauss-Newton step). The radius grows after good steps and shrinks after poor ones.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .linsolve import (PIVOT_TOLERANCE, RANK_TOLERANCE, TINY, StepSystem, back_substitution, cholesky_runs_last,
                       forward_substitution, sum_over_first)

#: The step length may miss the radius by this fraction.
RADIUS_SLACK = 0.1
#: Newton iterations for the damping; each is a handful of (A, c) array operations.
SECULAR_ITERATIONS = 12
#: Initial radius as a multiple of ‖D·a‖ at the start (a generous first step).
INITIAL_RADIUS_FACTOR = 1.0
#: Runs with trace(M)·trace(M⁻¹) above this bound of the condition number take the eigen path: their
#: smallest eigenvalue might lie within an eigensolver's rounding (about 1e-15 of the largest) of
#: the rank tolerance, where the undamped step leaves a direction out.
CONDITION_LIMIT = 1e14


@dataclass
class DampedSteps:
    """Damped steps of k runs, each at the damping its trust radius asks for.

    Attributes:
        damping: (k,) μ ≥ 0 (0: the Gauss-Newton step fits inside the radius).
        steps: (k, c) steps in parameter units, before the step factor α.
        length: (k,) ‖u(μ)‖, the scaled length the radius bounds.
        along: (k,) uᵀĝ, the decrease of the SSR along u per unit step, halved.
        curvature: (k,) uᵀMu.
    """

    damping: np.ndarray
    steps: np.ndarray
    length: np.ndarray
    along: np.ndarray
    curvature: np.ndarray

    def predicted_reduction(self, alpha: np.ndarray) -> np.ndarray:
        """(k,) decrease of the SSR the linear model predicts for α·u: 2α·uᵀĝ − α²·uᵀMu."""
        return 2 * alpha * self.along - alpha**2 * self.curvature


@dataclass
class Spectrum:
    """Eigen-decomposition of the step problem in trust-region coordinates, for A runs (the
    fallback of ``TrustRegion``).

    Attributes:
        values: (A, c) eigenvalues λ ≥ 0 (ascending).
        vectors: (A, c, c) eigenvectors as columns.
        weights: (A, c) gradient projected on the eigenvectors.
        to_parameters: (A, c) factor turning u-coordinates into parameter units, 1/D.
    """

    values: np.ndarray
    vectors: np.ndarray
    weights: np.ndarray
    to_parameters: np.ndarray

    @classmethod
    def of(cls, system: StepSystem) -> "Spectrum":
        """The spectrum of a factorised system built with ``norm_memory``."""
        count, width = system.gradient.shape
        root = np.sqrt(system.emphasis)
        values = np.empty((count, width))
        vectors = np.empty((count, width, width))
        weights = np.empty((count, width))
        fast = ~system.careful
        if fast.any():
            matrix = system.gram[fast] / (root[fast][:, :, None] * root[fast][:, None, :])
            values[fast], vectors[fast] = np.linalg.eigh(matrix)
            weights[fast] = np.einsum("aji,aj->ai", vectors[fast], system.gradient[fast] / root[fast])
        if system.careful.any():
            singular = system.singular_values
            order = np.argsort(singular, axis=1)
            values[system.careful] = np.take_along_axis(singular**2, order, axis=1)
            right = np.swapaxes(system.right, 1, 2)
            vectors[system.careful] = np.take_along_axis(right, order[:, None, :], axis=2)
            projected = singular * np.einsum("aji,aj->ai", system.left, system.projected)
            weights[system.careful] = np.take_along_axis(projected, order, axis=1)
        values = np.maximum(values, 0.0)
        return cls(values, vectors, weights, system.free_columns / (root * system.column_norms))

    def restricted(self, keep: np.ndarray) -> "Spectrum":
        return Spectrum(self.values[keep], self.vectors[keep], self.weights[keep], self.to_parameters[keep])

    def coefficients(self, damping: np.ndarray) -> np.ndarray:
        """(A, c) w / (λ + μ). Undamped, directions the data do not determine (λ below the
        rank tolerance) get no step: the minimum-norm Gauss-Newton step."""
        lost = (damping[:, None] <= 0) & (self.values <= RANK_TOLERANCE**2 * self.values[:, -1:])
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where((self.weights == 0) | lost, 0.0, self.weights / (self.values + damping[:, None]))

    def length(self, damping: np.ndarray) -> np.ndarray:
        """(A,) ‖u(μ)‖."""
        return np.sqrt(np.sum(self.coefficients(damping) ** 2, axis=1))

    def damped(self, radius: np.ndarray) -> "DampedSteps":
        """The damped steps whose length ``radius`` (A,) asks for (see ``damping_for``)."""
        damping = self.damping_for(radius)
        coefficients = self.coefficients(damping)
        return DampedSteps(damping=damping,
                           steps=np.einsum("aij,aj->ai", self.vectors, coefficients) * self.to_parameters,
                           length=np.sqrt(np.sum(coefficients**2, axis=1)),
                           along=np.sum(coefficients * self.weights, axis=1),
                           curvature=np.sum(coefficients**2 * self.values, axis=1))

    def damping_for(self, radius: np.ndarray) -> np.ndarray:
        """(A,) μ ≥ 0 with ‖u(μ)‖ within RADIUS_SLACK of ``radius`` (0 if the full step fits)."""
        damping = np.zeros(len(radius))
        outside = self.length(damping) > (1 + RADIUS_SLACK) * radius
        # Start just right of a zero eigenvalue, where ‖u‖ is finite but still too long.
        damping[outside] = 1e-14 * np.maximum(self.values[outside, -1], TINY)
        for _ in range(SECULAR_ITERATIONS):
            length = self.length(damping)
            active = outside & (np.abs(length / radius - 1) > RADIUS_SLACK)
            if not active.any():
                break
            rows = np.flatnonzero(active)
            shifted = self.values[rows] + damping[rows, None]
            slope = np.sum(self.weights[rows] ** 2 / shifted**3, axis=1)
            newton = (length[rows] / radius[rows] - 1) * length[rows] ** 2 / slope
            damping[rows] = np.maximum(damping[rows] + newton, damping[rows] * 1e-3)
        return damping


class TrustRegion:
    """The damped step problems of one Levenberg-Marquardt iteration for A runs.

    M = G / (√e_i·√e_j) and ĝ = g / √e, from the column-scaled Gram matrix G, gradient g and
    damping emphasis e of the ``StepSystem`` (so that u = √e·(column norm)·p = D·p), are kept
    runs last, (c, c, A) and (c, A), like the system's own Cholesky factor.
    """

    def __init__(self, system: StepSystem) -> None:
        count, width = system.gradient.shape
        root = np.sqrt(system.emphasis)
        self.to_parameters = system.free_columns / (root * system.column_norms)
        self.gradient = np.ascontiguousarray((system.gradient / root).T)
        scale = root.T
        self.matrix = np.empty((width, width, count))
        np.divide(np.moveaxis(system.gram, 0, -1), scale[:, None, :] * scale[None, :, :], out=self.matrix)
        self.factor, pivots = cholesky_runs_last(self.matrix)
        self.full = back_substitution(self.factor, forward_substitution(self.factor, self.gradient))
        # trace(M) bounds the largest eigenvalue from above and 1/trace(M⁻¹) the smallest from below;
        # trace(M⁻¹) is the squared Frobenius norm of L⁻¹.
        self.trace = sum_over_first(np.einsum("iia->ia", self.matrix))
        identity = np.broadcast_to(np.eye(width)[:, :, None], (width, width, count))
        inverse = forward_substitution(self.factor, identity).reshape(width * width, count)
        condition_bound = self.trace * sum_over_first(inverse * inverse)
        # A zero pivot marks a dead column (all-zero derivatives), where the trace says nothing.
        self.exact = (~system.careful & (pivots.min(axis=0) >= PIVOT_TOLERANCE) & (condition_bound < CONDITION_LIMIT)
                      & np.isfinite(self.full).all(axis=0))
        self.full_length = np.sqrt(sum_over_first(self.full * self.full))
        fallback = ~self.exact
        self.spectrum = Spectrum.of(system.restricted(fallback)) if fallback.any() else None
        self.position = np.cumsum(fallback) - 1
        if self.spectrum is not None:
            undamped = np.zeros(len(self.spectrum.values))
            self.full[:, fallback] = np.einsum("aij,aj->ia", self.spectrum.vectors,
                                                self.spectrum.coefficients(undamped))
            self.full_length[fallback] = self.spectrum.length(undamped)

    def full_step(self) -> np.ndarray:
        """(A, c) undamped (Gauss-Newton) steps in parameter units."""
        return self.full.T * self.to_parameters

    def damped(self, rows: np.ndarray, radius: np.ndarray) -> DampedSteps:
        """The damped steps of the runs ``rows`` (k indices) for their radii (k,)."""
        exact = self.exact[rows]
        if exact.all():
            return self._secular(rows, radius)
        if not exact.any():
            return self.spectrum.restricted(self.position[rows]).damped(radius)
        parts = ((exact, self._secular(rows[exact], radius[exact])),
                 (~exact, self.spectrum.restricted(self.position[rows[~exact]]).damped(radius[~exact])))
        merged = {}
        for name in ("damping", "steps", "length", "along", "curvature"):
            merged[name] = np.empty((len(rows),) + getattr(parts[0][1], name).shape[1:])
            for where, part in parts:
                merged[name][where] = getattr(part, name)
        return DampedSteps(**merged)

    def _secular(self, rows: np.ndarray, radius: np.ndarray) -> DampedSteps:
        """``damped`` for runs on the Cholesky path: the Newton iteration of ``Spectrum.damping_for``
        with one factorisation of M + μ·I per iteration, from the same start (with trace(M) for the
        largest eigenvalue)."""
        gradient = self.gradient[:, rows]
        solution = self.full[:, rows]
        length = self.full_length[rows]
        damping = np.zeros(len(rows))
        outside = length > (1 + RADIUS_SLACK) * radius
        damping[outside] = 1e-14 * np.maximum(self.trace[rows[outside]], TINY)
        active = np.flatnonzero(outside)
        for iteration in range(SECULAR_ITERATIONS + 1):
            if not len(active):
                break
            shifted = self.matrix[:, :, rows[active]]
            np.einsum("iia->ia", shifted)[...] += damping[active]
            factor, _ = cholesky_runs_last(shifted)
            found = back_substitution(factor, forward_substitution(factor, gradient[:, active]))
            found_length = np.sqrt(sum_over_first(found * found))
            solution[:, active], length[active] = found, found_length
            if iteration == SECULAR_ITERATIONS:
                break
            off = np.abs(found_length / radius[active] - 1) > RADIUS_SLACK
            active, factor, found, found_length = active[off], factor[:, :, off], found[:, off], found_length[off]
            # d‖u‖/dμ = −uᵀ(M + μI)⁻¹u / ‖u‖ = −‖L⁻¹u‖² / ‖u‖.
            slope = sum_over_first(np.square(forward_substitution(factor, found)))
            newton = (found_length / radius[active] - 1) * found_length**2 / slope
            damping[active] = np.maximum(damping[active] + newton, damping[active] * 1e-3)
        along = sum_over_first(solution * gradient)
        curvature = along.copy()        # uᵀMu = uᵀĝ for the undamped step u = M⁻¹ĝ
        damped = np.flatnonzero(outside)
        if len(damped):
            # uᵀMu = ‖Lᵀu‖² with M = L·Lᵀ: no cancellation however large μ is.
            factor, moved = self.factor[:, :, rows[damped]], solution[:, damped]
            transformed = np.stack([sum_over_first(factor[i:, i] * moved[i:]) for i in range(len(moved))])
            curvature[damped] = sum_over_first(transformed * transformed)
        return DampedSteps(damping=damping, steps=solution.T * self.to_parameters[rows], length=length,
                           along=along, curvature=curvature)
