#!/usr/bin/env python3
"""Reference for coverage_factor's clamp: p = 2 is clamped to 1 - 1e-12, so k is the Student's
t quantile with nu = 3 at q = (1 + p)/2 = 1 - 5e-13. Closed-form t(3) CDF (handbook):
F(t) = 1/2 + (1/pi) (x/(1 + x^2) + atan x), x = t/sqrt(3); solved with mpmath at 50 digits.
Writes t3_quantile.out beside this script. Run: python3 t3_quantile.py
"""
import os

import mpmath as mp

mp.mp.dps = 50
p = 1 - mp.mpf("1e-12")
q = (1 + p) / 2


def tail(t):
    x = t / mp.sqrt(3)
    return 1 - (mp.mpf(1) / 2 + (x / (1 + x * x) + mp.atan(x)) / mp.pi)


t = mp.findroot(lambda t: mp.log(tail(t)) - mp.log(1 - q), 1e4)
out = os.path.join(os.path.dirname(os.path.abspath(__file__)), "t3_quantile.out")
with open(out, "w") as fh:
    fh.write(f"# t3_quantile.py: mpmath {mp.__version__}\n")
    fh.write(f"t3 {mp.nstr(t, 17)}\n")
print(open(out).read())
