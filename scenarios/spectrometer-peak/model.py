"""A flat-topped line (a wide slit's image) on a sloped baseline:
y = b0 + b1·(λ − 650) + h·2^(−((λ − c)/w)⁴), so that w is the half width at half maximum."""
import numpy as np

LN2 = np.log(2.0)


def model(wavelength_nm, b0, b1, h, c, w):
    u = (wavelength_nm - c) / w
    return b0 + b1 * (wavelength_nm - 650.0) + h * np.exp(-LN2 * u**4)


def jacobian(wavelength_nm, b0, b1, h, c, w):
    u = (wavelength_nm - c) / w
    line = np.exp(-LN2 * u**4)
    # With g = exp(−ln2·u⁴): dg/du = −4·ln2·u³·g, du/dc = −1/w, du/dw = −u/w.
    slope = 4.0 * LN2 * h * line * u**3 / w
    return [np.ones_like(u), wavelength_nm - 650.0 + 0.0 * u, line, slope, slope * u]
