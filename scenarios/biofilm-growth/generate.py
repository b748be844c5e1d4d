"""Generate data.csv for the biofilm-growth scenario (run: python generate.py).

Optical coherence tomography measures the thickness of a biofilm in a flow cell every 2 hours for
two days. Growth levels off as nutrients run short: a logistic curve
y = K / (1 + exp(−r·(t − t_mid))) with K = 85 µm, r = 0.35 /h and t_mid = 20 h. Thickness noise:
1.5 µm. Fixed seed.
"""
from pathlib import Path

import numpy as np

SEED = 20261208
CAPACITY, RATE, MIDPOINT = 85.0, 0.35, 20.0

rng = np.random.default_rng(SEED)
time_h = np.arange(0.0, 48.0 + 1e-9, 2.0)
true = CAPACITY / (1.0 + np.exp(-RATE * (time_h - MIDPOINT)))
thickness = true + rng.normal(0.0, 1.5, time_h.size)
lines = ["time_h,thickness_um"]
lines += [f"{t:.1f},{y:.2f}" for t, y in zip(time_h, thickness)]
Path(__file__).with_name("data.csv").write_text("\n".join(lines) + "\n")
