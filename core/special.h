// special.h: the few special functions the engine needs, in double precision.
//
// Purpose. Interval ends for Monte Carlo p-values (Clopper–Pearson, from the
// beta quantile) and, for bootstrap intervals, the normal CDF and quantile.
// Deterministic, no global state, thread-safe.
//
// Accuracy targets (checked against SciPy in tests/reference): relative error
// below 1e-12 for normal_cdf / normal_quantile on (1e-300, 1 - 1e-16), and
// below 1e-10 for the regularized incomplete beta and its inverse for shape
// parameters in [1e-3, 1e7]. For the inverse the relative error is that of
// the returned x; a quantile below the smallest positive double is returned
// as 0. Shapes outside [1e-3, 1e7] still give finite answers in [0, 1], with
// accuracy degrading gradually (shapes of 1e12 and more also get slow: the
// continued fraction needs about sqrt(shape) terms).
//
// Arguments outside the stated domains never crash and never loop forever:
//   - probabilities and x are clamped to [0, 1] (normal_quantile: p <= 0 gives
//     -inf, p >= 1 gives +inf);
//   - a NaN argument gives NaN, and so does a shape parameter that is not a
//     positive finite number (a <= 0, b <= 0, infinite) — there is no value to
//     clamp such a shape to, and NaN is what SciPy returns there too;
//   - clopper_pearson never returns NaN; see its comment.
#pragma once

#include <cstdint>

namespace plumbline {

// Standard normal CDF Phi(x). Phi(-inf) = 0, Phi(+inf) = 1, NaN gives NaN.
double normal_cdf(double x);

// Phi^{-1}(p) for 0 < p < 1; -inf at p <= 0 and +inf at p >= 1; NaN gives NaN.
double normal_quantile(double p);

// Regularized incomplete beta I_x(a, b) for a, b > 0 and 0 <= x <= 1.
// x below 0 counts as 0 (result 0), x above 1 as 1 (result 1). NaN in any
// argument, or a shape that is not positive and finite, gives NaN.
double incomplete_beta(double a, double b, double x);

// The x with I_x(a, b) = p, for a, b > 0 and 0 <= p <= 1. p <= 0 gives 0 and
// p >= 1 gives 1. NaN in any argument, or a shape that is not positive and
// finite, gives NaN.
double beta_quantile(double p, double a, double b);

// Clopper–Pearson (1934) interval for a binomial proportion from k successes
// in n trials at confidence `level` (e.g. 0.99): [lower, upper] with
// lower = 0 when k == 0 and upper = 1 when k == n. Otherwise, with
// alpha = (1 - level) / 2, lower is the alpha quantile of Beta(k, n - k + 1)
// and upper the 1 - alpha quantile of Beta(k + 1, n - k).
// REQUIRES: k <= n, n >= 1, 0 < level < 1.
// Outside that, the result is still finite and inside [0, 1]: n == 0 or a
// NaN level gives [0, 1] (nothing is known); k > n is treated as k == n;
// level is clamped to [0, 1], so level >= 1 gives [0, 1] and level <= 0 the
// interval between the medians of the two beta distributions.
struct proportion_interval {
  double lower;
  double upper;
};
proportion_interval clopper_pearson(uint64_t k, uint64_t n, double level);

}  // namespace plumbline
