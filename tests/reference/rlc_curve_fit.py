#!/usr/bin/env python3
"""Reference for the RLC resonance fit: scipy.optimize.curve_fit on a synthetic noisy sweep.

Model (series R-L-C): |Y| = 1/(Rt*sqrt(1 + Q^2 (x - 1/x)^2)), x = f/f0.
Weighted by sigma = u with absolute_sigma=True, so pcov is the unscaled (J^T W J)^-1.
Writes rlc_curve_fit.out (the data and the expected fit) beside this script.
Run: python3 rlc_curve_fit.py
"""
import os

import numpy as np
import scipy
from scipy.optimize import curve_fit

# Invented part values: Rt = 68 ohm + 13.6 ohm coil, L = 47.2 mH, C = 65 nF.
RT, L, C = 81.6, 47.2e-3, 65e-9
F0 = 1.0 / (2 * np.pi * np.sqrt(L * C))
Q = np.sqrt(L / C) / RT


def model(f, f0, q, rt):
    x = f / f0
    return 1.0 / (rt * np.sqrt(1.0 + q * q * (x - 1.0 / x) ** 2))


rng = np.random.default_rng(20260301)
f = F0 * np.geomspace(0.45, 2.2, 27)
y_true = model(f, F0, Q, RT)
u = 0.004 * y_true + 2e-6
y = y_true + u * rng.standard_normal(f.size)

popt, pcov = curve_fit(model, f, y, p0=(F0 * 1.05, Q * 0.8, RT * 1.1), sigma=u,
                       absolute_sigma=True, xtol=1e-15, ftol=1e-15, gtol=1e-15, maxfev=20000)
chi2 = float(np.sum(((y - model(f, *popt)) / u) ** 2))

out = os.path.join(os.path.dirname(os.path.abspath(__file__)), "rlc_curve_fit.out")
with open(out, "w") as fh:
    fh.write(f"# rlc_curve_fit.py: scipy {scipy.__version__}, numpy {np.__version__}\n")
    fh.write(f"# truth f0 Q Rt: {float(F0)!r} {float(Q)!r} {RT!r}\n")
    for a, b, c in zip(f, y, u):
        fh.write(f"data {float(a)!r} {float(b)!r} {float(c)!r}\n")
    fh.write("popt " + " ".join(repr(float(v)) for v in popt) + "\n")
    for row in pcov:
        fh.write("pcov " + " ".join(repr(float(v)) for v in row) + "\n")
    fh.write(f"chi2 {chi2!r}\n")
print(open(out).read())
