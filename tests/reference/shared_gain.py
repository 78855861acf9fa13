#!/usr/bin/env python3
"""Reference for the shared gain of one meter range: an independent first-order propagation
with the Python `uncertainties` package (exact derivatives, shared inputs kept correlated).

Reads the readings and specs of rc_shared_gain.md and models them by the rules of FORMAT.md
("Meter ranges and the shared gain error") and src/networks/inputs.rs as stated there (not
its code):
- voltmeter `0.5% + 3`, resolution 1 mV: a gain (value 1, rectangular half-width 0.5 %) and a
  per-reading offset of 3 counts x 1 mV (rectangular);
- shared: VR and VC on the same range of one meter share ONE gain; independent: VR and VC on
  different ranges each have their own gain (the counts stay the same: one resolution);
- R1 measured 1001.3 ohm with an ohmmeter `0.05% + 2`, resolution 0.1 ohm: one input with the
  rectangular half-width 0.05 % x R + 2 x 0.1 ohm;
- a single reading has no Type A; f without a counter is exact.
Model (series RC): I = VR/R, C = I/(2 pi f VC).
Writes shared_gain.out beside this script. Run: python3 shared_gain.py
"""
import math
import os

import uncertainties
from uncertainties import ufloat

HERE = os.path.dirname(os.path.abspath(__file__))
SQ3 = math.sqrt(3.0)

text = open(os.path.join(HERE, "rc_shared_gain.md"), encoding="utf-8").read()
table = text.split("```readings", 1)[1].split("```", 1)[0].split("\n---\n", 1)[1]
lines = [l.split() for l in table.strip().splitlines()]
assert lines[0] == ["f/Hz", "VR/V", "VC/V"], lines[0]
assert len(lines) == 2, "one reading"
f, vr_r, vc_r = (float(x) for x in lines[1])
assert "accuracy: 0.5% + 3" in text and "resolution: 1 mV" in text
assert "accuracy: 0.05% + 2" in text and "resolution: 0.1 ohm" in text
assert "measured: 1001.3 ohm" in text
R_MEASURED = 1001.3

def c_of(shared):
    g_r = ufloat(1.0, 0.005 / SQ3, "gain VR range")
    g_c = g_r if shared else ufloat(1.0, 0.005 / SQ3, "gain VC range")
    off = 3 * 1e-3 / SQ3
    vr = vr_r * g_r + ufloat(0.0, off, "counts VR")
    vc = vc_r * g_c + ufloat(0.0, off, "counts VC")
    r = ufloat(R_MEASURED, (0.0005 * R_MEASURED + 2 * 0.1) / SQ3, "R1")
    return (vr / r) / (2 * math.pi * f * vc)

out = os.path.join(HERE, "shared_gain.out")
with open(out, "w") as fh:
    fh.write(f"# shared_gain.py: uncertainties {uncertainties.__version__}\n")
    fh.write("# case C(F) u(F) u_rel(%, 4 significant digits)\n")
    for case, shared in (("shared", True), ("independent", False)):
        c = c_of(shared)
        rel = 100 * c.std_dev / c.nominal_value
        fh.write(f"{case} {c.nominal_value!r} {c.std_dev!r} {rel:.4f}\n")
print(open(out).read())
