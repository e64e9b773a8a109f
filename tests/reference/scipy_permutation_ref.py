#!/usr/bin/python3
"""scipy_permutation_ref.py: SciPy's two-sample statistics and permutation tests.

The reference side of tests/reference/permutation_vs_scipy_test.cc. Every value
is computed live by SciPy 1.10 / NumPy (Debian's python3-scipy), never stored:

  mean-diff    numpy.mean(y) - numpy.mean(x)
  median-diff  numpy.median(y) - numpy.median(x)
  welch        scipy.stats.ttest_ind(y, x, equal_var=False).statistic (its
               cancellation warning for a group of equal values is silenced)
  ks           scipy.stats.ks_2samp(x, y).statistic
  cvm          scipy.stats.cramervonmises_2samp(x, y).statistic
  ad           scipy.stats.anderson_ksamp([x, y]).statistic (midrank form, the
               standardized statistic; its p-value is capped to [0.001, 0.25]
               with a warning, so only .statistic is used and that warning is
               silenced)
  energy       1-D: scipy.stats.energy_distance(x, y)**2 * n m / (n + m).
               SciPy's documentation defines the energy distance as
               sqrt(2 E|X-Y| - E|X-X'| - E|Y-Y'|); on the empirical
               distributions the radicand is 2A - B - C with the mean
               distances A, B, C of core/statistic.h, so the square scaled by
               n m / N is plumbline's energy statistic.
               Rows: n m / N (2 mean(cdist(X, Y)) - mean(cdist(X, X))
               - mean(cdist(Y, Y))), with scipy.spatial.distance.cdist
               (Euclidean), the same definition written out.

The ks and cvm calls pass method='asymp' / method='asymptotic': the method only
chooses how SciPy computes its own p-value (the exact ones are slow inside a
permutation loop); the statistic does not depend on it.

Permutation p-values come from scipy.stats.permutation_test with
permutation_type='independent', alternative='greater' and vectorized=False.
Signed statistics enter as |T| (two-sided, as plumbline tests them) unless the
job asks for direction 'greater' (the signed T, one-sided). With n_resamples
at least C(N, n), or n_resamples null, SciPy enumerates every split and the
p-value is exact; otherwise it is SciPy's Monte Carlo p-value
(1 + #{T* >= T_obs}) / (1 + B) with random_state = the job's seed. Energy on
rows is permuted over row indices: x holds the indices of the reference rows
and y those of the recent rows in the pooled matrix.

Protocol: one JSON request on stdin, one JSON document on stdout.
  {"permutation": [{"test": name, "x": [...], "y": [...],
                    "n_resamples": B or null, "seed": s or null,
                    "direction": "abs" or "greater"}, ...],
   "statistics":  [{"x": [...], "y": [...]}, ...]}
  For energy, x and y may be lists of rows (lists of equal length).
  Answer: {"permutation": [{"statistic": T_obs (signed for signed tests),
                            "pvalue": p, "null_size": length of SciPy's null
                            distribution, "splits": C(N, n)}, ...],
           "statistics":  [{"mean-diff": ..., "median-diff": ..., "welch": ...,
                            "ks": ..., "cvm": ..., "ad": ...,
                            "energy": (1-D, via energy_distance),
                            "energy_cdist": (1-D, via cdist)}, ...]}
Any error (unknown test, malformed request, a warning other than the two
silenced above, a non-finite result) ends the script with a traceback and a
non-zero exit status.
"""

import json
import math
import sys
import warnings

import numpy as np
from scipy import stats
from scipy.spatial.distance import cdist

# Fail loudly: every warning is an error, except those silenced locally.
warnings.simplefilter("error")


def mean_diff(x, y):
    return float(np.mean(y) - np.mean(x))


def median_diff(x, y):
    return float(np.median(y) - np.median(x))


def welch(x, y):
    with warnings.catch_warnings():
        # With tied data a group can hold one repeated value; its variance is
        # then exactly 0 and SciPy's moment code warns of cancellation. The
        # value is still right (the mean of equal doubles is that double).
        warnings.filterwarnings("ignore", message="Precision loss occurred",
                                category=RuntimeWarning)
        return float(stats.ttest_ind(y, x, equal_var=False).statistic)


