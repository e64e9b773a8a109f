#!/usr/bin/python3
"""permutation_null_reference.py: SciPy's null distributions and binomial tools.

The reference side of tests/reference/permutation_null_reference_test.cc. It
complements scipy_permutation_ref.py (SciPy's permutation_test on every
statistic) with references that do not enumerate splits one statistic call at
a time, so they reach sample sizes that permutation_test cannot in a test
budget, and with the binomial tools that judge Monte Carlo p-values. Every
value is computed live by SciPy 1.10 / NumPy (Debian's python3-scipy):

  ks_exact       scipy.stats.ks_2samp(x, y, method='exact'): the exact
                 two-sided p-value P(D >= d) of the two-sample
                 Kolmogorov–Smirnov test, by lattice-path counting. Without
                 ties this is the permutation p-value of D, since every split
                 is one path. Tied data are refused.
  cvm_exact      scipy.stats.cramervonmises_2samp(x, y, method='exact'): the
                 exact p-value P(U >= u) of the two-sample Cramér–von Mises
                 test by the recursion of Xiao, Gordon & Yakovlev (2006).
                 Without ties it is the permutation p-value of T. Tied data
                 are refused.
  permutation    scipy.stats.permutation_test(permutation_type='independent'),
                 enumerating all splits (n_resamples = C(N, n)). Statistics:
                   mean-diff    numpy.mean(y) - numpy.mean(x)
                   median-diff  numpy.median(y) - numpy.median(x)
                   welch        scipy.stats.ttest_ind(y, x, equal_var=False)
                                .statistic; 0/0 (both groups constant, equal
                                means) is 0 and +-inf is +-DBL_MAX, the
                                convention of core/statistic.h
                   ks           scipy.stats.ks_2samp(x, y).statistic
                   cvm          scipy.stats.cramervonmises_2samp(x, y).statistic
                   ad           scipy.stats.anderson_ksamp([x, y]).statistic
                                (standardized; the p-value is the same as for
                                A2akN, an increasing affine function of it)
                 mean-diff, median-diff and welch are vectorized over splits;
                 the others are called once per split. "alternative" is
                 "abs" (|T| with alternative='greater': plumbline's two-sided
                 rule) or "two-sided" (the signed T with SciPy's default rule,
                 twice the smaller one-sided p-value).
                 With "block": L, the units permuted are blocks: each sample
                 keeps its newest multiple of L values (it is given oldest
                 first) and is cut into consecutive blocks of L, and SciPy
                 permutes block indices (x: the reference blocks, y: the
                 recent blocks), the statistic being computed on the values
                 of the blocks each side receives.
  binomtest      scipy.stats.binomtest(k, n, p).pvalue, two-sided.
  clopper_pearson  the Clopper–Pearson (1934) interval for k successes in n
                 trials at confidence c, as quantiles of the beta law
                 (scipy.stats.beta.ppf, Boost's inverse incomplete beta):
                 lower = beta.ppf((1 - c) / 2, k, n - k + 1), 0 when k = 0;
                 upper = beta.ppf((1 + c) / 2, k + 1, n - k), 1 when k = n.
                 This is the interval binomtest(k, n).proportion_ci(c,
                 method='exact') defines, but that one is found by brentq
                 with an absolute xtol of 2e-12, too coarse for a relative
                 comparison of ends near 1e-5; the beta quantiles are
                 accurate in relative terms.
  nbinom         the two-sided tail probability of f failures before the
                 h-th success, success probability p, under
                 scipy.stats.nbinom(h, p): min(1, 2 min(cdf(f), sf(f - 1))).

Protocol: one JSON request on stdin, one JSON document on stdout.
  {"ks_exact":      [{"x": [...], "y": [...]}, ...],
   "cvm_exact":     [{"x": [...], "y": [...]}, ...],
   "permutation":   [{"test": name, "x": [...], "y": [...],
                      "alternative": "abs" | "two-sided", "block": L}, ...],
   "binomtest":     [{"k": k, "n": n, "p": p}, ...],
   "clopper_pearson": [{"k": k, "n": n, "level": c}, ...],
   "nbinom":        [{"failures": f, "successes": h, "p": p}, ...]}
  Every key is optional ("alternative" defaults to "abs", "block" to 1).
  Answer: the same keys, one entry per job:
    ks_exact, cvm_exact: {"statistic": ..., "pvalue": ...}
    permutation:         {"statistic": observed T (signed for signed tests),
                          "pvalue": ..., "null_size": ..., "splits": C(N, n)}
                         (counted in blocks for block jobs)
    binomtest:           p-value
    clopper_pearson:     [low, high]
    nbinom:              tail probability
Any error (a warning other than those silenced below, unknown keys, tied data
for an exact KS or CvM job, a non-finite result) ends the script with a
traceback and a non-zero exit status, which fails the test.
"""

