#!/usr/bin/env python3
"""Reference for the tank fit: scipy.optimize.curve_fit on a synthetic noisy sweep of |Z|,
and the derived results' uncertainties from its covariance by the `uncertainties` package.

Invented scenario: the sensing tank of an inductive proximity switch, a 1.2 mH coil of
14 ohm winding resistance across 4.7 nF. Model, parameterised directly in (L, C, R)
(benchrec fits in ln f_r, ln Q_r, ln R_D, so the two fits share no parameterisation):
  Z = (R + j w L) / (1 - w^2 L C + j w R C),  fitted to |Z|,
weighted by sigma = u with absolute_sigma=True, so pcov is the unscaled (J^T W J)^-1.
Derived, first order with correlations (uncertainties.correlated_values):
  f0 = sqrt(1/(L C) - R^2/L^2)/(2 pi) (unity power factor), Q = 2 pi f0 L/R,
  R_D = L/(C R), BW = f0/Q.
Writes tank_curve_fit.out (JSON) beside this script. Run: python3 tank_curve_fit.py
"""
import json
import os

import numpy as np
import scipy
import uncertainties
from scipy.optimize import curve_fit
from uncertainties import correlated_values, umath

L, C, R = 1.2e-3, 4.7e-9, 14.0
# Scaled parameters (mH, nF, ohm) keep curve_fit's steps of similar size.
SCALE = np.array([1e-3, 1e-9, 1.0])


def zmag(f, l, c, r):
    w = 2 * np.pi * f
    return np.abs((r + 1j * w * l) / (1 - w * w * l * c + 1j * w * r * c))


def model(f, lm, cn, r):
    return zmag(f, lm * 1e-3, cn * 1e-9, r)


fr = 1 / (2 * np.pi * np.sqrt(L * C))
rng = np.random.default_rng(20260515)
f = fr * np.geomspace(0.93, 1.075, 29)
z_true = zmag(f, L, C, R)
u = 0.003 * z_true + 0.5
z = z_true + u * rng.standard_normal(f.size)

p0 = (L / SCALE[0] * 1.03, C / SCALE[1] * 0.98, R * 1.2)
popt_s, pcov_s = curve_fit(model, f, z, p0=p0, sigma=u, absolute_sigma=True,
                           xtol=1e-15, ftol=1e-15, gtol=1e-15, maxfev=20000)
popt = popt_s * SCALE
pcov = pcov_s * np.outer(SCALE, SCALE)
chi2 = float(np.sum(((z - model(f, *popt_s)) / u) ** 2))

l, c, r = correlated_values(popt, pcov)
f0 = umath.sqrt(1 / (l * c) - r * r / (l * l)) / (2 * np.pi)
q = 2 * np.pi * f0 * l / r
rd = l / (c * r)
derived = [("f0", f0), ("Q", q), ("BW", f0 / q), ("R_D", rd)]

record = {
    "made_by": f"tank_curve_fit.py: scipy {scipy.__version__}, numpy {np.__version__}, "
               f"uncertainties {uncertainties.__version__}",
    "truth_LCR": [L, C, R],
    "f": f.tolist(),
    "z": z.tolist(),
    "u": u.tolist(),
    "popt": popt.tolist(),
    "pcov": pcov.tolist(),
    "chi2": chi2,
    "derived": {name: [v.nominal_value, v.std_dev] for name, v in derived},
}
out = os.path.join(os.path.dirname(os.path.abspath(__file__)), "tank_curve_fit.out")
with open(out, "w") as fh:
    json.dump(record, fh, indent=1)
    fh.write("\n")
print(open(out).read())
