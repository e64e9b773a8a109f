#!/usr/bin/python3
"""Side-by-side benchmark: plumbline's permutation engine against SciPy.

Runs the same work as scipy.stats.permutation_test (two independent samples,
n = m in {50, 500, 5000}, B = 9999 resamples, statistics mean-diff and ks) in
one run, and prints the time of each and the ratio SciPy / plumbline.

Targets (single thread), from the project's benchmark plan:
  mean-diff at n = m = 500: ratio >= 25
  ks        at n = m = 500: ratio >= 40
  mean-diff: <= 1.2 ns per resampled element (one drawn value)

What is divided by what: a plumbline time is one whole engine run (input
checks, sort, observed statistic, B resamples, p-value); "ns/elem" is that
time over B * k, k = the smaller group's size (the values drawn into the
resampled group each time, here k = n). Times are CPU time of the process
(plumbline: its thread's CPU clock; SciPy: time.process_time()), the fastest
of several runs (one run for the slow SciPy cases); the machine is shared,
and CPU time leaves out the time a run spends descheduled. Wall times are
printed beside them. The load average is printed before and after.

Usage: /usr/bin/python3 tests/bench/permutation_bench.py BUILD_DIR [--quick]
                                                          [--kernel K]
Both sides draw normal-like data of the same size, rounded to 0.001 as an
instrument would; only the timing is compared. --kernel (automatic, avx2,
generic) is passed to plumbline_bench_permutation.
"""
import json
import os
import subprocess
import sys
import time
import warnings

import numpy as np
from scipy import stats


def scipy_time(test, n, resamples, reps):
    rng = np.random.default_rng(12345 + n)
    x = np.round(rng.normal(0, 1, n), 3)
    y = np.round(rng.normal(0.1, 1, n), 3)
    if test == "mean-diff":
        def statistic(a, b, axis):
            return np.abs(np.mean(b, axis=axis) - np.mean(a, axis=axis))
        vectorized = True
    else:
        def statistic(a, b):
            return stats.ks_2samp(a, b).statistic
        vectorized = False
    best_cpu = best_wall = float("inf")
    for _ in range(reps):
        wall0, cpu0 = time.perf_counter(), time.process_time()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            stats.permutation_test((x, y), statistic, permutation_type="independent",
                                   vectorized=vectorized, n_resamples=resamples,
                                   alternative="greater", random_state=1)
        best_cpu = min(best_cpu, time.process_time() - cpu0)
        best_wall = min(best_wall, time.perf_counter() - wall0)
    return best_cpu, best_wall


def load():
    return "load average %.2f %.2f %.2f" % os.getloadavg()


def main():
    args = sys.argv[1:]
    if not args:
        sys.exit("usage: permutation_bench.py BUILD_DIR [--quick] [--kernel K]")
    build = args[0]
    quick = "--quick" in args[1:]
    extra = ["--quick"] if quick else []
    if "--kernel" in args[1:]:
        extra += ["--kernel", args[args.index("--kernel") + 1]]
    print(load(), "(before)")
    cmd = [build + "/tests/bench/plumbline_bench_permutation"] + extra
    ours = [json.loads(line) for line in subprocess.run(
        cmd, check=True, capture_output=True, text=True).stdout.splitlines()]
    print("plumbline kernel:", ours[0]["kernel"] if ours else "?")
    print("ns/elem = plumbline CPU seconds / (B * k), k = smaller group = values drawn "
          "per resample")
    print(f"{'test':<10} {'n=m':>6} {'B':>6} {'plumbline s':>12} {'ns/elem':>8} "
          f"{'SciPy s':>9} {'ratio':>8} {'wall ratio':>11}")
    results = []
    for row in ours:
        if quick and row["n"] > 500:
            continue
        reps = 1 if (quick or row["n"] >= 5000 or row["test"] == "ks") else 5
        theirs, theirs_wall = scipy_time(row["test"], row["n"], row["resamples"], reps)
        ratio = theirs / row["seconds"]
        results.append(dict(row, scipy_seconds=theirs, ratio=ratio))
        print(f"{row['test']:<10} {row['n']:>6} {row['resamples']:>6} {row['seconds']:>12.4f} "
              f"{row['ns_per_element']:>8.3f} {theirs:>9.3f} {ratio:>8.1f} "
              f"{theirs_wall / row['wall_seconds']:>11.1f}", flush=True)
    targets = [("mean-diff", 500, "ratio", 25.0), ("ks", 500, "ratio", 40.0)]
    print("\ntargets:")
    for test, n, key, goal in targets:
        for r in results:
            if r["test"] == test and r["n"] == n:
                verdict = "met" if r[key] >= goal else "NOT met"
                print(f"  {test} n=m={n}: SciPy/plumbline {r[key]:.1f} (target >= {goal:g}): "
                      f"{verdict}")
    for r in results:
        if r["test"] == "mean-diff" and r["n"] == 500:
            verdict = "met" if r["ns_per_element"] <= 1.2 else "NOT met"
            print(f"  mean-diff n=m=500: {r['ns_per_element']:.3f} ns per resampled element "
                  f"(target <= 1.2): {verdict}")
    print(load(), "(after)")


if __name__ == "__main__":
    main()