import json
import math
import sys
import warnings

import numpy as np
from scipy import stats

# Fail loudly: every warning is an error, except those silenced locally.
warnings.simplefilter("error")

DBL_MAX = sys.float_info.max


def as_sample(values, what):
    a = np.asarray(values, dtype=float)
    if a.ndim != 1 or a.shape[0] < 2:
        raise ValueError(f"{what} must be a list of at least 2 values")
    if not np.all(np.isfinite(a)):
        raise ValueError(f"{what} holds a value that is not finite")
    return a


def untied(x, y):
    pooled = np.concatenate([x, y])
    if np.unique(pooled).size != pooled.size:
        raise ValueError("exact KS / CvM jobs take untied data")


def finite(value, what):
    value = float(value)
    if not math.isfinite(value):
        raise ValueError(f"{what} is not finite: {value}")
    return value


def mean_diff(x, y, axis=-1):
    return np.mean(y, axis=axis) - np.mean(x, axis=axis)


def median_diff(x, y, axis=-1):
    return np.median(y, axis=axis) - np.median(x, axis=axis)


def welch(x, y, axis=-1):
    with warnings.catch_warnings():
        # A group of one repeated value has variance exactly 0: SciPy warns of
        # cancellation, and 0/0 or d/0 warn in numpy. The convention of
        # core/statistic.h then maps 0/0 to 0 and +-inf to +-DBL_MAX.
        warnings.filterwarnings("ignore", message="Precision loss occurred",
                                category=RuntimeWarning)
        warnings.filterwarnings("ignore", message="invalid value encountered",
                                category=RuntimeWarning)
        warnings.filterwarnings("ignore", message="divide by zero encountered",
                                category=RuntimeWarning)
        t = stats.ttest_ind(y, x, equal_var=False, axis=axis).statistic
    return np.nan_to_num(t, nan=0.0, posinf=DBL_MAX, neginf=-DBL_MAX)


def ks(x, y):
    return stats.ks_2samp(x, y, method="asymp").statistic


def cvm(x, y):
    return stats.cramervonmises_2samp(x, y, method="asymptotic").statistic


def ad(x, y):
    with warnings.catch_warnings():
        # anderson_ksamp warns that its own p-value is capped or floored; the
        # statistic is unaffected and that p-value is not used.
        warnings.filterwarnings("ignore", message=".*p-value.*", category=UserWarning)
        return stats.anderson_ksamp([x, y]).statistic


# name: (function, vectorized over a leading axis of splits, signed)
STATISTICS = {
    "mean-diff": (mean_diff, True, True),
    "median-diff": (median_diff, True, True),
    "welch": (welch, True, True),
    "ks": (ks, False, False),
    "cvm": (cvm, False, False),
    "ad": (ad, False, False),
}


def ks_exact(job):
    x, y = as_sample(job["x"], "x"), as_sample(job["y"], "y")
    untied(x, y)
    res = stats.ks_2samp(x, y, alternative="two-sided", method="exact")
    return {"statistic": finite(res.statistic, "statistic"),
            "pvalue": finite(res.pvalue, "p-value")}


def cvm_exact(job):
    x, y = as_sample(job["x"], "x"), as_sample(job["y"], "y")
    untied(x, y)
    res = stats.cramervonmises_2samp(x, y, method="exact")
    return {"statistic": finite(res.statistic, "statistic"),
            "pvalue": finite(res.pvalue, "p-value")}


