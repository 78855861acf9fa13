#!/usr/bin/env python3
"""Reference for the RLC derived results: f0, Q, Rt from scipy's curve_fit (popt, pcov in
rlc_curve_fit.out) as correlated inputs, propagated to BW = f0/Q, L = Q Rt/(2 pi f0) and
C = 1/(2 pi f0 Q Rt) by the Python `uncertainties` package (first order, exact derivatives).
The correlated inputs are built without numpy: x = popt + chol(pcov) z, z independent N(0, 1).
Writes rlc_derived_uncertainty.out beside this script. Run: python3 rlc_derived_uncertainty.py
"""
import math
import os

import uncertainties
from uncertainties import ufloat

HERE = os.path.dirname(os.path.abspath(__file__))
popt, pcov = None, []
for line in open(os.path.join(HERE, "rlc_curve_fit.out")):
    k, *v = line.split()
    if k == "popt":
        popt = [float(x) for x in v]
    elif k == "pcov":
        pcov.append([float(x) for x in v])

n = 3
chol = [[0.0] * n for _ in range(n)]
for i in range(n):
    for j in range(i + 1):
        s = pcov[i][j] - sum(chol[i][k] * chol[j][k] for k in range(j))
        chol[i][j] = math.sqrt(s) if i == j else s / chol[j][j]
z = [ufloat(0.0, 1.0, f"z{i}") for i in range(n)]
f0, q, rt = (popt[i] + sum(chol[i][k] * z[k] for k in range(i + 1)) for i in range(n))
w0 = 2 * math.pi * f0
derived = [("f0", f0), ("Q", q), ("BW", f0 / q), ("L", q * rt / w0), ("C", 1 / (w0 * q * rt)),
           ("Rtotal", rt)]
out = os.path.join(HERE, "rlc_derived_uncertainty.out")
with open(out, "w") as fh:
    fh.write(f"# rlc_derived_uncertainty.py: uncertainties {uncertainties.__version__}\n")
    fh.write("# name f value u\n")
    for name, v in derived:
        fh.write(f"{name} - {v.nominal_value!r} {v.std_dev!r}\n")
print(open(out).read())
