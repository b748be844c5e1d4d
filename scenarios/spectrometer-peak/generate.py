"""Generate data.csv for the spectrometer-peak scenario (run: python generate.py).

A compact grating spectrometer with a wide entrance slit (for light throughput) records an
emission line of a discharge lamp near 651 nm, from 640 to 662 nm at 0.25 nm per pixel. The line
is far narrower than the spectrometer's resolution, so what the detector sees is the image of the
slit: a flat-topped profile about 5.4 nm wide at half maximum (half width w = 2.7 nm), modelled as
h·2^(−((λ − c)/w)⁴), which is h/2 at λ = c ± w. It sits on stray light that falls with
wavelength: b0 + b1·(λ − 650). Counting noise: Poisson. Fixed seed.
"""
from pathlib import Path

import numpy as np

SEED = 20261205
B0, B1, HEIGHT, CENTRE, HALF_WIDTH = 220.0, -2.0, 300.0, 651.3, 2.7

rng = np.random.default_rng(SEED)
wavelength = np.round(np.arange(640.0, 662.0 + 1e-9, 0.25), 2)
line = HEIGHT * 2.0 ** (-(((wavelength - CENTRE) / HALF_WIDTH) ** 4))
counts = rng.poisson(B0 + B1 * (wavelength - 650.0) + line)
lines = ["wavelength_nm,counts"]
lines += [f"{w:.2f},{c}" for w, c in zip(wavelength, counts)]
Path(__file__).with_name("data.csv").write_text("\n".join(lines) + "\n")
