// special.cc: normal CDF and quantile, regularized incomplete beta and its
// inverse, Clopper–Pearson intervals.
//
// Purpose. The numerical kernels behind core/special.h, in double precision,
// accurate in the far tails that Monte Carlo p-value intervals reach.
//
// Thread-safety. Every function is pure: no static mutable state. The log-gamma
// calls use glibc's reentrant lgamma_r (std::lgamma writes the global
// `signgam`, a data race when called from several threads).
//
// Design note.
//   normal_cdf       0.5 * erfc(-x / sqrt 2), which keeps full relative
//                    accuracy in the lower tail (no 1 - small cancellation).
//   normal_quantile  Wichura's AS241 (PPND16), Applied Statistics 37 (1988)
//                    477-484: rational approximations with relative error
//                    about 1e-16 for min(p, 1 - p) down to 1e-300.
//   incomplete_beta  I_x(a, b) = x^a y^b / B(a, b) / f, y = 1 - x, with f the
//                    even part of the continued fraction of Numerical Recipes
//                    (6.4.5) in the form of DiDonato & Morris (ACM TOMS 18,
//                    1992, routine BFRAC), evaluated by the modified Lentz
//                    method. It is used where it converges fast, x < (a + 1) /
//                    (a + b + 2), and through I_x(a, b) = 1 - I_y(b, a)
//                    elsewhere. Its terms use lambda = a - (a + b) x = (a + b) y
//                    - b, formed from whichever of x and y is exact, so none
//                    is a difference of nearly equal numbers. The prefactor is
//                    formed in log space; for a, b >= 10, after DiDonato &
//                    Morris (routine BRCOMP), as
//                      sqrt(ab / (2 pi (a + b))) exp(-a rlog1(-lambda / a)
//                        - b rlog1(lambda / b)) exp(d(a + b) - d(a) - d(b)),
//                    rlog1(t) = t - log(1 + t), d the Stirling series remainder,
//                    which has no large cancelling terms even for shapes of
//                    1e7. I and 1 - I are also kept as logarithms, so the
//                    quantile iteration sees the tails before they underflow.
//   beta_quantile    Newton's method on log I (or log(1 - I) when p > 1/2) in
//                    the variable log x (or log(1 - x) when x > 1/2), where the
//                    tails are close to straight lines, inside a bracket [lo,
//                    hi] that every evaluation shrinks. A step that leaves the
//                    bracket is replaced by bisection, geometric near 0 and 1;
//                    after 100 Newton steps only bisection is used. The start
//                    is the approximation of Numerical Recipes (3rd ed.) 6.4,
//                    invbetai. Iteration stops at a relative step of 4 eps, when
//                    the steps stall at the rounding level of the residual, or
//                    when lo and hi are adjacent doubles.
#include "core/special.h"

#include <math.h>  // lgamma_r (glibc)

#include <algorithm>
#include <array>
#include <cmath>
#include <cstddef>
#include <limits>

