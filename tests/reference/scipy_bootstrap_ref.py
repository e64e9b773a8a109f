#!/usr/bin/python3
"""scipy_bootstrap_ref.py: SciPy's bootstrap intervals for two-sample drift quantities.

The reference side of tests/reference/bootstrap_vs_scipy_test.cc. Every value
is computed live by SciPy 1.10 / NumPy (Debian's python3-scipy), never stored.

Quantities, as vectorized statistics of the two samples (x = reference,
y = recent), in the order plumbline defines them (core/bootstrap.h):
  mean-diff      numpy.mean(y) - numpy.mean(x)
  median-diff    numpy.median(y) - numpy.median(x)
  quantile-diff  numpy.quantile(y, q, method='linear')
                 - numpy.quantile(x, q, method='linear')
                 ('linear' is Hyndman & Fan's definition 7, plumbline's rule)

For each seed s of a job, scipy.stats.bootstrap((x, y), statistic,
n_resamples=B, vectorized=True, method='percentile', confidence_level=level,
random_state=s) draws the bootstrap distribution; the same distribution is
then handed back to scipy.stats.bootstrap (bootstrap_result=..., n_resamples=0)
with method='basic' and method='bca', so all three intervals of one seed come
from SciPy's own interval code on one set of replicates. Per seed the answer
also holds SciPy's standard error (std of the replicates, ddof=1) and the BCa
bias correction z0 = ndtri(_percentile_of_score(replicates, estimate)), the
first step of scipy.stats._resampling._bca_interval, computed with that very
function.

The acceleration a_hat of each job is deterministic (jackknife only): it is
the third value returned by scipy.stats._resampling._bca_interval, called
live on the data (with the first seed's replicates, which a_hat does not
depend on).

Protocol: one JSON request on stdin, one JSON document on stdout.
  {"jobs": [{"quantity": name, "q": q (quantile-diff only), "x": [...],
             "y": [...], "level": 0.95, "n_resamples": B,
             "seeds": [s1, s2, ...]}, ...]}
  Answer: {"jobs": [{"estimate": t, "a_hat": a,
                     "percentile": {"low": [...], "high": [...]},
                     "basic": {...}, "bca": {...},
                     "z0": [...], "standard_error": [...]}, ...]}
  Lists hold one value per seed, in the order of "seeds".
Any error (unknown quantity, malformed request, any warning, a non-finite
result) ends the script with a traceback and a non-zero exit status.
"""

import json
import math
import sys
import warnings

import numpy as np
from scipy import stats
from scipy.special import ndtri
from scipy.stats import _resampling

# Fail loudly: every warning is an error.
warnings.simplefilter("error")


def make_statistic(job):
    quantity = job["quantity"]
    if quantity == "mean-diff":
        def statistic(x, y, axis=-1):
            return np.mean(y, axis=axis) - np.mean(x, axis=axis)
    elif quantity == "median-diff":
        def statistic(x, y, axis=-1):
            return np.median(y, axis=axis) - np.median(x, axis=axis)
    elif quantity == "quantile-diff":
        q = float(job["q"])
        if not 0 < q < 1:
            raise ValueError(f"quantile {q} is outside (0, 1)")

        def statistic(x, y, axis=-1):
            return (np.quantile(y, q, axis=axis, method="linear") -
                    np.quantile(x, q, axis=axis, method="linear"))
    else:
        raise ValueError(f"unknown quantity {quantity!r}")
    return statistic


def finite(value, what):
    value = float(value)
    if not math.isfinite(value):
        raise ValueError(f"{what} is not finite: {value}")
    return value


def as_sample(values, what):
    a = np.asarray(values, dtype=float)
    if a.ndim != 1 or a.shape[0] < 2:
        raise ValueError(f"{what} must be a list of at least 2 values")
    return a


def run_job(job):
    x = as_sample(job["x"], "x")
    y = as_sample(job["y"], "y")
    statistic = make_statistic(job)
    level = float(job.get("level", 0.95))
    b = int(job["n_resamples"])
    seeds = [int(s) for s in job["seeds"]]
    if not seeds:
        raise ValueError("a job needs at least one seed")
    estimate = finite(statistic(x, y), "estimate")
    out = {"estimate": estimate, "z0": [], "standard_error": []}
    for method in ("percentile", "basic", "bca"):
        out[method] = {"low": [], "high": []}
    first_replicates = None
    for seed in seeds:
        res = stats.bootstrap((x, y), statistic, n_resamples=b, vectorized=True,
                              method="percentile", confidence_level=level,
                              random_state=seed)
        replicates = res.bootstrap_distribution
        if first_replicates is None:
            first_replicates = replicates
        for method in ("percentile", "basic", "bca"):
            r = res if method == "percentile" else stats.bootstrap(
                (x, y), statistic, n_resamples=0, vectorized=True, method=method,
                confidence_level=level, bootstrap_result=res, random_state=seed)
            out[method]["low"].append(finite(r.confidence_interval.low, method + " low"))
            out[method]["high"].append(finite(r.confidence_interval.high, method + " high"))
        share = _resampling._percentile_of_score(replicates, estimate, axis=-1)
        out["z0"].append(finite(ndtri(share), "z0"))
        out["standard_error"].append(finite(res.standard_error, "standard error"))
    alpha = (1 - level) / 2
    _, _, a_hat = _resampling._bca_interval((x, y), statistic, axis=-1, alpha=alpha,
                                            theta_hat_b=first_replicates, batch=None)
    out["a_hat"] = finite(a_hat, "a_hat")
    return out


def main():
    request = json.load(sys.stdin)
    answer = {"jobs": [run_job(job) for job in request.get("jobs", [])]}
    json.dump(answer, sys.stdout)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
