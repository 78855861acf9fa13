#!/usr/bin/env python3
"""Reference for the Birge-scaled RLC fit: scipy.optimize.curve_fit with absolute_sigma=False.

An invented series circuit (R = 100 ohm, coil 15 mH with 7 ohm winding, C = 68 nF) swept at a
stated 1 V source level. The readings VR scatter by 1.2 mV (pickup and level wander), far
beyond the meter's stated per-reading u = 2 counts of 0.1 mV, rectangular: 2e-4/sqrt(3) V.
|Y| = VR/(R * 1 V). With equal weights, absolute_sigma=False gives pcov scaled by chi2/nu
whatever the common sigma; chi2 is computed with the stated sigma. absolute_sigma=True gives
the unscaled covariance for comparison.
Writes rlc_scatter.out beside this script. Run: python3 rlc_scatter.py
"""
import os

import numpy as np
import scipy
from scipy.optimize import curve_fit

R, RC, L, C = 100.0, 7.0, 15e-3, 68e-9
RT = R + RC
F0 = 1.0 / (2 * np.pi * np.sqrt(L * C))
Q = np.sqrt(L / C) / RT


def model(f, f0, q, rt):
    x = f / f0
    return 1.0 / (rt * np.sqrt(1.0 + q * q * (x - 1.0 / x) ** 2))


rng = np.random.default_rng(20261130)
f = np.round(F0 * np.geomspace(0.4, 2.5, 25))
vr = np.round((R * model(f, F0, Q, RT) + 1.2e-3 * rng.standard_normal(f.size)) / 1e-4) * 1e-4
y = vr / R
sigma = 2e-4 / np.sqrt(3) / R

kw = dict(p0=(F0 * 1.03, Q * 0.9, RT * 1.05), xtol=1e-15, ftol=1e-15, gtol=1e-15, maxfev=20000)
popt, pcov = curve_fit(model, f, y, absolute_sigma=False, **kw)
popt_a, pcov_a = curve_fit(model, f, y, sigma=np.full(f.size, sigma), absolute_sigma=True, **kw)
chi2 = float(np.sum(((y - model(f, *popt)) / sigma) ** 2))
nu = f.size - 3

out = os.path.join(os.path.dirname(os.path.abspath(__file__)), "rlc_scatter.out")
with open(out, "w") as fh:
    fh.write(f"# rlc_scatter.py: scipy {scipy.__version__}, numpy {np.__version__}\n")
    fh.write(f"# truth f0 Q Rt: {float(F0)!r} {float(Q)!r} {RT!r}\n")
    for a, b in zip(f, vr):
        fh.write(f"data {float(a)!r} {float(b):.4f}\n")
    fh.write("popt " + " ".join(repr(float(v)) for v in popt) + "\n")
    for row in pcov:
        fh.write("pcov_scaled " + " ".join(repr(float(v)) for v in row) + "\n")
    for row in pcov_a:
        fh.write("pcov_absolute " + " ".join(repr(float(v)) for v in row) + "\n")
    fh.write(f"chi2 {chi2!r}\nnu {nu}\nchi2_per_nu {chi2 / nu!r}\n")
print(open(out).read())
