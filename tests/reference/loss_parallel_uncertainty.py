#!/usr/bin/env python3
"""Reference for the three-meter networks (RCloss, RCparallel, RLparallel): an independent
first-order propagation with the Python `uncertainties` package (linear propagation with
exact derivatives, correlations kept).

Reads the readings of loss_parallel.md and models them by the input rules of FORMAT.md as
stated there (not the project's code):
- `dmm` accuracy `0.2% + 2`: one gain per column (value 1, rectangular half-width 0.2 %,
  shared by every row of that column) and a per-reading offset of 2 counts x 0.1 mV
  (rectangular); `amm` accuracy `0.3% + 2` with resolution 0.1 uA: a gain per column and,
  on the current columns only (its resolution is in A), an offset of 2 x 0.1 uA per reading;
- single readings: no Type A; f without a counter: exact;
- RCloss's series resistor: nominal 68 ohm, tolerance 0.5 % as a rectangular half-width.
Models (law of cosines in the triangle of three magnitudes, handbook), per frequency:
- RCloss: cos t = (Vs^2 - VR^2 - VC^2)/(2 VR VC), I = VR/R, Z = VC/I, ESR = Z cos t,
  XC = Z sin t, C = 1/(2 pi f XC), D = ESR/XC, Q = XC/ESR;
- RCparallel: cos t = (I^2 - IR^2 - IC^2)/(2 IR IC), R = V/IR, B = (IC/V) sin t, XC = 1/B,
  C = B/(2 pi f), D = cos t/sin t, Q = 1/D;
- RLparallel: cos t = (I^2 - IR^2 - IL^2)/(2 IR IL), R = V/IR, Z = V/IL, Rac = Z cos t,
  XL = Z sin t, L = XL/(2 pi f), Q = XL/Rac.
Block results: equal-weight means of the rows (correlations kept).
Writes loss_parallel_uncertainty.out beside this script. Run: python3 loss_parallel_uncertainty.py
"""
import math
import os

import uncertainties
from uncertainties import ufloat, umath

HERE = os.path.dirname(os.path.abspath(__file__))
SQ3 = math.sqrt(3.0)
AMM_OFF = 2 * 1e-7 / SQ3
text = open(os.path.join(HERE, "loss_parallel.md"), encoding="utf-8").read()


def table(block_id):
    body = text.split(f"id: {block_id}\n", 1)[1].split("```", 1)[0].split("\n---\n", 1)[1]
    lines = [l.split() for l in body.strip().splitlines()]
    scale = [1e-3 if h.endswith("/mA") else 1.0 for h in lines[0]]
    return lines[0], [[float(x) * s for x, s in zip(l, scale)] for l in lines[1:]]


def meter(cols, rows, gain_half, off_u, offset_cols=None):
    gains = {c: ufloat(1.0, gain_half / SQ3, f"gain {c}") for c in cols}
    out = []
    for row in rows:
        f = row[0]
        vals = {"f": f}
        for c, x in zip(cols, row[1:]):
            v = x * gains[c]
            if off_u and (offset_cols is None or c in offset_cols):
                v = v + ufloat(0.0, off_u, f"off {c} {f}")
            vals[c] = v
        out.append(vals)
    return out


def mean(vals):
    return sum(vals) / len(vals)


results = []  # (block, name, f or None, value)


def emit(block, names, rows_out, block_names):
    per = {n: [] for n in block_names}
    for f, row in rows_out:
        for n in names:
            results.append((block, n, f, row[n]))
            if n in per:
                per[n].append(row[n])
    for n in block_names:
        results.append((block, n, None, mean(per[n])))


# RCloss
_, rows = table("esr")
R = ufloat(68.0, 0.34 / SQ3, "R4")
out = []
for v in meter(["Vs", "VR", "VC"], rows, 0.002, 2 * 1e-4 / SQ3):
    c = (v["Vs"] ** 2 - v["VR"] ** 2 - v["VC"] ** 2) / (2 * v["VR"] * v["VC"])
    s = umath.sqrt(1 - c**2)
    i = v["VR"] / R
    z = v["VC"] / i
    esr, xc = z * c, z * s
    out.append((v["f"], {"I": i, "XC": xc, "C": 1 / (2 * math.pi * v["f"] * xc),
                         "ESR": esr, "D": esr / xc, "Q": xc / esr}))
emit("esr", ["I", "XC", "C", "ESR", "D", "Q"], out, ["C", "ESR", "D"])

# RCparallel
_, rows = table("rc-par")
out = []
for v in meter(["V", "I", "IR", "IC"], rows, 0.003, AMM_OFF, ["I", "IR", "IC"]):
    c = (v["I"] ** 2 - v["IR"] ** 2 - v["IC"] ** 2) / (2 * v["IR"] * v["IC"])
    s = umath.sqrt(1 - c**2)
    b = v["IC"] / v["V"] * s
    out.append((v["f"], {"R": v["V"] / v["IR"], "XC": 1 / b, "C": b / (2 * math.pi * v["f"]),
                         "D": c / s, "Q": s / c}))
emit("rc-par", ["R", "XC", "C", "D", "Q"], out, ["R", "C", "D"])

# RLparallel
_, rows = table("rl-par")
out = []
for v in meter(["V", "I", "IR", "IL"], rows, 0.003, AMM_OFF, ["I", "IR", "IL"]):
    c = (v["I"] ** 2 - v["IR"] ** 2 - v["IL"] ** 2) / (2 * v["IR"] * v["IL"])
    s = umath.sqrt(1 - c**2)
    z = v["V"] / v["IL"]
    rac, xl = z * c, z * s
    out.append((v["f"], {"R": v["V"] / v["IR"], "Rac": rac, "XL": xl,
                         "L": xl / (2 * math.pi * v["f"]), "Q": xl / rac}))
emit("rl-par", ["R", "Rac", "XL", "L", "Q"], out, ["R", "L", "Rac"])

path = os.path.join(HERE, "loss_parallel_uncertainty.out")
with open(path, "w") as fh:
    fh.write(f"# loss_parallel_uncertainty.py: uncertainties {uncertainties.__version__}\n")
    fh.write("# block name f(Hz or -) value u\n")
    for block, name, f, v in results:
        fs = "-" if f is None else repr(f)
        fh.write(f"{block} {name} {fs} {v.nominal_value!r} {v.std_dev!r}\n")
print(open(path).read())
