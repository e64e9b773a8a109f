#!/usr/bin/python3
"""Side-by-side benchmark: plumbline's bootstrap intervals against SciPy.

The same work as scipy.stats.bootstrap for two independent samples: the
difference of means, n = m in {50, 500, 5000}, B = 9999, percentile and BCa
intervals, in one run; prints both times and the ratio SciPy / plumbline.

Targets (single thread), from the project's benchmark plan:
  ratio >= 6 at n = m = 500 (both methods)
  <= 1.0 ns per drawn bootstrap index

What is divided by what: a plumbline time is one whole engine run (input
checks, the windows' sorts and dependence summaries, B resamples, the sort of
the replicates, for BCa the jackknife); "ns/index" is that time over
B * (n + m), the bootstrap indices drawn. Times are CPU time of the process
(plumbline: its thread's CPU clock; SciPy: time.process_time()), the fastest
of several runs; the machine is shared, and CPU time leaves out the time a
run spends descheduled. Wall times are printed beside them. The load average
is printed before and after.

Usage: /usr/bin/python3 tests/bench/bootstrap_bench.py BUILD_DIR [--quick]
                                                        [--kernel K]
--kernel (automatic, avx2, generic) is passed to plumbline_bench_bootstrap.
"""
import json
import os
import subprocess
import sys
import time

import numpy as np
from scipy import stats


def scipy_time(method, n, resamples, reps):
    rng = np.random.default_rng(777 + n)
    x = np.round(rng.normal(0, 1, n), 3)
    y = np.round(rng.normal(0.1, 1, n), 3)

    def statistic(a, b, axis):
        return np.mean(b, axis=axis) - np.mean(a, axis=axis)

    best_cpu = best_wall = float("inf")
    for _ in range(reps):
        wall0, cpu0 = time.perf_counter(), time.process_time()
        stats.bootstrap((x, y), statistic, vectorized=True, n_resamples=resamples,
                        method="BCa" if method == "bca" else method, random_state=1)
        best_cpu = min(best_cpu, time.process_time() - cpu0)
        best_wall = min(best_wall, time.perf_counter() - wall0)
    return best_cpu, best_wall


def load():
    return "load average %.2f %.2f %.2f" % os.getloadavg()


def main():
    args = sys.argv[1:]
    if not args:
        sys.exit("usage: bootstrap_bench.py BUILD_DIR [--quick] [--kernel K]")
    build = args[0]
    quick = "--quick" in args[1:]
    extra = ["--quick"] if quick else []
    if "--kernel" in args[1:]:
        extra += ["--kernel", args[args.index("--kernel") + 1]]
    print(load(), "(before)")
    cmd = [build + "/tests/bench/plumbline_bench_bootstrap"] + extra
    ours = [json.loads(line) for line in subprocess.run(
        cmd, check=True, capture_output=True, text=True).stdout.splitlines()]
    print("plumbline kernel:", ours[0]["kernel"] if ours else "?")
    print("ns/index = plumbline CPU seconds / (B * (n + m)), the bootstrap indices drawn")
    print(f"{'method':<11} {'n=m':>6} {'B':>6} {'plumbline s':>12} {'ns/index':>9} "
          f"{'SciPy s':>9} {'ratio':>7} {'wall ratio':>11}")
    results = []
    for row in ours:
        if quick and row["n"] > 500:
            continue
        reps = 1 if (quick or row["n"] >= 5000) else 5
        theirs, theirs_wall = scipy_time(row["method"], row["n"], row["resamples"], reps)
        ratio = theirs / row["seconds"]
        results.append(dict(row, scipy_seconds=theirs, ratio=ratio))
        print(f"{row['method']:<11} {row['n']:>6} {row['resamples']:>6} {row['seconds']:>12.4f} "
              f"{row['ns_per_index']:>9.3f} {theirs:>9.3f} {ratio:>7.1f} "
              f"{theirs_wall / row['wall_seconds']:>11.1f}", flush=True)
    print("\ntargets:")
    for r in results:
        if r["n"] == 500:
            verdict = "met" if r["ratio"] >= 6 else "NOT met"
            print(f"  {r['method']} n=m=500: SciPy/plumbline {r['ratio']:.1f} (target >= 6): "
                  f"{verdict}")
            verdict = "met" if r["ns_per_index"] <= 1.0 else "NOT met"
            print(f"  {r['method']} n=m=500: {r['ns_per_index']:.3f} ns per drawn index "
                  f"(target <= 1.0): {verdict}")
    print(load(), "(after)")


if __name__ == "__main__":
    main()