def ks(x, y):
    return float(stats.ks_2samp(x, y, method="asymp").statistic)


def cvm(x, y):
    return float(stats.cramervonmises_2samp(x, y, method="asymptotic").statistic)


def ad(x, y):
    with warnings.catch_warnings():
        # anderson_ksamp warns that its p-value is capped or floored; the
        # statistic is unaffected and the p-value is not used.
        warnings.filterwarnings("ignore", message=".*p-value.*", category=UserWarning)
        return float(stats.anderson_ksamp([x, y]).statistic)


def energy_1d(x, y):
    n, m = len(x), len(y)
    return float(stats.energy_distance(x, y) ** 2 * n * m / (n + m))


def energy_rows(a, b):
    n, m = a.shape[0], b.shape[0]
    return float(n * m / (n + m) * (2 * cdist(a, b).mean() - cdist(a, a).mean() -
                                    cdist(b, b).mean()))


UNIVARIATE = {
    "mean-diff": mean_diff,
    "median-diff": median_diff,
    "welch": welch,
    "ks": ks,
    "cvm": cvm,
    "ad": ad,
    "energy": energy_1d,
}
SIGNED = {"mean-diff", "median-diff", "welch"}


def finite(value, what):
    if not math.isfinite(value):
        raise ValueError(f"{what} is not finite: {value}")
    return value


def as_sample(values, what):
    a = np.asarray(values, dtype=float)
    if a.ndim not in (1, 2) or a.shape[0] < 2:
        raise ValueError(f"{what} must be a list of at least 2 values or rows")
    return a


def permutation(job):
    test = job["test"]
    x = as_sample(job["x"], "x")
    y = as_sample(job["y"], "y")
    if x.ndim != y.ndim or x.shape[1:] != y.shape[1:]:
        raise ValueError("x and y differ in shape")
    n, m = x.shape[0], y.shape[0]
    splits = math.comb(n + m, n)
    direction = job.get("direction", "abs")
    if direction not in ("abs", "greater"):
        raise ValueError(f"unknown direction {direction!r}")
    if direction == "greater" and test not in SIGNED:
        raise ValueError("direction 'greater' is for signed statistics only")

    if x.ndim == 2:
        if test != "energy":
            raise ValueError(f"test {test!r} takes univariate samples")
        pooled = np.concatenate([x, y], axis=0)

        def stat(ix, iy):
            return energy_rows(pooled[ix], pooled[iy])

        data = (np.arange(n), np.arange(n, n + m))
        observed = stat(*data)
    else:
        if test not in UNIVARIATE:
            raise ValueError(f"unknown test {test!r}")
        f = UNIVARIATE[test]
        if test in SIGNED and direction == "abs":
            def stat(a, b):
                return abs(f(a, b))
        else:
            stat = f
        data = (x, y)
        observed = f(x, y)

    b = job.get("n_resamples")
    if b is None:
        b = splits
    seed = job.get("seed")
    res = stats.permutation_test(data, stat, permutation_type="independent",
                                 alternative="greater", n_resamples=b,
                                 vectorized=False, random_state=seed)
    return {
        "statistic": finite(observed, "statistic"),
        "pvalue": finite(float(res.pvalue), "p-value"),
        "null_size": int(len(res.null_distribution)),
        "splits": splits,
    }


def statistics(job):
    x = as_sample(job["x"], "x")
    y = as_sample(job["y"], "y")
    if x.ndim != 1 or y.ndim != 1:
        raise ValueError("statistics jobs take univariate samples")
    out = {name: finite(f(x, y), name) for name, f in UNIVARIATE.items()}
    out["energy_cdist"] = finite(energy_rows(x[:, None], y[:, None]), "energy_cdist")
    return out


def main():
    request = json.load(sys.stdin)
    unknown = set(request) - {"permutation", "statistics"}
    if unknown:
        raise ValueError(f"unknown request keys {sorted(unknown)}")
    answer = {}
    if "permutation" in request:
        answer["permutation"] = [permutation(j) for j in request["permutation"]]
    if "statistics" in request:
        answer["statistics"] = [statistics(j) for j in request["statistics"]]
    json.dump(answer, sys.stdout, allow_nan=False)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