def permutation(job):
    test = job["test"]
    if test not in STATISTICS:
        raise ValueError(f"unknown test {test!r}")
    f, vectorized, signed = STATISTICS[test]
    alternative = job.get("alternative", "abs")
    if alternative not in ("abs", "two-sided"):
        raise ValueError(f"unknown alternative {alternative!r}")
    if alternative == "two-sided" and not signed:
        raise ValueError("alternative 'two-sided' is for signed statistics only")
    x, y = as_sample(job["x"], "x"), as_sample(job["y"], "y")
    block = int(job.get("block", 1))
    if block < 1:
        raise ValueError("block must be at least 1")

    if alternative == "abs" and signed:
        def stat(a, b, axis=-1):
            return np.abs(f(a, b, axis=axis))
    elif vectorized:
        def stat(a, b, axis=-1):
            return f(a, b, axis=axis)
    else:
        def stat(a, b):
            return f(a, b)

    if block == 1:
        data = (x, y)
        observed = f(x, y)
        units = (x.size, y.size)
    else:
        # Newest multiple of L values of each sample, in blocks of L.
        xb = x[x.size % block:].reshape(-1, block)
        yb = y[y.size % block:].reshape(-1, block)
        if xb.shape[0] < 2 or yb.shape[0] < 2:
            raise ValueError("block jobs need at least 2 blocks a side")
        blocks = np.concatenate([xb, yb], axis=0)
        nb = xb.shape[0]
        units = (xb.shape[0], yb.shape[0])
        data = (np.arange(nb), np.arange(nb, blocks.shape[0]))
        inner = stat

        # Block indices in, values of those blocks out. `ia` and `ib` hold
        # one split (1-D) or, vectorized, one split per row (2-D).
        def expand(ia):
            v = blocks[ia]
            return v.reshape(v.shape[:-2] + (-1,))

        if vectorized:
            def stat(ia, ib, axis=-1):
                return inner(expand(ia), expand(ib), axis=-1)
        else:
            def stat(ia, ib):
                return inner(expand(ia), expand(ib))
        observed = f(xb.ravel(), yb.ravel())

    splits = math.comb(units[0] + units[1], units[0])
    res = stats.permutation_test(
        data, stat, permutation_type="independent", vectorized=vectorized,
        n_resamples=splits,
        alternative="greater" if alternative == "abs" else "two-sided")
    null_size = int(np.asarray(res.null_distribution).size)
    return {"statistic": finite(observed, "statistic"),
            "pvalue": finite(res.pvalue, "p-value"),
            "null_size": null_size,
            "splits": splits}


def binomtest(job):
    return finite(stats.binomtest(int(job["k"]), int(job["n"]), float(job["p"])).pvalue,
                  "binomtest p-value")


def clopper_pearson(job):
    k, n, level = int(job["k"]), int(job["n"]), float(job["level"])
    if not (0 <= k <= n and n >= 1 and 0 < level < 1):
        raise ValueError(f"bad Clopper-Pearson job {job!r}")
    tail = (1 - level) / 2
    low = 0.0 if k == 0 else stats.beta.ppf(tail, k, n - k + 1)
    high = 1.0 if k == n else stats.beta.ppf(1 - tail, k + 1, n - k)
    return [finite(low, "interval low"), finite(high, "interval high")]


def nbinom(job):
    f, h, p = int(job["failures"]), int(job["successes"]), float(job["p"])
    law = stats.nbinom(h, p)
    return finite(min(1.0, 2 * min(law.cdf(f), law.sf(f - 1))), "nbinom tail")


HANDLERS = {
    "ks_exact": ks_exact,
    "cvm_exact": cvm_exact,
    "permutation": permutation,
    "binomtest": binomtest,
    "clopper_pearson": clopper_pearson,
    "nbinom": nbinom,
}


def main():
    request = json.load(sys.stdin)
    unknown = set(request) - set(HANDLERS)
    if unknown:
        raise ValueError(f"unknown request keys {sorted(unknown)}")
    answer = {key: [HANDLERS[key](job) for job in jobs] for key, jobs in request.items()}
    json.dump(answer, sys.stdout, allow_nan=False)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
