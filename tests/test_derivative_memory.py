"""The derivative audit on many observations: numdifftools works on bounded blocks of them.

numdifftools keeps every step of its Richardson table for every output value, about 1.5 KB per
derivative element; handed all observations at once that grew to gigabytes at 10⁴-10⁵ rows.
Outside references: the closed-form derivatives of the exponential (calculus) and tracemalloc
for the memory the call takes.
"""
from __future__ import annotations

import tracemalloc

import numpy as np

from audit import Problem
from audit.derivatives.numeric import numeric_derivatives


def decay_problem(rows: int, model=None) -> Problem:
    """f(t) = a·exp(−t/τ) + c over ``rows`` times in [0, 300]."""
    time = np.linspace(0.0, 300.0, rows)
    model = model or (lambda t, amplitude, tau, offset: amplitude * np.exp(-t / tau) + offset)
    return Problem(model=model, x=time, y=np.zeros(rows), names=("amplitude", "tau", "offset"))


def closed_form(time: np.ndarray, amplitude: float, tau: float) -> np.ndarray:
    """(3, m) ∂f/∂a = exp(−t/τ), ∂f/∂τ = a·t·exp(−t/τ)/τ², ∂f/∂c = 1 (calculus)."""
    decay = np.exp(-time / tau)
    return np.stack([decay, amplitude * time * decay / tau**2, np.ones_like(time)])


def peak_bytes_beyond_result(rows: int) -> int:
    problem = decay_problem(rows)
    tracemalloc.start()
    result = numeric_derivatives(problem, np.array([[60.0, 45.0, 20.0]]))
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    kept = sum(array.nbytes for array in (result.values, result.error, result.smooth, result.reliable))
    return peak - kept


def test_working_memory_does_not_grow_with_the_number_of_observations():
    # The arrays handed back grow with the rows by necessity (counted out above); the working
    # memory beside them must not. Unblocked, tripling the rows tripled it (hand count: numdifftools
    # holds 15 steps × 3 estimates × several copies per element); in bounded blocks it stays put.
    small, large = peak_bytes_beyond_result(6_000), peak_bytes_beyond_result(18_000)
    assert large < 1.5 * small


def test_blocked_derivatives_match_the_closed_form_across_block_edges():
    rows = 9_001        # several blocks of one point × three parameters, the last one partial
    problem = decay_problem(rows)
    result = numeric_derivatives(problem, np.array([[60.0, 45.0, 20.0]]))
    expected = closed_form(problem.x, 60.0, 45.0)       # calculus, see closed_form
    assert result.reliable.all()
    np.testing.assert_allclose(result.values[0], expected, rtol=1e-8, atol=1e-10)


def test_a_model_reading_other_observations_is_differentiated_whole():
    # f(t) = a·exp(−(t − t₀)/τ) + c with t₀ the first time: a block of later rows alone would
    # see another t₀. Here t₀ = 0, so the derivatives are the closed form's above.
    def relative_to_first(t, amplitude, tau, offset):
        return amplitude * np.exp(-(t - t[0]) / tau) + offset

    problem = decay_problem(9_001, relative_to_first)
    result = numeric_derivatives(problem, np.array([[60.0, 45.0, 20.0]]))
    np.testing.assert_allclose(result.values[0], closed_form(problem.x, 60.0, 45.0), rtol=1e-8, atol=1e-10)
