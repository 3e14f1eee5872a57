"""Reference values for tests/stats.rs, computed with mpmath (PyPI) at 50 significant digits.

Run: python3 tests/data/stats_mpmath.py > tests/data/stats_mpmath.txt
Each output line is `kind arguments... value`; the arguments are doubles printed so that they
read back exactly (repr), and every value is computed at those exact doubles.
  lngamma x      ln Γ(x)
  beta x a b     regularized incomplete beta I_x(a, b)
  tcdf t df      P(T ≤ t), Student t with df degrees of freedom
  tquant p df    the p quantile of that distribution
Each value is computed twice, at 50 and at 70 digits; the script stops if the two differ in
the first 30 significant digits.
"""

import mpmath
from mpmath import mp, mpf


def lngamma(x):
    return mpmath.loggamma(mpf(x))


def beta(x, a, b):
    """I_x(a, b) = x^a (1-x)^b / (a B(a, b)) · 2F1(a+b, 1; a+1; x), a series of positive terms
    (Abramowitz & Stegun 26.5.23, quoted from memory), summed in x when x ≤ 1/2 and otherwise
    through I_x(a, b) = 1 − I_{1−x}(b, a), with enough extra digits that the subtraction leaves
    more than 50. Where mpmath's own betainc (another series) converges, the two must agree."""
    x, a, b = mpf(x), mpf(a), mpf(b)
    if x <= mpf(1) / 2:
        with mp.workdps(mp.dps + 20):
            value = beta_series(x, a, b)
    else:
        extra = 20
        while True:
            with mp.workdps(mp.dps + extra):
                value = 1 - beta_series(1 - x, b, a)
            # 1 − value loses -log10(value) digits.
            if value > mpf(10) ** (10 - extra):
                break
            extra *= 2
    value = +value  # round to the working precision
    try:
        own = mpmath.betainc(a, b, 0, x, regularized=True)
    except ValueError:
        own = None  # mpmath's series gives up, e.g. at a = b = 1e4
    if own is not None:
        assert abs(own - value) <= mpf(10) ** (10 - mp.dps) * abs(value), (x, a, b, own, value)
    return value


def beta_series(x, a, b):
    total, term, n = mpf(0), mpf(1), 0
    while term > mp.eps * total:
        total += term
        term *= (a + b + n) * x / (a + 1 + n)
        n += 1
    return x**a * (1 - x) ** b / (a * mpmath.beta(a, b)) * total


def tcdf(t, df):
    t, df = mpf(t), mpf(df)
    # P(T ≤ −|t|) = I_{df/(df+t²)}(df/2, 1/2) / 2.
    lower = beta(df / (df + t * t), df / 2, mpf(1) / 2) / 2
    return lower if t <= 0 else 1 - lower


def tquant(p, df):
    p = mpf(p)
    if p > mpf(1) / 2:
        return -tquant_lower(1 - p, df)
    return tquant_lower(p, df)


def tquant_lower(p, df):
    # Solve ln P(T ≤ t) = ln p for t < 0, starting from a bracket found by doubling.
    lo = mpf(-1)
    while tcdf(lo, df) > p:
        lo *= 2
    hi = lo / 2
    while tcdf(hi, df) < p:
        hi /= 2
        lo = hi * 2
    return mpmath.findroot(lambda t: mpmath.log(tcdf(t, df)) - mpmath.log(p), (lo, hi),
                           solver="anderson")


CASES = [
    # ln Γ: exact zeros at 1 and 2, and a spread of arguments.
    ("lngamma", 1.0), ("lngamma", 2.0), ("lngamma", 0.5), ("lngamma", 1e-8), ("lngamma", 0.999),
    ("lngamma", 1.001), ("lngamma", 3.7), ("lngamma", 30.5), ("lngamma", 1e4), ("lngamma", 1e6),
    # Issue 21, defect 1: inputs where the symmetry switch used to hold both ways.
    ("beta", 0.03155263980006248, 0.01, 30.0), ("beta", 0.0036411784177424696, 0.1, 300.0),
    ("beta", 0.9684473601999375, 30.0, 0.01), ("beta", 0.9963588215822575, 300.0, 0.1),
    # Defect 4: large shape parameters.
    ("beta", 0.9999, 1e4, 0.01), ("beta", 0.99999, 1e4, 0.01), ("beta", 0.999999, 1e4, 0.01),
    ("beta", 0.99999999, 1e4, 0.01), ("beta", 0.999, 1e4, 0.01), ("beta", 0.9995, 1e4, 0.01),
    ("beta", 1e-4, 0.01, 1e4), ("beta", 1e-6, 0.01, 1e4), ("beta", 1e-3, 0.01, 1e4),
    ("beta", 0.5, 1e4, 1e4), ("beta", 0.49, 1e4, 1e4), ("beta", 0.51, 1e4, 1e4),
    ("beta", 0.495, 1e4, 1e4), ("beta", 0.3, 1e4, 2e4), ("beta", 0.34, 1e4, 2e4),
    ("beta", 0.9, 1e4, 1e3), ("beta", 0.91, 1e4, 1e3), ("beta", 0.5, 1e4, 1e4 + 0.5),
    ("beta", 0.2, 2.0, 3.0), ("beta", 0.7, 0.5, 0.5), ("beta", 0.05, 0.5, 10.0),
    ("beta", 0.99, 15.0, 0.5), ("beta", 0.5, 40.0, 40.0),
    # Defect 2: t CDF very close to 0, where df / (df + t²) rounds to 1.
    ("tcdf", -6.3096e-6, 1e6), ("tcdf", 6.3096e-6, 1e6), ("tcdf", -1e-7, 1e3), ("tcdf", -5e-7, 30.0),
    ("tcdf", -1e-7, 1.0), ("tcdf", 1e-9, 5.0), ("tcdf", -1e-300, 3.0), ("tcdf", -0.5, 4.0),
    # and in the tails.
    ("tcdf", -3.0, 1.0), ("tcdf", -1e6, 1.0), ("tcdf", -40.0, 30.0), ("tcdf", -8.0, 1e6),
    ("tcdf", 4.0, 9.0), ("tcdf", -1e150, 2.0),
    # Defects 2 and 3: quantiles near the centre and in the far tails.
    ("tquant", 0.4999999, 1e6), ("tquant", 0.5000001, 1e6), ("tquant", 0.4999999, 3.0),
    ("tquant", 1e-12, 1.0), ("tquant", 1e-12, 2.0), ("tquant", 1e-12, 5.0), ("tquant", 1e-12, 30.0),
    ("tquant", 1e-12, 1e3), ("tquant", 1e-12, 1e6), ("tquant", 1e-300, 1.0),
    ("tquant", 1e-300, 50.0), ("tquant", 0.975, 4.0), ("tquant", 0.995, 1.0), ("tquant", 0.6, 29.0),
    ("tquant", 0.999999, 7.0),
]

FUNCS = {"lngamma": lngamma, "beta": beta, "tcdf": tcdf, "tquant": tquant}


def main():
    print("# kind arguments... value  (mpmath %s, 50 significant digits; tests/data/stats_mpmath.py)"
          % mpmath.__version__)
    for kind, *args in CASES:
        mp.dps = 70
        check = FUNCS[kind](*args)
        mp.dps = 50
        value = FUNCS[kind](*args)
        scale = max(abs(check), mpf(10) ** -300)
        assert abs(value - check) <= mpf(10) ** -30 * scale, (kind, args, value, check)
        print(kind, *(repr(a) for a in args), mpmath.nstr(value, 20, min_fixed=0, max_fixed=0))


if __name__ == "__main__":
    main()
