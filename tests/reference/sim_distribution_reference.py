#!/usr/bin/python3
"""sim_distribution_reference.py: the simulator's noise distributions, by SciPy.

The simulator scales each shape to a given mean (nominal) and standard
deviation (spread): value = nominal + spread * (Y - E[Y]) / sd(Y), where Y
has the raw shape. This script builds Y with SciPy (scipy.stats.norm,
lognorm(s), t(df), uniform; the two-component normal mixture by its CDF and
moments integrated with scipy.integrate.quad), and answers:
  - the excess kurtosis of the scaled distribution (for the standard error of
    a sample standard deviation) and its skewness;
  - the Kolmogorov-Smirnov p-value (scipy.stats.kstest) of the given values
    against the scaled distribution's CDF.

Protocol: one JSON request on stdin, one JSON document on stdout.
  request   {"kind": "normal" | "lognormal" | "student-t" | "uniform" | "mixture",
             "nominal": m, "spread": s,
             "sigma_log": .., "df": .., "weight": .., "offset": .., "ratio": ..,
             "values": [x, ...]}
  response  {"mean": m, "sd": s, "skewness": g1, "excess_kurtosis": g2,
             "ks_pvalue": p}
"""
import json
import math
import sys

import numpy as np
from scipy import integrate, stats


def mixture(w, d, r):
    def pdf(y):
        return (1 - w) * stats.norm.pdf(y) + w * stats.norm.pdf(y, loc=d, scale=r)

    def cdf(y):
        return (1 - w) * stats.norm.cdf(y) + w * stats.norm.cdf(y, loc=d, scale=r)

    lo, hi = min(-12.0, d - 12 * r), max(12.0, d + 12 * r)
    m1 = integrate.quad(lambda y: y * pdf(y), lo, hi, limit=200)[0]
    central = [integrate.quad(lambda y, k=k: (y - m1) ** k * pdf(y), lo, hi, limit=200)[0]
               for k in (2, 3, 4)]
    var = central[0]
    return cdf, m1, var, central[1] / var ** 1.5, central[2] / var ** 2 - 3


def main() -> int:
    req = json.load(sys.stdin)
    kind = req["kind"]
    if kind == "mixture":
        cdf, m, var, skew, kurt = mixture(req["weight"], req["offset"], req["ratio"])
    else:
        dist = {
            "normal": lambda: stats.norm(),
            "lognormal": lambda: stats.lognorm(req["sigma_log"]),
            "student-t": lambda: stats.t(req["df"]),
            "uniform": lambda: stats.uniform(),
        }[kind]()
        m, var, skew, kurt = (float(v) for v in dist.stats(moments="mvsk"))
        cdf = dist.cdf
    sd = math.sqrt(var)
    nominal, spread = req["nominal"], req["spread"]
    values = np.asarray(req["values"], dtype=float)

    def scaled_cdf(x):
        return cdf(m + sd * (np.asarray(x) - nominal) / spread)

    p = stats.kstest(values, scaled_cdf).pvalue
    json.dump({"mean": nominal, "sd": spread, "skewness": skew, "excess_kurtosis": kurt,
               "ks_pvalue": float(p)}, sys.stdout)
    return 0


if __name__ == "__main__":
    sys.exit(main())
