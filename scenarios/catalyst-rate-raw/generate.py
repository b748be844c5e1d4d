"""Generate data.csv for the catalyst-rate scenarios (run: python generate.py).

Initial rates of a catalysed hydrolysis in a stirred batch reactor at five temperatures (330 to
370 K) and four reactant concentrations, each condition run twice. Rate law with an Arrhenius
temperature dependence: r = A·exp(−Ea/(R·T))·C^n, with Ea = 72 kJ/mol, order n = 1.4 and
k(350 K) = 5 mmol/(L·min). The rate analyser's error is 3 % of the reading (sd column).
Fixed seed. ``catalyst-rate-centred`` writes the same file with this script.
"""
import sys
from pathlib import Path

import numpy as np

SEED = 20261209
GAS_CONSTANT = 0.0083145          # kJ/(mol·K)
EA, ORDER, T_REF, K_REF = 72.0, 1.4, 350.0, 5.0


def write(path: Path) -> None:
    rng = np.random.default_rng(SEED)
    temperature, concentration = np.meshgrid([330.0, 340.0, 350.0, 360.0, 370.0], [0.1, 0.2, 0.4, 0.8])
    temperature = np.repeat(temperature.ravel(), 2)
    concentration = np.repeat(concentration.ravel(), 2)
    true = K_REF * np.exp(-EA / GAS_CONSTANT * (1 / temperature - 1 / T_REF)) * concentration**ORDER
    sd = 0.03 * true
    rate = true + rng.normal(0.0, sd)
    lines = ["T_K,conc_mol_L,rate_mmol_L_min,sd_rate"]
    lines += [f"{t:.1f},{c:.2f},{r:.5g},{s:.3g}" for t, c, r, s in zip(temperature, concentration, rate, sd)]
    path.write_text("\n".join(lines) + "\n")


if __name__ == "__main__":
    write(Path(sys.argv[1]) if len(sys.argv) > 1 else Path(__file__).with_name("data.csv"))
