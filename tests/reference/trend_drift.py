# Reference for the drift of a check standard (tests/trend.rs): scipy.stats.linregress on an
# invented series of a 100 nF reference capacitor measured in five records (days since the
# first record, value in nF). Re-run: python3 tests/reference/trend_drift.py
import numpy as np
from scipy import stats

days = np.array([0.0, 31.0, 59.0, 90.0, 120.0])
c_nf = np.array([100.012, 100.019, 100.021, 100.030, 100.034])
r = stats.linregress(days, c_nf)
print(f"slope_nF_per_day {r.slope:.12e}")
print(f"stderr_nF_per_day {r.stderr:.12e}")
print(f"intercept_nF {r.intercept:.12e}")
mr = np.abs(np.diff(c_nf))
print(f"mean_nF {c_nf.mean():.12e}")
print(f"mr_bar_nF {mr.mean():.12e}")
print(f"e_n {(100.4 - 100.0) / np.hypot(U1, U2):.12e}")
