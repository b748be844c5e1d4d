"""Capacitor charging through a resistor: V(t) = V0 + Vs·(1 − exp(−t/tau))."""
import numpy as np


def model(time_s, V0, Vs, tau):
    return V0 + Vs * (1.0 - np.exp(-time_s / tau))


def jacobian(time_s, V0, Vs, tau):
    decay = np.exp(-time_s / tau)
    # d/dtau of −Vs·exp(−t/tau) is −Vs·exp(−t/tau)·t/tau².
    return [np.ones_like(decay), 1.0 - decay, -Vs * time_s * decay / tau**2]
