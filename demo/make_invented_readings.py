#!/usr/bin/env python3
"""Made the invented readings of four demo notebooks (logger-export/, capacitor-loss.md,
parallel-tank.md, written-model.md) by complex arithmetic from invented part values.

Prints each table; writes demo/logger-export/logger-sweep.csv. The values below are invented
for the benchrec demo and describe no real part or bench.
"""
import cmath
import math
import os
import random

rng = random.Random(20261127)


def meter(v, step, noise_counts=0.4):
    """A reading: the true RMS value with a little scatter, rounded to the meter's step."""
    return round((v + rng.gauss(0, noise_counts * step)) / step) * step


def fmt(v, step):
    places = max(0, -int(math.floor(math.log10(step) + 1e-9)))
    return f"{v:.{places}f}"


def rc_logger():
    # Filter capacitor behind a 1 kΩ resistor, logger sweep at 1.5 V RMS.
    r, c, vs = 1000.4, 146.2e-9, 1.5
    rows = []
    for f in (100, 200, 500, 1000, 2000, 5000):
        zc = 1 / (2j * math.pi * f * c)
        i = vs / (r + zc)
        for k in range(2):  # the logger takes two readings per step
            rows.append((f, meter(vs, 1e-4), meter(abs(i * r), 1e-4), meter(abs(i * zc), 1e-4), k))
    here = os.path.dirname(os.path.abspath(__file__))
    path = os.path.join(here, "logger-export", "logger-sweep.csv")
    lines = [
        "Geraet;DL-8 Messlogger (erfunden);Seriennr.;DL8-0042",
        "Export;2026-11-27 18:40;Kanaele;3",
        "Zeit;Frequenz [Hz];U_ein [V];U_R [V];U_C [V]",
    ]
    t = 18 * 3600 + 12 * 60
    for f, a, b, cc, k in rows:
        t += 20
        stamp = f"{t // 3600:02d}:{t // 60 % 60:02d}:{t % 60:02d}"
        cells = [f"{f:.1f}", fmt(a, 1e-4), fmt(b, 1e-4), fmt(cc, 1e-4)]
        lines.append(";".join([stamp] + [x.replace(".", ",") for x in cells]))
    with open(path, "w", newline="") as out:
        out.write("\r\n".join(lines) + "\r\n")
    print("wrote", path)


def rc_loss():
    # Electrolytic, C with an ESR that falls with frequency, behind a 10 Ω resistor at 0.5 V RMS.
    r, c, vs = 10.02, 93.5e-6, 0.5
    # The notebook's sweep leaves out the 120 Hz row; its own block reads 120 Hz four times.
    esr = {100: 0.55, 120: 0.52, 200: 0.42, 400: 0.30, 700: 0.22, 1000: 0.18}
    print("RCloss sweep")
    for f, e in esr.items():
        z = e + 1 / (2j * math.pi * f * c)
        i = vs / (r + z)
        print(f, fmt(meter(vs, 1e-5, 0.3), 1e-5), fmt(meter(abs(i * r), 1e-5, 0.3), 1e-5),
              fmt(meter(abs(i * z), 1e-5, 0.3), 1e-5), f"D={e * 2 * math.pi * f * c:.4f}")
    print("RCloss at 120 Hz, repeats")
    for _ in range(4):
        f, e = 120, esr[120]
        z = e + 1 / (2j * math.pi * f * c)
        i = vs / (r + z)
        print(f, fmt(meter(vs, 1e-5, 0.3), 1e-5), fmt(meter(abs(i * r), 1e-5, 0.6), 1e-5),
              fmt(meter(abs(i * z), 1e-5, 0.6), 1e-5))


def tank():
    # Search-coil tank: L with its series R, in parallel with C, behind an 820 Ω sense resistor.
    l, rl, c, rs, vs = 702e-6, 3.1, 325e-9, 819.3, 2.0
    print("tank f0 =", 1 / (2 * math.pi * math.sqrt(l * c)), "R_D =", l / (c * rl))
    for f in (6000, 7500, 8500, 9200, 9800, 10200, 10400, 10550, 10700, 10900, 11300, 12000,
              13000, 15000, 18000):
        w = 2 * math.pi * f
        zl = rl + 1j * w * l
        zc = 1 / (1j * w * c)
        zt = zl * zc / (zl + zc)
        i = vs / (rs + zt)
        print(f, fmt(meter(vs, 1e-4), 1e-4), fmt(meter(abs(i * rs), 1e-4), 1e-4),
              fmt(meter(abs(i * zt), 1e-4), 1e-4))


def low_pass():
    # RC low-pass read on a scope: input and output peak to peak, in divisions of 0.5 V.
    r, c, vpp = 3291.0, 10.3e-9, 4.0
    print("low-pass fc =", 1 / (2 * math.pi * r * c))
    for f in (4700, 7000, 10000, 15000, 20000, 30000):
        h = 1 / (1 + 2j * math.pi * f * r * c)
        vo = abs(h) * vpp
        lag = -cmath.phase(h)
        period = 10.0
        shift = lag / (2 * math.pi) * period
        print(f, f"{vpp / 0.5:.2f}", f"{round(vo / 0.5 / 0.05) * 0.05:.2f}",
              f"{round(shift / 0.05) * 0.05:.2f}", period, f"vo={vo:.4f}")


if __name__ == "__main__":
    rc_logger()
    rc_loss()
    tank()
    low_pass()
