"""A test problem built so that every sweep outcome can be derived by hand.

Three groups of observations, four copies each, with a group code as the predictor:

    group 0: model a,     observed 2
    group 1: model a²,    observed 4
    group 2: model g(b),  observed 0

The Jacobian is block diagonal (a only in groups 0-1, b only in group 2), so a Gauss-Newton step
moves a and b independently and each can be analysed alone.

Parameter a: SSR_a(a) = 4·[(a − 2)² + (a² − 4)²] = 4·(a − 2)²·(1 + (a + 2)²). Its critical points
solve (a − 2)(2a² + 4a + 1) = 0: two minima, a = 2 (SSR 0, the best) and A_OTHER = −1 − 1/√2
(SSR = 4·(A_OTHER − 2)²·(1 + (A_OTHER + 2)²) ≈ 59.686), and a maximum between them at
A_SPLIT = −1 + 1/√2 (calculus). The undamped step is φ₁(a) = a + Δ(a) with
Δ(a) = (2 + 7a − 2a³)/(1 + 4a²), so φ₁(a) = (2a³ + 8a + 2)/(1 + 4a²), and

    φ₁(a) − A_SPLIT = (a − A_SPLIT)·(2a² − 2·A_SPLIT·a + 8 − 2·A_SPLIT²)/(1 + 4a²),

whose quadratic factor has a negative discriminant (20·A_SPLIT² − 64 < 0): no step crosses
A_SPLIT. A damped step φ_α = (1 − α)·a + α·φ₁(a) lies between a and φ₁(a), so it does not cross
either. On the right, φ₁(a) − 2 = 2a(a − 2)²/(1 + 4a²) and |2a(a − 2)| < 1 + 4a² exactly for
a > A_SPLIT; on the left, (φ₁(a) − A_OTHER)/(a − A_OTHER) = (2a² + 3.414a + 2.172)/(1 + 4a²) lies
in (0, 1) exactly for a < A_SPLIT. So for every step factor α in (0, 1], every start with
a > A_SPLIT converges to 2 and every start with a < A_SPLIT to A_OTHER, without oscillating.

Parameter b: g(b) = b for |b| < P, sign(b)·sqrt(P·|b|) for P ≤ |b| ≤ Q, sqrt(P/Q)·b beyond
(continuous). The step is Δ = −g/g′: −b in the inner and outer parts, −2b in the band
P ≤ |b| ≤ Q. With α = 1 a start in the band maps to −b, again in the band: a two-cycle with
an unchanging SSR, i.e. oscillation. Any other start lands on 0 in one step. With α < 1 the band
maps b to (1 − 2α)·b and the rest to (1 − α)·b, which shrink to 0: converged.

So, per start (a0, b0) and step factor α:
    α = 1 and P ≤ |b0| ≤ Q        -> oscillating
    otherwise a0 > A_SPLIT         -> the best solution (2, 0)
    otherwise                      -> the other solution (A_OTHER, 0)
"""
from __future__ import annotations

import math

import numpy as np

P, Q = 0.25, 1.0
A_SPLIT = -1 + 1 / math.sqrt(2)
A_OTHER = -1 - 1 / math.sqrt(2)
COPIES = 4
SSR_OTHER = COPIES * (A_OTHER - 2) ** 2 * (1 + (A_OTHER + 2) ** 2)
A_RANGE = (-3.0, 3.0)
B_RANGE = (-1.5, 2.0)
START = (1.0, 0.5)
STEP_FACTORS = (1.0, 0.6, 0.3)

MODEL = f'''
import numpy as np

P, Q = {P}, {Q}


def _g(b):
    size = np.abs(b)
    return np.where(size < P, b, np.where(size <= Q, np.sign(b) * np.sqrt(P * size), np.sqrt(P / Q) * b))


def _dg(b):
    size = np.abs(b)
    with np.errstate(divide="ignore"):
        return np.where(size < P, 1.0, np.where(size <= Q, np.sqrt(P) / (2 * np.sqrt(size)), np.sqrt(P / Q)))


def model(group, a, b):
    return np.where(group == 0, a, np.where(group == 1, a**2, _g(b)))


def jacobian(group, a, b):
    return [np.where(group == 0, 1.0, np.where(group == 1, 2 * a, 0.0)), np.where(group == 2, _dg(b), 0.0)]
'''

DATA = "group,y\n" + "0,2\n1,4\n2,0\n" * COPIES


def scenario_toml(design: str = "grid", points: int = 1024, resolution: int = 20, extra: str = "") -> str:
    return f"""
        title = "two optima and an oscillating band"
        [data]
        file = "data.csv"
        x = "group"
        y = "y"
        [model]
        file = "model.py"
        jacobian = "jacobian"
        [parameters]
        a = {{ start = {START[0]}, range = [{A_RANGE[0]}, {A_RANGE[1]}] }}
        b = {{ start = {START[1]}, range = [{B_RANGE[0]}, {B_RANGE[1]}] }}
        [solver]
        step_factors = {list(STEP_FACTORS)}
        [sweep]
        design = "{design}"
        points = {points}
        resolution = {resolution}
        {extra}
        """


def expected_categories(starts: np.ndarray, step_factor: float) -> np.ndarray:
    """(c,) expected category labels of starts (c, 2) at one step factor, from the derivation."""
    a, b = starts[:, 0], starts[:, 1]
    band = (np.abs(b) >= P) & (np.abs(b) <= Q)
    converged = np.where(a > A_SPLIT, "best", "other")
    return np.where((step_factor == 1.0) & band, "oscillating", converged)


def distance_to_thresholds(starts: np.ndarray) -> float:
    """Smallest distance of any start from a boundary of the derivation (a = A_SPLIT, |b| = P or Q)."""
    a, b = starts[:, 0], np.abs(starts[:, 1])
    return float(min(np.min(np.abs(a - A_SPLIT)), np.min(np.abs(b - P)), np.min(np.abs(b - Q))))
