"""Wilcoxon signed-rank references with infinite (and NaN) differences, from SciPy (PyPI).

Run: python3 tests/data/wilcoxon_inf_scipy.py > tests/data/wilcoxon_inf_scipy.txt
Same layout as wilcoxon_scipy.txt: name, method, statistic min(W+, W−), two-sided p-value, then
the differences. NaNs are omitted (nan_policy="omit"), zeros dropped (zero_method="wilcox").
No row has two infinities: they tie, and SciPy's method="exact" uses the null distribution
without ties (for [1, inf, 2, -0.5, inf, -3, 0.25] it gives 2·19/128 = 0.296875, where the
mid-rank distribution gives 0.28125), so tests/stats.rs checks tied infinities by enumeration.
"""

import numpy as np
import scipy
from scipy.stats import wilcoxon

inf, nan = np.inf, np.nan
CASES = [
    ("issue21", "exact", [1, inf, 2, -0.5]),
    ("minus_inf", "exact", [-inf, 0.3, -0.2, 1.5, 0.9]),
    ("inf_and_nan", "exact", [0.4, nan, -1.2, inf, 0.7, 2.2, 0.0, -0.1]),
    ("approx_inf", "approx", [0.1 * k * (-1) ** (k % 3 == 0) for k in range(1, 30)] + [inf]),
]

print("# name method statistic pvalue differences... (scipy %s, scipy.stats.wilcoxon(d, "
      "method=M, zero_method='wilcox', correction=(M=='approx'), nan_policy='omit'))"
      % scipy.__version__)
for name, method, d in CASES:
    r = wilcoxon(d, method=method, zero_method="wilcox", correction=(method == "approx"),
                 nan_policy="omit")
    print(name, method, repr(float(r.statistic)), repr(float(r.pvalue)), *(repr(float(v)) for v in d))
