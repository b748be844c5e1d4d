"""Generate data.csv for the capacitor-charging scenario (run: python generate.py).

A 470 µF capacitor charges through a resistor from a 5 V supply; an auto-ranging voltmeter reads
it every 0.1 s for 6 s. V(t) = V0 + Vs·(1 − exp(−t/tau)). The meter switches from its 2 V range
(0.3 mV standard deviation) to its 20 V range (3 mV) once the reading passes 2 V, so the rows
carry standard deviations ten times apart. Fixed seed: the file is the same on every machine.
"""
from pathlib import Path

import numpy as np

SEED = 20261203
V0, VS, TAU = 0.05, 4.9, 1.2

rng = np.random.default_rng(SEED)
time_s = np.round(np.arange(0.0, 6.0 + 1e-9, 0.1), 1)
true = V0 + VS * (1.0 - np.exp(-time_s / TAU))
sd = np.where(true < 2.0, 0.0003, 0.003)
voltage = true + rng.normal(0.0, sd)
lines = ["time_s,voltage_V,sd_V"]
lines += [f"{t:.1f},{v:.4f},{s:.4f}" for t, v, s in zip(time_s, voltage, sd)]
Path(__file__).with_name("data.csv").write_text("\n".join(lines) + "\n")
