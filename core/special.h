// special.h: the few special functions the engine needs, in double precision.
//
// Purpose. Interval ends for Monte Carlo p-values (Clopper–Pearson, from the
// beta quantile) and, for bootstrap intervals, the normal CDF and quantile.
// Deterministic, no global state, thread-safe.
//
// Accuracy targets (checked against SciPy in tests/reference): relative error
// below 1e-12 for normal_cdf / normal_quantile on (1e-300, 1 - 1e-16), and
// below 1e-10 for the regularized incomplete beta and its inverse for shape
// parameters in [1e-3, 1e7].
#pragma once

#include <cstdint>

namespace plumbline {

// Standard normal CDF Phi(x).
double normal_cdf(double x);

// Phi^{-1}(p) for 0 < p < 1; -inf at p == 0 and +inf at p == 1.
double normal_quantile(double p);

// Regularized incomplete beta I_x(a, b) for a, b > 0 and 0 <= x <= 1.
double incomplete_beta(double a, double b, double x);

// The x with I_x(a, b) = p, for a, b > 0 and 0 <= p <= 1.
double beta_quantile(double p, double a, double b);

// Clopper–Pearson (1934) interval for a binomial proportion from k successes
// in n trials at confidence `level` (e.g. 0.99): [lower, upper] with
// lower = 0 when k == 0 and upper = 1 when k == n.
// REQUIRES: k <= n, n >= 1, 0 < level < 1.
struct proportion_interval {
  double lower;
  double upper;
};
proportion_interval clopper_pearson(uint64_t k, uint64_t n, double level);

}  // namespace plumbline
