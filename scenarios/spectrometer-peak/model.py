"""A Gaussian emission line on a sloped baseline: y = b0 + b1·(λ − 650) + h·exp(−((λ − c)/w)²/2)."""
import numpy as np


def model(wavelength_nm, b0, b1, h, c, w):
    u = (wavelength_nm - c) / w
    return b0 + b1 * (wavelength_nm - 650.0) + h * np.exp(-0.5 * u**2)


def jacobian(wavelength_nm, b0, b1, h, c, w):
    u = (wavelength_nm - c) / w
    line = np.exp(-0.5 * u**2)
    # With g = exp(−u²/2): dg/du = −u·g, du/dc = −1/w, du/dw = −u/w.
    return [np.ones_like(u), wavelength_nm - 650.0 + 0.0 * u, line, h * line * u / w, h * line * u**2 / w]
