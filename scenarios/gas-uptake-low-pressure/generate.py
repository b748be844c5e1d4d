"""Generate data.csv for the gas-uptake-low-pressure scenario (run: python generate.py).

A volumetric sorption rig measures CO2 uptake of an activated carbon at 25 °C, but its pressure
transducer only reaches 2 kPa. The uptake follows a saturation curve q = q_max·K·p / (1 + K·p)
with q_max = 4 mmol/g and K = 0.025 /kPa, so the data stop at K·p = 0.05, far below saturation.
Uptake noise: 0.003 mmol/g. Fixed seed.
"""
from pathlib import Path

import numpy as np

SEED = 20261207
Q_MAX, AFFINITY = 4.0, 0.025

rng = np.random.default_rng(SEED)
pressure = np.round(np.linspace(0.1, 2.0, 20), 2)
true = Q_MAX * AFFINITY * pressure / (1.0 + AFFINITY * pressure)
uptake = true + rng.normal(0.0, 0.003, pressure.size)
lines = ["pressure_kPa,uptake_mmol_g"]
lines += [f"{p:.2f},{q:.4f}" for p, q in zip(pressure, uptake)]
Path(__file__).with_name("data.csv").write_text("\n".join(lines) + "\n")
