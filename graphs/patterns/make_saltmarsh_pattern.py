"""Writes saltmarsh-dish.csv: the one-way pattern of the (invented) Saltmarsh
rig's dish as a table of angle from the lobe axis and gain in dB, in 0.1 deg
steps out to 15 deg. It stands in for a measured scan; the values are the
Gaussian main-lobe model with a 6 deg one-way 3 dB beamwidth, so graphs using
it can be checked against captures synthesized with that model.

    python3 graphs/patterns/make_saltmarsh_pattern.py
"""
import numpy as np
from pathlib import Path

bw = 6.0
x = np.round(np.arange(-15.0, 15.0001, 0.1), 1)
gain_db = 20.0 * np.log10(np.exp(-2.0 * np.log(2.0) * x**2 / bw**2))
out = Path(__file__).with_name("saltmarsh-dish.csv")
with out.open("w") as f:
    f.write("angle_deg,gain_db\n")
    for a, g in zip(x, gain_db):
        f.write(f"{a:.1f},{g:.4f}\n")