namespace plumbline {

namespace {

constexpr double nan_value = std::numeric_limits<double>::quiet_NaN();
constexpr double infinity = std::numeric_limits<double>::infinity();
constexpr double epsilon = std::numeric_limits<double>::epsilon();
constexpr double log_sqrt_2pi = 0.91893853320467274178032973640562;  // log(sqrt(2 pi))
constexpr double sqrt1_2 = 0.70710678118654752440084436210485;       // 1 / sqrt(2)

// Shapes at or above this use the Stirling form of the beta prefactor.
constexpr double large_shape = 10.0;

double log_gamma(double z) {
#if defined(__GLIBC__)
  int sign = 0;
  return ::lgamma_r(z, &sign);
#else
  // Elsewhere std::lgamma is used; on some C libraries it writes `signgam`.
  return std::lgamma(z);
#endif
}

// c[0] + c[1] t + ... + c[n-1] t^(n-1) by Horner's rule.
template <std::size_t n>
double polynomial(const std::array<double, n>& c, double t) {
  double sum = c[n - 1];
  for (std::size_t i = n - 1; i-- > 0;)
    sum = sum * t + c[i];
  return sum;
}

// log Gamma(z) - [(z - 1/2) log z - z + log sqrt(2 pi)], the Stirling series
// (Abramowitz & Stegun 6.1.41; equation number from memory) for z >= 10, where the first omitted
// term is below 3e-17.
double stirling_correction(double z) {
  // B_2k / (2k (2k - 1)) for k = 1..8.
  static constexpr std::array<double, 8> c = {1.0 / 12,    -1.0 / 360,      1.0 / 1260,
                                              -1.0 / 1680, 1.0 / 1188,      -691.0 / 360360,
                                              1.0 / 156,   -3617.0 / 122400};
  const double r = 1.0 / z;
  return r * polynomial(c, r * r);
}

// t - log(1 + t) for t >= -1, given also log(1 + t) formed without rounding
// 1 + t (used when t < -1/2). For |t| <= 1/2 a series: with u = t / (2 + t),
// log(1 + t) = 2 atanh(u), so t - log(1 + t) = 2u^2/(1-u) - 2u^3 (1/3 + u^2/5 + ...).
double rlog1(double t, double log_1p_t) {
  if (t < -0.5) return t - log_1p_t;
  if (t > 0.5) return t - std::log1p(t);
  const double u = t / (2.0 + t);  // |u| <= 1/3
  const double u2 = u * u;
  double sum = 0.0;
  double power = 1.0;
  for (int k = 1; k <= 40; ++k) {
    const double term = power / (2 * k + 1);
    sum += term;
    if (term < 1e-17 * sum) break;
    power *= u2;
  }
  return 2.0 * u2 / (1.0 - u) - 2.0 * u2 * u * sum;
}

// log B(a, b) for min(a, b) < large_shape (the case the prefactor needs it in).
// With b >= large_shape, log Gamma(b) - log Gamma(a + b) comes from the
// Stirling form, so no two large logarithms are subtracted.
double log_beta_small(double a, double b) {
  if (a > b) std::swap(a, b);
  if (b < large_shape) return log_gamma(a) + log_gamma(b) - log_gamma(a + b);
  const double s = a + b;
  const double log_gamma_ratio = -(b - 0.5) * std::log1p(a / b) - a * std::log(s) + a +
                                 stirling_correction(b) - stirling_correction(s);
  return log_gamma(a) + log_gamma_ratio;
}

// log x and log y where x + y = 1 and the smaller of the two is exact.
struct log_pair {
  double log_x;
  double log_y;
};
log_pair log_both(double x, double y) {
  if (x <= y) return {std::log(x), std::log1p(-x)};
  return {std::log1p(-y), std::log(y)};
}

// lambda = a - (a + b) x = (a + b) y - b, to a small multiple of eps |lambda|:
// a + b is split exactly into s + e (Knuth's two-sum) and the product is
// formed with one rounding from whichever of x, y is exact.
double beta_lambda(double a, double b, double x, double y) {
  const double s = a + b;
  const double bv = s - a;
  const double e = (a - (s - bv)) + (b - bv);
  if (x <= y) return std::fma(-s, x, a) - e * x;
  return std::fma(s, y, -b) + e * y;
}

// log of x^a y^b / B(a, b), y = 1 - x, with the smaller of x, y exact.
double log_prefactor(double a, double b, double x, double y, double lambda) {
  if (x <= 0.0 || y <= 0.0) return -infinity;
  if (a < large_shape || b < large_shape) {
    const log_pair l = log_both(x, y);
    return a * l.log_x + b * l.log_y - log_beta_small(a, b);
  }
  // x / x0 = 1 - lambda / a and y / y0 = 1 + lambda / b, x0 = a / (a + b).
  const double s = a + b;
  const log_pair l = log_both(x, y);
  const double deviance = a * rlog1(-lambda / a, l.log_x + std::log(s / a)) +
                          b * rlog1(lambda / b, l.log_y + std::log(s / b));
  return -deviance + 0.5 * std::log(a / s * b) - log_sqrt_2pi + stirling_correction(s) -
         stirling_correction(a) - stirling_correction(b);
}

// The even part of the continued fraction of I_x(a, b), in the form of
// DiDonato & Morris (1992, routine BFRAC): I_x(a, b) = prefactor / f with
// f = b0 + a1 / (b1 + a2 / (b2 + ...)),
//   b0 = a (lambda + 1) / (a + 1),
//   am = (a + m - 1)(a + b + m - 1) m (b - m) x^2 / (a + 2m - 1)^2,
//   bm = m + m (b - m) x / (a + 2m - 1) + (a + m)(lambda + 1 + m (2 - x)) / (a + 2m + 1).
// With lambda passed in, no term is formed as 1 - x or as a difference of
// large numbers. Evaluated by the modified Lentz method (Thompson & Barnett
// 1986). Used for x < (a + 1) / (a + b + 2), where lambda + 1 > 2x > 0; about
// sqrt(max(a, b)) terms are needed near that point, far fewer elsewhere.
double beta_fraction(double a, double b, double x, double lambda) {
  constexpr double tiny = 1e-300;
  constexpr int max_terms = 1000000;
  double f = a * (lambda + 1.0) / (a + 1.0);
  if (f == 0.0) f = tiny;
  double c = f;
  double d = 0.0;
  for (int i = 1; i <= max_terms; ++i) {
    const double m = i;
    const double denom = a + 2.0 * m - 1.0;
    const double am = ((a + m - 1.0) / denom) * ((a + b + m - 1.0) / denom) * (m * (b - m)) * x * x;
    const double bm = m + m * (b - m) * x / denom +
                      (a + m) * (lambda + 1.0 + m * (2.0 - x)) / (a + 2.0 * m + 1.0);
    d = bm + am * d;
    if (std::fabs(d) < tiny) d = tiny;
    c = bm + am / c;
    if (std::fabs(c) < tiny) c = tiny;
    d = 1.0 / d;
    const double delta = c * d;
    f *= delta;
    if (std::fabs(delta - 1.0) <= epsilon) break;
  }
  return f;
}

// I_x(a, b) and its complement, with their logarithms and the log prefactor.
struct beta_values {
  double lower;      // I_x(a, b)
  double upper;      // 1 - I_x(a, b)
  double log_lower;  // log I_x(a, b), finite even where `lower` underflows
  double log_upper;  // log(1 - I_x(a, b))
  double log_pre;    // log x^a y^b / B(a, b)
};

// REQUIRES: a, b > 0 finite; 0 < x < 1, y = 1 - x with the smaller exact.
beta_values evaluate_beta(double a, double b, double x, double y) {
  beta_values v{};
  const double lambda = beta_lambda(a, b, x, y);
  v.log_pre = log_prefactor(a, b, x, y, lambda);
  // Rounding can push a value of nearly 1 just above it; log I <= 0 keeps
  // both I and 1 - I inside [0, 1].
  if (x < (a + 1.0) / (a + b + 2.0)) {
    v.log_lower = std::min(0.0, v.log_pre - std::log(beta_fraction(a, b, x, lambda)));
    v.lower = std::exp(v.log_lower);
    v.upper = std::max(0.0, -std::expm1(v.log_lower));  // never -0
    v.log_upper = std::log1p(-v.lower);
  } else {
    v.log_upper = std::min(0.0, v.log_pre - std::log(beta_fraction(b, a, y, -lambda)));
    v.upper = std::exp(v.log_upper);
    v.lower = std::max(0.0, -std::expm1(v.log_upper));
    v.log_lower = std::log1p(-v.upper);
  }
  return v;
}

bool valid_shape(double s) {
  return s > 0.0 && std::isfinite(s);
}

// A point between lo and hi (lo < hi, both in [0, 1]), geometric near 0 and
// near 1 so that tails many decades wide are crossed quickly. May return lo
// or hi when they are adjacent doubles.
double bisect(double lo, double hi) {
  double mid = lo + 0.5 * (hi - lo);
  if (hi <= 0.5) {
    if (lo == 0.0) {
      mid = hi * 1e-8;
    } else if (hi > 2.0 * lo) {
      mid = std::sqrt(lo) * std::sqrt(hi);
    }
  } else if (lo >= 0.5) {
    const double ylo = 1.0 - lo;  // exact
    const double yhi = 1.0 - hi;  // exact
    if (yhi == 0.0) {
      mid = 1.0 - ylo * 1e-8;
    } else if (ylo > 2.0 * yhi) {
      mid = 1.0 - std::sqrt(ylo) * std::sqrt(yhi);
    }
  }
  if (mid > lo && mid < hi) return mid;
  return lo + 0.5 * (hi - lo);
}

// Starting point for beta_quantile: Numerical Recipes (3rd ed.) 6.4, invbetai.
double beta_quantile_start(double p, double q, double a, double b) {
  if (a >= 1.0 && b >= 1.0) {
    // Abramowitz & Stegun 26.5.22, with z the upper p point of the normal.
    const double z = p < q ? -normal_quantile(p) : normal_quantile(q);
    const double al = (z * z - 3.0) / 6.0;
    const double h = 2.0 / (1.0 / (2.0 * a - 1.0) + 1.0 / (2.0 * b - 1.0));
    const double w = z * std::sqrt(al + h) / h - (1.0 / (2.0 * b - 1.0) - 1.0 / (2.0 * a - 1.0)) *
                                                     (al + 5.0 / 6.0 - 2.0 / (3.0 * h));
    return a / (a + b * std::exp(2.0 * w));
  }
  const double lna = std::log(a / (a + b));
  const double lnb = std::log(b / (a + b));
  const double t = std::exp(a * lna) / a;
  const double u = std::exp(b * lnb) / b;
  const double w = t + u;
  if (p < t / w) return std::exp((std::log(a * w) + std::log(p)) / a);
  return 1.0 - std::exp((std::log(b * w) + std::log(q)) / b);
}

// The x with I_x(a, b) = p, given p and q = 1 - p each to full precision.
double beta_quantile_impl(double p, double q, double a, double b) {
  if (p <= 0.0) return 0.0;
  if (q <= 0.0) return 1.0;
  const bool lower_tail = p <= q;
  const double log_target = lower_tail ? std::log(p) : std::log(q);

  double lo = 0.0;  // I(lo) <= p
  double hi = 1.0;  // I(hi) >= p
  double x = beta_quantile_start(p, q, a, b);
  if (!(x > 0.0 && x < 1.0)) x = bisect(lo, hi);
  constexpr int max_newton = 100;
  int newton_steps = 0;
  double last_step = infinity;

  for (int iteration = 0; iteration < 3000; ++iteration) {
    const double y = 1.0 - x;
    const beta_values v = evaluate_beta(a, b, x, y);
    // residual > 0: I(x) > p, so x is too large.
    const double residual = lower_tail ? v.log_lower - log_target : log_target - v.log_upper;
    if (residual == 0.0) return x;
    if (residual > 0.0) {
      hi = x;
    } else {
      lo = x;
    }
    if (!(std::nextafter(lo, 1.0) < hi)) break;

    // Newton step in log x (x <= 1/2) or in log(1 - x), on the log residual:
    // d log I / d log x = x f / I, with f = prefactor / (x y) the density, and
    // likewise for log(1 - I) and log(1 - x).
    double candidate = nan_value;
    double step = infinity;
    if (newton_steps < max_newton) {
      ++newton_steps;
      const log_pair l = log_both(x, y);
      const double log_cdf = lower_tail ? v.log_lower : v.log_upper;
      const bool in_log_x = x <= 0.5;
      // The residual increases with log x and decreases with log(1 - x).
      const double slope = in_log_x ? std::exp(v.log_pre - l.log_y - log_cdf)
                                    : -std::exp(v.log_pre - l.log_x - log_cdf);
      step = -residual / slope;
      if (std::isfinite(step)) candidate = in_log_x ? x * std::exp(step) : 1.0 - y * std::exp(step);
    }
    if (candidate > lo && candidate < hi) {
      // Converged: the relative change is at rounding level, or the steps
      // stopped shrinking at a level set by rounding in the residual.
      const double size = std::fabs(step);
      if (size <= 4.0 * epsilon || (size < 1e-11 && size > 0.5 * last_step)) return candidate;
      last_step = size;
      x = candidate;
    } else {
      last_step = infinity;
      x = bisect(lo, hi);
      if (!(x > lo && x < hi)) break;
    }
  }
  // The bracket collapsed to adjacent doubles (or the budget ran out).
  return lo + 0.5 * (hi - lo);
}

}  // namespace

double normal_cdf(double x) {
  if (std::isnan(x)) return x;
  return 0.5 * std::erfc(-x * sqrt1_2);
}

double normal_quantile(double p) {
  if (std::isnan(p)) return p;
  if (p <= 0.0) return -infinity;
  if (p >= 1.0) return infinity;
  // AS241 PPND16. The coefficients are those of Wichura (1988), as also
  // printed in CPython's statistics module (NormalDist.inv_cdf); lowest
  // power first.
  static constexpr std::array<double, 8> central_num = {
      3.3871328727963666080e+0, 1.3314166789178437745e+2, 1.9715909503065514427e+3,
      1.3731693765509461125e+4, 4.5921953931549871457e+4, 6.7265770927008700853e+4,
      3.3430575583588128105e+4, 2.5090809287301226727e+3};
  static constexpr std::array<double, 8> central_den = {1.0,
                                                        4.2313330701600911252e+1,
                                                        6.8718700749205790830e+2,
                                                        5.3941960214247511077e+3,
                                                        2.1213794301586595867e+4,
                                                        3.9307895800092710610e+4,
                                                        2.8729085735721942674e+4,
                                                        5.2264952788528545610e+3};
  static constexpr std::array<double, 8> near_num = {
      1.42343711074968357734e+0, 4.63033784615654529590e+0, 5.76949722146069140550e+0,
      3.64784832476320460504e+0, 1.27045825245236838258e+0, 2.41780725177450611770e-1,
      2.27238449892691845833e-2, 7.74545014278341407640e-4};
  static constexpr std::array<double, 8> near_den = {1.0,
                                                     2.05319162663775882187e+0,
                                                     1.67638483018380384940e+0,
                                                     6.89767334985100004550e-1,
                                                     1.48103976427480074590e-1,
                                                     1.51986665636164571966e-2,
                                                     5.47593808499534494600e-4,
                                                     1.05075007164441684324e-9};
  static constexpr std::array<double, 8> far_num = {
      6.65790464350110377720e+0, 5.46378491116411436990e+0, 1.78482653991729133580e+0,
      2.96560571828504891230e-1, 2.65321895265761230930e-2, 1.24266094738807843860e-3,
      2.71155556874348757815e-5, 2.01033439929228813265e-7};
  static constexpr std::array<double, 8> far_den = {1.0,
                                                    5.99832206555887937690e-1,
                                                    1.36929880922735805310e-1,
                                                    1.48753612908506148525e-2,
                                                    7.86869131145613259100e-4,
                                                    1.84631831751005468180e-5,
                                                    1.42151175831644588870e-7,
                                                    2.04426310338993978564e-15};
  const double q = p - 0.5;
  if (std::fabs(q) <= 0.425) {
    const double r = 0.180625 - q * q;
    return q * polynomial(central_num, r) / polynomial(central_den, r);
  }
  const double r = std::sqrt(-std::log(q < 0.0 ? p : 1.0 - p));
  const double x = r <= 5.0 ? polynomial(near_num, r - 1.6) / polynomial(near_den, r - 1.6)
                            : polynomial(far_num, r - 5.0) / polynomial(far_den, r - 5.0);
  return q < 0.0 ? -x : x;
}

double incomplete_beta(double a, double b, double x) {
  if (!valid_shape(a) || !valid_shape(b) || std::isnan(x)) return nan_value;
  if (x <= 0.0) return 0.0;
  if (x >= 1.0) return 1.0;
  return evaluate_beta(a, b, x, 1.0 - x).lower;
}

double beta_quantile(double p, double a, double b) {
  if (!valid_shape(a) || !valid_shape(b) || std::isnan(p)) return nan_value;
  if (p <= 0.0) return 0.0;
  if (p >= 1.0) return 1.0;
  return beta_quantile_impl(p, 1.0 - p, a, b);
}

proportion_interval clopper_pearson(uint64_t k, uint64_t n, double level) {
  if (n == 0 || std::isnan(level)) return {0.0, 1.0};
  if (k > n) k = n;
  level = std::clamp(level, 0.0, 1.0);
  const double alpha = 0.5 * (1.0 - level);  // each tail
  const double kd = static_cast<double>(k);
  const double nd = static_cast<double>(n);
  proportion_interval ci{0.0, 1.0};
  if (k > 0) ci.lower = beta_quantile_impl(alpha, 1.0 - alpha, kd, nd - kd + 1.0);
  if (k < n) ci.upper = beta_quantile_impl(1.0 - alpha, alpha, kd + 1.0, nd - kd);
  return ci;
}

}  // namespace plumbline
