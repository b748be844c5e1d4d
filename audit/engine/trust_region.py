"""Levenberg-Marquardt as a trust-region method, batched: the damping is chosen so that the step
has a given length in the scaled parameter space.

In coordinates u = D·p, where D holds the largest column norms of the Jacobian seen so far
(so that a parameter whose derivative fades cannot take ever larger steps), the damped step is
u(μ) = Q·(w / (λ + μ)) with λ, Q the eigen-decomposition of the scaled Gram matrix and w the
projected gradient. A trust radius Δ per run sets μ: μ = 0 when the Gauss-Newton step fits
inside, else the μ with ‖u(μ)‖ ≈ Δ, found by a few vectorised Newton iterations on
1/‖u(μ)‖ (the secular equation; its near-linearity in μ makes Newton converge fast and
monotonically from below). The radius grows after good steps and shrinks after poor ones.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .linsolve import RANK_TOLERANCE, StepSystem

#: The step length may miss the radius by this fraction.
RADIUS_SLACK = 0.1
#: Newton iterations for the damping; each is a handful of (A, c) array operations.
SECULAR_ITERATIONS = 12
#: Initial radius as a multiple of ‖D·a‖ at the start (a generous first step).
INITIAL_RADIUS_FACTOR = 1.0


@dataclass
class Spectrum:
    """Eigen-decomposition of the step problem in trust-region coordinates, for A runs.

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

    def _coefficients(self, damping: np.ndarray) -> np.ndarray:
        """(A, c) w / (λ + μ). Undamped, directions the data do not determine (λ below the
        rank tolerance) get no step: the minimum-norm Gauss-Newton step."""
        lost = (damping[:, None] <= 0) & (self.values <= RANK_TOLERANCE**2 * self.values[:, -1:])
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where((self.weights == 0) | lost, 0.0, self.weights / (self.values + damping[:, None]))

    def length(self, damping: np.ndarray) -> np.ndarray:
        """(A,) ‖u(μ)‖."""
        return np.sqrt(np.sum(self._coefficients(damping) ** 2, axis=1))

    def step(self, damping: np.ndarray) -> np.ndarray:
        """(A, c) damped steps in parameter units."""
        return np.einsum("aij,aj->ai", self.vectors, self._coefficients(damping)) * self.to_parameters

    def predicted_reduction(self, damping: np.ndarray, alpha: np.ndarray) -> np.ndarray:
        """(A,) decrease of the SSR the linear model predicts for α·u(μ): 2α·uᵀĝ − α²·uᵀMu."""
        coefficients = self._coefficients(damping)
        along = np.sum(coefficients * self.weights, axis=1)
        curvature = np.sum(coefficients**2 * self.values, axis=1)
        return 2 * alpha * along - alpha**2 * curvature

    def damping_for(self, radius: np.ndarray) -> np.ndarray:
        """(A,) μ ≥ 0 with ‖u(μ)‖ within RADIUS_SLACK of ``radius`` (0 if the full step fits)."""
        damping = np.zeros(len(radius))
        outside = self.length(damping) > (1 + RADIUS_SLACK) * radius
        # Start just right of a zero eigenvalue, where ‖u‖ is finite but still too long.
        damping[outside] = 1e-14 * np.maximum(self.values[outside, -1], np.finfo(float).tiny)
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
