#!/usr/bin/env python3
"""Reference for the lot figures (src/lot.rs and tests/lot.rs): an invented lot of eight film
capacitors, J tolerance (+-5 %) on 100 nF. numpy gives mean and s (ddof=1); Cp and Cpk follow
from them; scipy.stats.anderson gives the Anderson-Darling statistic A^2 (mean and ddof=1 s
estimated from the data) and, with method="interpolate", a p-value read from its own tables.
The p-value benchrec prints is D'Agostino and Stephens (1986), Table 4.9 (from memory), on
A*^2 = A^2 (1 + 0.75/n + 2.25/n^2); it is computed here too. The Cpk interval is Bissell's
(1990) normal approximation Cpk +- z sqrt(1/(9n) + Cpk^2/(2(n-1))) (from memory), at 95 % and
at the default coverage probability 95.45 %.
Writes lot_capability.out beside this script. Run: python3 lot_capability.py
"""
import math
import os

import numpy as np
import scipy
import scipy.stats as st

x = np.array([98.2, 101.5, 99.7, 104.6, 100.8, 97.1, 106.0, 100.1])  # nF
lsl, usl = 95.0, 105.0
n = len(x)
mean = x.mean()
s = x.std(ddof=1)
cp = (usl - lsl) / (6 * s)
cpk = min(usl - mean, mean - lsl) / (3 * s)
ad = st.anderson(x, "norm", method="interpolate")
a2 = ad.statistic
a = a2 * (1 + 0.75 / n + 2.25 / n**2)
if a >= 0.6:
    p = math.exp(1.2937 - 5.709 * a + 0.0186 * a * a)
elif a >= 0.34:
    p = math.exp(0.9177 - 4.279 * a - 1.38 * a * a)
elif a >= 0.2:
    p = 1 - math.exp(-8.318 + 42.796 * a - 59.938 * a * a)
else:
    p = 1 - math.exp(-13.436 + 101.14 * a - 223.73 * a * a)
sw = st.shapiro(x)


def bissell(c, conf):
    z = st.norm.ppf(0.5 + conf / 2)
    h = z * math.sqrt(1 / (9 * n) + c * c / (2 * (n - 1)))
    return c - h, c + h


out = os.path.join(os.path.dirname(os.path.abspath(__file__)), "lot_capability.out")
with open(out, "w") as fh:
    fh.write(f"# lot_capability.py: numpy {np.__version__}, scipy {scipy.__version__}\n")
    fh.write(f"n {n}\n")
    fh.write(f"mean {float(mean)!r}\n")
    fh.write(f"s {float(s)!r}\n")
    fh.write(f"min {float(x.min())!r}\nmax {float(x.max())!r}\n")
    fh.write(f"Cp {float(cp)!r}\n")
    fh.write(f"Cpk {float(cpk)!r}\n")
    fh.write(f"AD_A2 {float(a2)!r}\n")
    fh.write(f"AD_A2_star {float(a)!r}\n")
    fh.write(f"AD_p_DAgostino_Stephens {p!r}\n")
    fh.write(f"AD_p_scipy_interpolate {float(ad.pvalue)!r}\n")
    fh.write(f"SW_W {float(sw.statistic)!r}\nSW_p {float(sw.pvalue)!r}\n")
    for conf in (0.95, 0.9545):
        lo, hi = bissell(cpk, conf)
        fh.write(f"Cpk_interval_{conf} {float(lo)!r} {float(hi)!r}\n")
print(open(out).read())
