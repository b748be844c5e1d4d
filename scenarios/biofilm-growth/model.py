"""Logistic growth of a biofilm: y = K / (1 + exp(−r·(t − t_mid))).

The Jacobian is shipped WRONG on purpose: the column for t_mid has the wrong sign. With
e = exp(−r·(t − t_mid)), de/dt_mid = +r·e, so ∂y/∂t_mid = −K·r·e/(1 + e)²; the inner derivative
was taken as −r·e, which flips the sign. The audit's derivative check must find and name it.
"""
import numpy as np


def model(time_h, K, r, t_mid):
    return K / (1.0 + np.exp(-r * (time_h - t_mid)))


def jacobian(time_h, K, r, t_mid):
    e = np.exp(-r * (time_h - t_mid))
    shape = 1.0 / (1.0 + e)
    d_r = K * (time_h - t_mid) * e * shape**2
    d_t_mid = K * r * e * shape**2           # deliberate sign error: the true column is −K·r·e/(1 + e)²
    return [shape, d_r, d_t_mid]
