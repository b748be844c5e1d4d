"""Newton cooling of an immersed probe: T(t) = T_env + dT·exp(−t/tau)."""
import numpy as np


def model(time_s, T_env, dT, tau):
    return T_env + dT * np.exp(-time_s / tau)


def jacobian(time_s, T_env, dT, tau):
    decay = np.exp(-time_s / tau)
    return [np.ones_like(decay), decay, dT * time_s * decay / tau**2]


def guess(time_s, temperature):
    """Bath temperature from the last readings, the jump from the first, tau from the 1/e point."""
    T_env = float(np.mean(temperature[-5:]))
    dT = float(temperature[0] - T_env)
    below = np.flatnonzero(temperature - T_env < dT / np.e)
    tau = float(time_s[below[0]]) if below.size else float(time_s[-1] / 3)
    return {"T_env": T_env, "dT": dT, "tau": tau}
