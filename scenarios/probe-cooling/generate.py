"""Generate data.csv for the probe-cooling scenario (run: python generate.py).

A temperature probe at 85 °C is plunged into a stirred 21.5 °C water bath and read every 4 s for
five minutes. Newton's law of cooling gives T(t) = T_env + dT·exp(−t/tau). The reading noise
grows with temperature (the probe's datasheet gives 0.5 % of reading plus 0.05 °C), so every row
carries its own standard deviation. Fixed seed: the file is the same on every machine.
"""
from pathlib import Path

import numpy as np

SEED = 20261202
T_ENV, DELTA_T, TAU = 21.5, 63.5, 38.0

rng = np.random.default_rng(SEED)
time_s = np.arange(0.0, 300.0 + 1e-9, 4.0)
true = T_ENV + DELTA_T * np.exp(-time_s / TAU)
sd = 0.005 * true + 0.05
temperature = true + rng.normal(0.0, sd)
lines = ["time_s,temperature_C,sd_C"]
lines += [f"{t:.1f},{T:.3f},{s:.3f}" for t, T, s in zip(time_s, temperature, sd)]
Path(__file__).with_name("data.csv").write_text("\n".join(lines) + "\n")
