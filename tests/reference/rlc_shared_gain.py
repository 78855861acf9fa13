#!/usr/bin/env python3
"""Reference for the whole RLC chain, from readings through the fit, with the meter's gain
shared or not: an independent first-order propagation (GUM 5.1.2, eq. 10) whose sensitivities
come from re-fitting with scipy.optimize.curve_fit, not from benchrec's linearised estimator.

Invented bench case (written to rlc_shared_gain.md beside this script): R1 = 100 ohm (1 %
tolerance, rectangular), a coil of 15 mH with 12 ohm winding resistance, C1 = 47 nF, driven by
a 1.6 V source of 50 ohm output resistance; Vs (across the series circuit) and VR read on one
meter, `0.5% + 3` with 0.1 mV resolution, ranges [200 mV, 2 V, 20 V]. The readings are made by
complex arithmetic and rounded to the resolution.

The input model is FORMAT.md's, as stated there ("Meter ranges and the shared gain error"), not
benchrec's code:
- each reading x = r*g + c: a gain g (value 1, rectangular half-width 0.5 %) shared by all
  readings on one range, and its own offset c of 3 counts x 0.1 mV (rectangular);
- shared: Vs and VR all on the 2 V range, one gain; independent: VR named on the 20 V range
  (`VR/V@20V`), Vs on 2 V, two gains;
- R1 one input, rectangular half-width 1 ohm; f exact (no counter).
Estimator: |Y_k| = VR_k/(R1 Vs_k); (f0, Q, Rt) by weighted least squares of the series model
|Y| = 1/(Rt sqrt(1 + Q^2 (x - 1/x)^2)), x = f/f0, the weights 1/w_k^2 from each point's own
inputs (its two offsets) at the estimates and held fixed; then BW = f0/Q, L = Q Rt/(2 pi f0),
C = 1/(2 pi f0 Q Rt). Sensitivities by central differences of the re-fitted results (step
0.01 u); u(y)^2 = sum (c_i u_i)^2 over the independent inputs.
Writes rlc_shared_gain.md and rlc_shared_gain.out. Run: python3 rlc_shared_gain.py
"""
import math
import os

import numpy as np
import scipy
from scipy.optimize import curve_fit

HERE = os.path.dirname(os.path.abspath(__file__))
SQ3 = math.sqrt(3.0)
R1, RC, L, C, E, RG = 100.0, 12.0, 15e-3, 47e-9, 1.6, 50.0
F0 = 1.0 / (2 * math.pi * math.sqrt(L * C))
freqs = [float(round(F0 * 0.65 * (1.55 / 0.65) ** (k / 12))) for k in range(13)]
rows = []
for f in freqs:
    w = 2 * math.pi * f
    z = complex(R1 + RC, w * L - 1 / (w * C))
    i = E / (z + RG)
    rows.append((f, round(abs(i * z), 4), round(abs(i) * R1, 4)))
assert all(0.2 < vs < 2 and 0.2 < vr < 2 for _, vs, vr in rows), rows

FRONT = """---
record: REF-RLC-RANGES
title: Series RLC sweep on one meter range (reference case, invented)
date: 2026-09-14
operator: Reference case (invented)
instruments:
  dmm:
    what: bench multimeter, AC volts
    accuracy: 0.5% + 3
    resolution: 0.1 mV
    ranges: [200 mV, 2 V, 20 V]
parts:
  R1:
    kind: resistor
    nominal: 100 ohm
    tolerance: 1%
  L1:
    kind: inductor
    nominal: 15 mH
    tolerance: 10%
  C1:
    kind: capacitor
    nominal: 47 nF
    tolerance: 5%
---

Invented readings for the RLC shared-gain reference (tests/reference/rlc_shared_gain.py):
R1, then L1 and C1, from a 1.6 V source with 50 ohm output resistance; Vs across the series
circuit and VR across R1, both on the 2 V range of one meter.

```readings
id: sweep
network: RLC
parts: [R1, L1, C1]
meter: dmm
---
f/Hz    Vs/V    VR/V
"""
with open(os.path.join(HERE, "rlc_shared_gain.md"), "w") as fh:
    fh.write(FRONT)
    for f, vs, vr in rows:
        fh.write(f"{f:.0f}    {vs:.4f}  {vr:.4f}\n")
    fh.write("```\n")

n = len(rows)
fv = np.array([r[0] for r in rows])
vs_r = np.array([r[1] for r in rows])
vr_r = np.array([r[2] for r in rows])
U_GAIN = 0.005 / SQ3
U_CNT = 3 * 0.1e-3 / SQ3
U_R = 1.0 / SQ3


def model(f, f0, q, rt):
    x = f / f0
    return 1.0 / (rt * np.sqrt(1.0 + q * q * (x - 1.0 / x) ** 2))


def ys(x, shared):
    g_s = x[0]
    g_r = x[0] if shared else x[1]
    r = x[2]
    c_s, c_r = x[3:3 + n], x[3 + n:3 + 2 * n]
    return (vr_r * g_r + c_r) / (r * (vs_r * g_s + c_s))


x0 = np.concatenate([[1.0, 1.0, R1], np.zeros(2 * n)])
u_in = np.concatenate([[U_GAIN, U_GAIN, U_R], np.full(2 * n, U_CNT)])
y0 = vr_r / (R1 * vs_r)
# Each point's own inputs are its two offsets: w_k^2 = (dY/dc_s)^2 u^2 + (dY/dc_r)^2 u^2.
w = np.sqrt((y0 / vs_r) ** 2 + (y0 / vr_r) ** 2) * U_CNT


def derived(x, shared):
    y = ys(x, shared)
    p, _ = curve_fit(model, fv, y, p0=(F0, 5.0, 112.0), sigma=w, absolute_sigma=True,
                     xtol=1e-15, ftol=1e-15, gtol=1e-15, maxfev=100000)
    f0, q, rt = p
    w0 = 2 * math.pi * f0
    return np.array([f0, q, f0 / q, q * rt / w0, 1.0 / (w0 * q * rt), rt])


NAMES = ["f0", "Q", "BW", "L", "C", "Rtotal"]
out = os.path.join(HERE, "rlc_shared_gain.out")
with open(out, "w") as fh:
    fh.write(f"# rlc_shared_gain.py: scipy {scipy.__version__}, numpy {np.__version__}\n")
    fh.write("# case name value u (first order, sensitivities by re-fitting)\n")
    for case, shared in (("shared", True), ("independent", False)):
        y_hat = derived(x0, shared)
        var = np.zeros(len(NAMES))
        for i in range(len(x0)):
            if not shared or i != 1:
                h = 0.01 * u_in[i]
                xp, xm = x0.copy(), x0.copy()
                xp[i] += h
                xm[i] -= h
                c = (derived(xp, shared) - derived(xm, shared)) / (2 * h)
                var += (c * u_in[i]) ** 2
        for k, name in enumerate(NAMES):
            fh.write(f"{case} {name} {float(y_hat[k])!r} {float(math.sqrt(var[k]))!r}\n")
print(open(out).read())
