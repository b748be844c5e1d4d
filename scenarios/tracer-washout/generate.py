"""Generate data.csv for the tracer-washout scenario (run: python generate.py).

A pulse of salt tracer is injected into a two-tank mixing rig; a conductivity cell at the outlet
reads the excess conductivity every 30 s for 30 minutes. Two well-mixed volumes in parallel give
c(t) = a1·exp(−k1·t) + a2·exp(−k2·t) with washout rates 0.30 and 0.18 per minute: close enough
that the two terms are hard to tell apart. The cell's noise is 0.15 µS/cm. Fixed seed.
"""
from pathlib import Path

import numpy as np

SEED = 20261204
A1, K1, A2, K2 = 45.0, 0.30, 60.0, 0.18

rng = np.random.default_rng(SEED)
time_min = np.arange(0.0, 30.0 + 1e-9, 0.5)
true = A1 * np.exp(-K1 * time_min) + A2 * np.exp(-K2 * time_min)
conductivity = true + rng.normal(0.0, 0.15, time_min.size)
lines = ["time_min,excess_uS_cm"]
lines += [f"{t:.1f},{c:.3f}" for t, c in zip(time_min, conductivity)]
Path(__file__).with_name("data.csv").write_text("\n".join(lines) + "\n")
