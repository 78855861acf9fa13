#!/usr/bin/env python3
"""Reference for the RL reduction: an independent first-order propagation with the Python
`uncertainties` package (linear error propagation with exact derivatives, correlations kept).

Reads the readings of rl_three_voltmeter.md and models them by the rules of
src/networks/inputs.rs as stated there (not its code):
- accuracy `0.5% + 2`: one gain per column (value 1, rectangular half-width 0.5 %, shared by
  every row of that column) and a per-reading offset of 2 counts x 0.1 mV (rectangular);
- single readings: no Type A; f without a counter: exact; dcr without `by`: exact;
- series resistor: nominal 47 ohm, tolerance 1 % as a rectangular half-width.
Model (three-voltmeter method, law of cosines; DC-resistance correction), per frequency:
  cos t = (Vs^2 - VR^2 - VL^2)/(2 VR VL), I = VR/R, Z = VL/I, Rac = Z cos t, XL = Z sin t,
  L = XL/(2 pi f), Q = XL/Rac; XL_dcr = sqrt(VL^2 - (I dcr)^2)/I, L_dcr = XL_dcr/(2 pi f).
Block L, L_dcr, Rac: inverse-variance weighted means (weights 1/u_i^2, correlations kept).
Writes rl_uncertainty.out and rl_correlation.out (r(Rac, XL) per row, by
uncertainties.correlation_matrix) beside this script. Run: python3 rl_uncertainty.py
"""
import math
import os

import uncertainties
from uncertainties import ufloat, umath

HERE = os.path.dirname(os.path.abspath(__file__))
SQ3 = math.sqrt(3.0)

text = open(os.path.join(HERE, "rl_three_voltmeter.md"), encoding="utf-8").read()
table = text.split("```readings", 1)[1].split("```", 1)[0].split("\n---\n", 1)[1]
lines = [l.split() for l in table.strip().splitlines()]
assert lines[0] == ["f/Hz", "Vs/V", "VR/V", "VL/V"], lines[0]
rows = [[float(x) for x in l] for l in lines[1:]]

gain = {c: ufloat(1.0, 0.005 / SQ3, "gain " + c) for c in ("Vs", "VR", "VL")}
R = ufloat(47.0, 0.47 / SQ3, "R")
DCR = 12.5
off_u = 2 * 1e-4 / SQ3

results = []  # (name, f or None, uncertain value)
corr = []  # (f, r(Rac, XL))
per = {"L": [], "L_dcr": [], "Rac": []}
for f, vs_r, vr_r, vl_r in rows:
    vs = vs_r * gain["Vs"] + ufloat(0.0, off_u, f"off Vs {f}")
    vr = vr_r * gain["VR"] + ufloat(0.0, off_u, f"off VR {f}")
    vl = vl_r * gain["VL"] + ufloat(0.0, off_u, f"off VL {f}")
    c = (vs**2 - vr**2 - vl**2) / (2 * vr * vl)
    i = vr / R
    z = vl / i
    rac = z * c
    xl = z * umath.sqrt(1 - c**2)
    w = 2 * math.pi * f
    xl_dcr = umath.sqrt(vl**2 - (i * DCR) ** 2) / i
    row = [("I", i), ("Rac", rac), ("XL", xl), ("L", xl / w), ("Q", xl / rac),
           ("XL_dcr", xl_dcr), ("L_dcr", xl_dcr / w)]
    corr.append((f, uncertainties.correlation_matrix([rac, xl])[0][1]))
    for name, v in row:
        results.append((name, f, v))
        if name in per:
            per[name].append(v)
for name in ("L", "L_dcr", "Rac"):
    vals = per[name]
    wts = [1.0 / v.std_dev**2 for v in vals]
    mean = sum(wt * v for wt, v in zip(wts, vals)) / sum(wts)
    results.append((name, None, mean))

out = os.path.join(HERE, "rl_uncertainty.out")
with open(out, "w") as fh:
    fh.write(f"# rl_uncertainty.py: uncertainties {uncertainties.__version__}\n")
    fh.write("# name f(Hz or -) value u\n")
    for name, f, v in results:
        fs = "-" if f is None else repr(f)
        fh.write(f"{name} {fs} {v.nominal_value!r} {v.std_dev!r}\n")
print(open(out).read())
cout = os.path.join(HERE, "rl_correlation.out")
with open(cout, "w") as fh:
    fh.write(f"# rl_uncertainty.py: uncertainties {uncertainties.__version__}\n")
    fh.write("# f(Hz) r(Rac, XL), the row's two results from the same readings\n")
    for f, r in corr:
        fh.write(f"{f!r} {float(r)!r}\n")
print(open(cout).read())
