"""Source of the compiled Gauss-Newton loop: one run at a time, one pass over the data per iteration.

This file is never imported. ``inputs.formula_kernel`` appends a model's ``accumulate`` function
to its text and compiles the whole with numba (``compiled.py`` says when it is used).
``accumulate(x, observed, weights, point, gram, gradient) -> ssr`` makes one pass over the
observations at ``point`` (n,), writing the upper triangle of the weighted JᵀJ (n, n) and Jᵀr
(n,) for every parameter; the loop takes the free ones.
Keeping the loop a real file lets it be read and checked like the rest of the engine.

It repeats the numpy engine's arithmetic for the plain case: the same weighted Gram matrix and
gradient (upper triangle accumulated over the observations), the same column scaling,
Cholesky factorisation and pivot test, the same step, convergence and reversal tests. Every
other case is handed back (``HANDED_BACK``) for the numpy engine to replay from the start: a
pivot below ``pivot_tolerance`` (the careful QR/SVD path), a dead column, non-finite values, a
runaway or blown-up run, and a run whose steps kept reversing for ``window`` iterations.
"""
import math

import numba
import numpy as np

CONVERGED, STALLED, HANDED_BACK = 0, 3, -1


@numba.njit(cache=True, error_model="numpy")  # pragma: no cover - compiled
def fit_runs(x, y, sqrt_weights, starts, step_factor, floor, bound, data_sum_of_squares, free, tol, max_iter,
             pivot_tolerance, window, blowup_factor, params, ssr, iterations, status, change):
    """Fit every run; writes params (B, n), ssr, iterations, status and change (B,).

    x (k, m); y and sqrt_weights (1 or B, m); starts (B, n); step_factor, data_sum_of_squares (B,);
    floor, bound (B, n); free (c,) indices of the fitted parameters.
    """
    runs, n = starts.shape
    c = free.shape[0]
    full_gram = np.empty((n, n))
    full_gradient = np.empty(n)
    point = np.empty(n)
    gram = np.empty((c, c))
    gradient = np.empty(c)
    factor = np.zeros((c, c))
    solution = np.empty(c)
    move = np.empty(c)
    scaled_move = np.empty(c)
    last_move = np.empty(c)
    norms = np.empty(c)
    for run in range(runs):
        observed = y[run if y.shape[0] > 1 else 0]
        weights = sqrt_weights[run if sqrt_weights.shape[0] > 1 else 0]
        for j in range(n):
            point[j] = starts[run, j]
        last_move[:] = 0.0
        reversals = 0
        status[run] = STALLED
        blowup = 0.0
        step_change = 0.0
        for iteration in range(max_iter + 1):
            total = accumulate(x, observed, weights, point, full_gram, full_gradient)
            for a in range(c):
                gradient[a] = full_gradient[free[a]]
                for b in range(a, c):
                    gram[a, b] = full_gram[free[a], free[b]]
            if iteration == 0:
                if not math.isfinite(total):
                    status[run] = HANDED_BACK
                    break
                blowup = blowup_factor * max(total, data_sum_of_squares[run])
            else:
                # The numpy engine's classification of the step just taken.
                healthy = math.isfinite(total) and total <= blowup
                for j in range(n):
                    healthy = healthy and math.isfinite(point[j]) and abs(point[j]) <= bound[run, j]
                if not healthy:
                    status[run] = HANDED_BACK
                    break
                if step_change < tol:
                    status[run] = CONVERGED
                    break
                if reversals >= window:
                    status[run] = HANDED_BACK
                    break
                if iteration == max_iter:
                    break
            # The step from here: column-scaled Cholesky, summed in the numpy engine's order.
            usable = True
            for a in range(c):
                norms[a] = math.sqrt(gram[a, a])
                usable = usable and math.isfinite(gradient[a]) and norms[a] > 0 and math.isfinite(norms[a])
                for b in range(a, c):
                    usable = usable and math.isfinite(gram[a, b])
            if not usable:
                status[run] = HANDED_BACK
                break
            for a in range(c):
                for b in range(a, c):
                    gram[a, b] = gram[a, b] / norms[a] / norms[b]
                gradient[a] = gradient[a] / norms[a]
            for j in range(c):
                pivot = 0.0
                for k in range(j):
                    pivot += factor[j, k] * factor[j, k]
                pivot = gram[j, j] - pivot
                if pivot / gram[j, j] < pivot_tolerance:
                    usable = False
                    break
                root = math.sqrt(pivot)
                factor[j, j] = root
                for i in range(j + 1, c):
                    below = 0.0
                    for k in range(j):
                        below += factor[i, k] * factor[j, k]
                    factor[i, j] = (gram[j, i] - below) / root
            if not usable:
                status[run] = HANDED_BACK
                break
            for i in range(c):
                partial = 0.0
                for k in range(i):
                    partial += factor[i, k] * solution[k]
                solution[i] = (gradient[i] - partial) / factor[i, i]
            for i in range(c - 1, -1, -1):
                tail = 0.0
                for k in range(i + 1, c):
                    tail += factor[k, i] * solution[k]
                solution[i] = (solution[i] - tail) / factor[i, i]
            step_change = 0.0
            for a in range(c):
                j = free[a]
                move[a] = step_factor[run] * (solution[a] / norms[a])
                point[j] += move[a]
                step_change = max(step_change, abs(move[a] / max(abs(point[j]), floor[run, j])))
                scaled_move[a] = move[a] / floor[run, j]
            # Reversal tracking, as the numpy engine's _track_reversals.
            length = 0.0
            last_length = 0.0
            product = 0.0
            largest = 0.0
            largest_sum = 0.0
            for a in range(c):
                length += scaled_move[a] * scaled_move[a]
                last_length += last_move[a] * last_move[a]
                product += scaled_move[a] * last_move[a]
                largest = max(largest, abs(scaled_move[a]))
                largest_sum = max(largest_sum, abs(scaled_move[a] + last_move[a]))
            reversing = product < -0.5 * math.sqrt(length) * math.sqrt(last_length)
            reversals = reversals + 1 if reversing and largest_sum <= 0.5 * largest else 0
            for a in range(c):
                last_move[a] = scaled_move[a]
            iterations[run] = iteration + 1
            change[run] = step_change
        for j in range(n):
            params[run, j] = point[j]
        ssr[run] = total
