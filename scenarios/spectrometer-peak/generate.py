"""Generate data.csv for the spectrometer-peak scenario (run: python generate.py).

A compact grating spectrometer (0.25 nm per pixel) records an emission line of a discharge lamp
near 651 nm on a background that falls with wavelength (stray light), from 640 to 662 nm:
y = b0 + b1·(λ − 650) + h·exp(−((λ − c)/w)²/2), a Gaussian line of width w = 0.3 nm, barely
more than a pixel, on a sloped baseline. Counting noise: Poisson. Fixed seed.
"""
from pathlib import Path

import numpy as np

SEED = 20261205
B0, B1, HEIGHT, CENTRE, WIDTH = 220.0, -6.0, 900.0, 651.3, 0.3

rng = np.random.default_rng(SEED)
wavelength = np.round(np.arange(640.0, 662.0 + 1e-9, 0.25), 2)
true = B0 + B1 * (wavelength - 650.0) + HEIGHT * np.exp(-0.5 * ((wavelength - CENTRE) / WIDTH) ** 2)
counts = rng.poisson(true)
lines = ["wavelength_nm,counts"]
lines += [f"{w:.2f},{c}" for w, c in zip(wavelength, counts)]
Path(__file__).with_name("data.csv").write_text("\n".join(lines) + "\n")
