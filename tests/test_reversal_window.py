"""The window over which a zig-zag counts as a cycle (``engine.iterate._track_reversals`` / ``_cycling``).

A run's steps reverse one another; it cycles when, after OSCILLATION_WINDOW reversals, its last
step is still at least CLOSING_IN times as long as the step OSCILLATION_WINDOW steps before it.
For a zig-zag whose step shrinks by a factor q each time, that ratio is q^OSCILLATION_WINDOW
(a geometric sequence), so q just above and just below CLOSING_IN^(1/OSCILLATION_WINDOW) must fall
on either side, and a window one step shorter or longer would put one of them on the wrong side.
"""
from __future__ import annotations

import numpy as np

from audit.engine import iterate
from audit.engine.iterate import CLOSING_IN, OSCILLATION_WINDOW, _cycling, _track_reversals

STEPS = 3 * OSCILLATION_WINDOW


def test_a_zigzag_cycles_when_its_steps_shrank_by_less_than_closing_in_over_the_window():
    edge = CLOSING_IN ** (1 / OSCILLATION_WINDOW)
    # Factors on either side of the edge, but on the same side of the edges of windows one step
    # shorter and one step longer (CLOSING_IN^(1/(W∓1))), and a zig-zag of constant length.
    shrinking = np.array([edge - 0.3 * (edge - CLOSING_IN ** (1 / (OSCILLATION_WINDOW - 1))),
                          edge + 0.3 * (CLOSING_IN ** (1 / (OSCILLATION_WINDOW + 1)) - edge), 1.0])
    assert shrinking[0] ** OSCILLATION_WINDOW < CLOSING_IN <= shrinking[1] ** OSCILLATION_WINDOW
    assert shrinking[0] ** (OSCILLATION_WINDOW - 1) >= CLOSING_IN > shrinking[1] ** (OSCILLATION_WINDOW + 1)
    runs = len(shrinking)
    state = iterate._Working(last_move=np.zeros((runs, 2)), last_length=np.zeros(runs),
                             reversals=np.zeros(runs, dtype=np.int64), shrinking=np.zeros(runs, dtype=bool),
                             past_lengths=np.zeros((runs, OSCILLATION_WINDOW)))
    direction = np.array([1.0, -2.0])
    for iteration in range(1, STEPS + 1):
        move = (-1.0) ** iteration * shrinking[:, None] ** iteration * direction
        _track_reversals(state, move, iteration)
        cycling = _cycling(state)
        # Every step after the first reverses the one before: the count is iteration − 1.
        np.testing.assert_array_equal(state.reversals, iteration - 1)
        if iteration - 1 < OSCILLATION_WINDOW:
            assert not cycling.any()
        else:
            # Closed form: the last step over the one OSCILLATION_WINDOW steps before is q^W.
            np.testing.assert_array_equal(cycling, shrinking**OSCILLATION_WINDOW >= CLOSING_IN)
        np.testing.assert_array_equal(state.shrinking, (shrinking < 1) & (iteration > 1))
