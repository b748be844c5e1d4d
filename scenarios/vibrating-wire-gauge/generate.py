"""Generate data.csv for the vibrating-wire-gauge scenario (run: python generate.py).

A vibrating-wire strain gauge on a concrete girder is plucked by its readout; the pick-up coil's
voltage is sampled at 5 kHz for 40 ms: a free decay v(t) = A·exp(−t/tau)·cos(2π·f·t + phi) at
585 Hz. The wire's decay time tau = 14 ms was measured when the gauge was installed and is held
fixed; the frequency is the measurand (strain goes with f²). Coil noise 0.06 mV. Fixed seed.
"""
from pathlib import Path

import numpy as np

SEED = 20261206
AMPLITUDE_MV, FREQUENCY_HZ, PHASE = 2.5, 585.0, 0.7
DECAY_TIME_S, SAMPLE_RATE_HZ = 0.014, 5000.0

rng = np.random.default_rng(SEED)
time_s = np.arange(200) / SAMPLE_RATE_HZ
true = AMPLITUDE_MV * np.exp(-time_s / DECAY_TIME_S) * np.cos(2 * np.pi * FREQUENCY_HZ * time_s + PHASE)
voltage = true + rng.normal(0.0, 0.06, time_s.size)
lines = ["time_s,coil_mV"]
lines += [f"{t:.4f},{v:.4f}" for t, v in zip(time_s, voltage)]
Path(__file__).with_name("data.csv").write_text("\n".join(lines) + "\n")
