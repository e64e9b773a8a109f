#!/usr/bin/python3
"""scipy_special.py: SciPy's values for the functions of core/special.h.

Run by tests/reference/special_scipy_test.cc under Debian's /usr/bin/python3
(python3-scipy, SciPy 1.10). Every value comes from SciPy; nothing here is
computed by hand:

  ndtr, ndtri      scipy.special.ndtr / ndtri (Cephes).
  beta             scipy.stats.beta.cdf / .sf (Boost.Math ibeta / ibetac) and
                   scipy.special.betainc (Cephes incbet): two independent
                   implementations, each good in a different region (the C++
                   test says which it trusts where, and why).
  beta_inverse     scipy.stats.beta.ppf (p <= 1/2) or .isf(1 - p) (p > 1/2)
                   (Boost.Math ibeta_inv / ibetac_inv), with a flag telling
                   whether SciPy's own cdf / sf brackets p within a relative
                   `delta` of that answer. SciPy 1.10's inverses are wrong in
                   places (for instance beta.ppf(1e-10, 0.5, 2) and Cephes's
                   betaincinv(1e7, 1, 1e-300)); the flag lets the test skip
                   the answers SciPy itself disowns.
  binomtest        scipy.stats.binomtest(k, n).proportion_ci(level,
                   method='exact'): the Clopper-Pearson interval, which SciPy
                   finds with brentq at its default xtol = 2e-12 (absolute).

Protocol: one JSON object on stdin,
  {"ndtr": [x, ...], "ndtri": [p, ...], "beta": [[a, b, x], ...],
   "beta_inverse": {"delta": d, "cases": [[a, b, p], ...]},
   "binomtest": [[k, n, level], ...]}
(every key optional), and one JSON object on stdout with the same keys:
  ndtr, ndtri    lists of floats
  beta           list of {"cdf": ., "sf": ., "betainc": .}
  beta_inverse   list of {"x": ., "self_consistent": bool}
  binomtest      list of {"low": ., "high": .}
Floats are written with repr (shortest round-trip form), so they reach the
C++ side bit for bit. Inputs are chosen by the test so that no output is
infinite or NaN.
"""

import json
import sys
import warnings

from scipy import special, stats


def beta_values(a, b, x):
    return {
        "cdf": float(stats.beta.cdf(x, a, b)),
        "sf": float(stats.beta.sf(x, a, b)),
        "betainc": float(special.betainc(a, b, x)),
    }


def beta_inverse(a, b, p, delta):
    """SciPy's quantile and whether SciPy's own CDF brackets p around it."""
    lower_tail = p <= 0.5
    if lower_tail:
        x = float(stats.beta.ppf(p, a, b))
    else:
        x = float(stats.beta.isf(1.0 - p, a, b))
    lo = x * (1.0 - delta)
    hi = min(x * (1.0 + delta), 1.0)
    if lower_tail:
        consistent = bool(stats.beta.cdf(lo, a, b) <= p <= stats.beta.cdf(hi, a, b))
    else:
        q = 1.0 - p
        consistent = bool(stats.beta.sf(lo, a, b) >= q >= stats.beta.sf(hi, a, b))
    return {"x": x, "self_consistent": consistent}


def main():
    request = json.load(sys.stdin)
    out = {}
    # SciPy warns about underflow in far tails; the values are still returned.
    warnings.simplefilter("ignore", RuntimeWarning)
    if "ndtr" in request:
        out["ndtr"] = [float(special.ndtr(x)) for x in request["ndtr"]]
    if "ndtri" in request:
        out["ndtri"] = [float(special.ndtri(p)) for p in request["ndtri"]]
    if "beta" in request:
        out["beta"] = [beta_values(a, b, x) for a, b, x in request["beta"]]
    if "beta_inverse" in request:
        delta = request["beta_inverse"]["delta"]
        out["beta_inverse"] = [
            beta_inverse(a, b, p, delta) for a, b, p in request["beta_inverse"]["cases"]
        ]
    if "binomtest" in request:
        rows = []
        for k, n, level in request["binomtest"]:
            ci = stats.binomtest(int(k), int(n)).proportion_ci(
                confidence_level=level, method="exact")
            rows.append({"low": float(ci.low), "high": float(ci.high)})
        out["binomtest"] = rows
    json.dump(out, sys.stdout, allow_nan=False)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
