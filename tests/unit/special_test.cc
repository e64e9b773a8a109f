// special_test.cc: core/special.h against mathematical facts.
//
// Closed forms, symmetries and limits that hold exactly, so every expected
// value here is computed from its formula with the C library (pow, exp,
// expm1, log1p, asin, sin), never taken from core/special.cc. Comparisons
// with SciPy over wide grids are in tests/reference/special_scipy_test.cc.
// Tolerances are the accuracy targets of core/special.h (relative 1e-12 for
// the normal functions, 1e-10 for the beta functions) unless a check says
// otherwise.
#include "core/special.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <cstdint>
#include <limits>
#include <vector>

namespace {

using plumbline::beta_quantile;
using plumbline::clopper_pearson;
using plumbline::incomplete_beta;
using plumbline::normal_cdf;
using plumbline::normal_quantile;

constexpr double normal_tolerance = 1e-12;
constexpr double beta_tolerance = 1e-10;
constexpr double inf = std::numeric_limits<double>::infinity();
constexpr double nan = std::numeric_limits<double>::quiet_NaN();
const double pi = std::acos(-1.0);

double relative_error(double got, double want) {
  if (got == want) return 0.0;
  return std::fabs(got - want) / std::fabs(want);
}

const std::vector<double> shapes = {0.001, 0.01, 0.5, 1.0, 3.0, 1e3, 1e5, 1e7};
const std::vector<double> probabilities = {1e-300, 1e-100, 1e-10, 0.025, 0.5, 0.975, 1.0 - 1e-12};

TEST_CASE("normal_cdf is one half at zero and symmetric about it", "[core][special]") {
  CHECK(normal_cdf(0.0) == 0.5);
  for (double x : {1e-10, 0.3, 1.0, 2.5, 6.0}) {
    INFO("x = " << x);
    // Phi(-x) + Phi(x) = 1.
    CHECK(std::fabs(normal_cdf(-x) + normal_cdf(x) - 1.0) <= 2e-16);
  }
  // Phi(-1.959963984540054) = 0.025: the two-sided 95% normal critical value
  // (handbook tables give 1.959964; the digits are from memory).
  CHECK(relative_error(normal_cdf(-1.959963984540054), 0.025) <= 1e-13);
  CHECK(normal_cdf(-inf) == 0.0);
  CHECK(normal_cdf(inf) == 1.0);
  CHECK(std::isnan(normal_cdf(nan)));
}

TEST_CASE("normal_cdf keeps full relative accuracy in the far lower tail", "[core][special]") {
  // Mills-ratio asymptotic series, Phi(-x) = phi(x) / x * (1 - 1/x^2 + 3/x^4
  // - 15/x^6 + 105/x^8 - 945/x^10 + ...) (Abramowitz & Stegun 26.2.12; from
  // memory). For x >= 20 the first omitted term is below 2.6e-12 relative.
  for (double x : {20.0, 25.0, 30.0, 37.0}) {
    const double r = 1.0 / (x * x);
    const double series =
        1.0 - r * (1.0 - 3.0 * r * (1.0 - 5.0 * r * (1.0 - 7.0 * r * (1.0 - 9.0 * r))));
    const double expected = std::exp(-0.5 * x * x) / std::sqrt(2.0 * pi) / x * series;
    INFO("x = " << x);
    CHECK(relative_error(normal_cdf(-x), expected) <= 1e-11);
  }
}

TEST_CASE("normal_quantile inverts normal_cdf", "[core][special]") {
  CHECK(normal_quantile(0.5) == 0.0);
  // Round trips x -> Phi(x) -> x over the lower tail, where Phi(x) carries
  // full information about x (in the upper tail Phi(x) rounds towards 1).
  for (double x = -37.0; x <= 1.0; x += 0.37) {
    INFO("x = " << x);
    CHECK(std::fabs(normal_quantile(normal_cdf(x)) - x) <= 1e-13 * std::fabs(x) + 1e-15);
  }
  // Phi^{-1}(1 - p) = -Phi^{-1}(p), for p whose complement is exact.
  for (double p : {0.25, 0.125, 1.0 / 1024, 0.0625 + 0.03125}) {
    INFO("p = " << p);
    CHECK(relative_error(normal_quantile(1.0 - p), -normal_quantile(p)) <= normal_tolerance);
  }
  // The 97.5% point, 1.959963984540054 (from memory, as above).
  CHECK(relative_error(normal_quantile(0.975), 1.959963984540054) <= normal_tolerance);
  // Strictly increasing across the switch points of the approximation.
  double previous = -inf;
  for (double p :
       {1e-300, 1e-20, 0.0749, 0.075, 0.0751, 0.3, 0.5, 0.9249, 0.925, 0.9251, 1.0 - 1e-12}) {
    const double x = normal_quantile(p);
    INFO("p = " << p);
    CHECK(x > previous);
    previous = x;
  }
}

TEST_CASE("normal_quantile maps the ends and invalid arguments to documented values",
          "[core][special]") {
  CHECK(normal_quantile(0.0) == -inf);
  CHECK(normal_quantile(1.0) == inf);
  CHECK(normal_quantile(-0.5) == -inf);
  CHECK(normal_quantile(1.5) == inf);
  CHECK(std::isnan(normal_quantile(nan)));
  // Subnormal probabilities still give finite quantiles.
  CHECK(std::isfinite(normal_quantile(std::numeric_limits<double>::denorm_min())));
}

TEST_CASE("incomplete_beta matches its closed forms", "[core][special]") {
  const std::vector<double> xs = {1e-300, 1e-12, 1e-5, 0.01, 0.25, 0.5, 0.8, 0.999999, 1.0 - 1e-12};
  for (double x : xs) {
    INFO("x = " << x);
    // I_x(1, 1) = x: the uniform distribution.
    CHECK(relative_error(incomplete_beta(1.0, 1.0, x), x) <= beta_tolerance);
    // I_x(2, 2) = 3x^2 - 2x^3 = P(Binomial(3, x) >= 2).
    CHECK(relative_error(incomplete_beta(2.0, 2.0, x), x * x * (3.0 - 2.0 * x)) <= beta_tolerance);
    // I_x(1/2, 1/2) = (2 / pi) asin(sqrt x): the arcsine distribution.
    CHECK(relative_error(incomplete_beta(0.5, 0.5, x), 2.0 / pi * std::asin(std::sqrt(x))) <=
          beta_tolerance);
    for (double s : shapes) {
      INFO("shape = " << s);
      // I_x(a, 1) = x^a.
      const double power = std::pow(x, s);
      if (power >= std::numeric_limits<double>::min()) {
        CHECK(relative_error(incomplete_beta(s, 1.0, x), power) <= beta_tolerance);
      }
      // I_x(1, b) = 1 - (1 - x)^b.
      const double complement_power = -std::expm1(s * std::log1p(-x));
      CHECK(relative_error(incomplete_beta(1.0, s, x), complement_power) <= beta_tolerance);
    }
  }
  // I_x(3, 8) = P(Binomial(10, x) >= 3), summed term by term.
  for (double x : {0.01, 0.2, 0.3, 0.6}) {
    double sum = 0.0;
    double choose = 120.0;  // C(10, 3)
    for (int j = 3; j <= 10; ++j) {
      sum += choose * std::pow(x, j) * std::pow(1.0 - x, 10 - j);
      choose = choose * (10 - j) / (j + 1);
    }
    INFO("x = " << x);
    CHECK(relative_error(incomplete_beta(3.0, 8.0, x), sum) <= 1e-12);
  }
}

TEST_CASE("incomplete_beta is one half at the centre of every symmetric beta", "[core][special]") {
  for (double a : {0.001, 0.5, 7.0, 1e4, 1e7}) {
    INFO("a = b = " << a);
    CHECK(relative_error(incomplete_beta(a, a, 0.5), 0.5) <= beta_tolerance);
  }
}

TEST_CASE("incomplete_beta obeys I_x(a, b) + I_(1-x)(b, a) = 1", "[core][special]") {
  // Dyadic x, so that 1 - x is exact.
  for (double x : {0.0625, 0.25, 0.5, 0.75, 0.9375}) {
    for (double a : shapes) {
      for (double b : shapes) {
        INFO("a = " << a << ", b = " << b << ", x = " << x);
        CHECK(std::fabs(incomplete_beta(a, b, x) + incomplete_beta(b, a, 1.0 - x) - 1.0) <= 1e-13);
      }
    }
  }
}

TEST_CASE("incomplete_beta increases with x from 0 to 1", "[core][special]") {
  for (double a : shapes) {
    for (double b : shapes) {
      INFO("a = " << a << ", b = " << b);
      CHECK(incomplete_beta(a, b, 0.0) == 0.0);
      CHECK(incomplete_beta(a, b, 1.0) == 1.0);
      double previous = 0.0;
      for (int i = 1; i < 200; ++i) {
        const double x = i / 200.0;
        const double v = incomplete_beta(a, b, x);
        REQUIRE(v >= previous);
        REQUIRE(v <= 1.0);
        previous = v;
      }
    }
  }
}

TEST_CASE("incomplete_beta clamps x and rejects invalid shapes with NaN", "[core][special]") {
  CHECK(incomplete_beta(2.0, 3.0, -0.5) == 0.0);
  CHECK(incomplete_beta(2.0, 3.0, 1.5) == 1.0);
  CHECK(incomplete_beta(2.0, 3.0, -inf) == 0.0);
  CHECK(incomplete_beta(2.0, 3.0, inf) == 1.0);
  CHECK(std::isnan(incomplete_beta(2.0, 3.0, nan)));
  for (double bad : {0.0, -1.0, inf, nan}) {
    INFO("bad shape = " << bad);
    CHECK(std::isnan(incomplete_beta(bad, 3.0, 0.5)));
    CHECK(std::isnan(incomplete_beta(2.0, bad, 0.5)));
  }
}

TEST_CASE("beta_quantile matches the closed-form quantiles", "[core][special]") {
  for (double p : probabilities) {
    INFO("p = " << p);
    // Uniform: x = p.
    CHECK(relative_error(beta_quantile(p, 1.0, 1.0), p) <= beta_tolerance);
    // Arcsine: x = sin^2(pi p / 2).
    const double arcsine = std::pow(std::sin(pi * p / 2.0), 2);
    CHECK(relative_error(beta_quantile(p, 0.5, 0.5), arcsine) <= beta_tolerance);
    for (double s : shapes) {
      INFO("shape = " << s);
      // Beta(a, 1): x = p^(1/a); a root below the normal range must come out
      // below 1e-300 (subnormal or 0).
      const double root = std::exp(std::log(p) / s);
      const double got = beta_quantile(p, s, 1.0);
      if (root >= std::numeric_limits<double>::min()) {
        CHECK(relative_error(got, root) <= beta_tolerance);
      } else {
        CHECK(got < 1e-300);
      }
      // Beta(1, b): x = 1 - (1 - p)^(1/b), formed without cancellation. For
      // b = 1e7 and p = 1e-300 this is 1e-307.
      const double complement_root = -std::expm1(std::log1p(-p) / s);
      CHECK(relative_error(beta_quantile(p, 1.0, s), complement_root) <= beta_tolerance);
    }
  }
}

TEST_CASE("beta_quantile and incomplete_beta undo each other for moderate shapes",
          "[core][special]") {
  // Moderate shapes keep x f(x) / I_x near 1, so a relative error in x shows
  // up at about the same size in p.
  for (double a : {0.7, 2.0, 5.0}) {
    for (double b : {0.9, 3.0, 40.0}) {
      for (double p : {1e-8, 0.01, 0.3, 0.5, 0.8, 0.99}) {
        INFO("a = " << a << ", b = " << b << ", p = " << p);
        CHECK(relative_error(incomplete_beta(a, b, beta_quantile(p, a, b)), p) <= beta_tolerance);
      }
    }
  }
}

TEST_CASE("beta_quantile increases with p and stays between 0 and 1", "[core][special]") {
  for (double a : shapes) {
    for (double b : shapes) {
      INFO("a = " << a << ", b = " << b);
      CHECK(beta_quantile(0.0, a, b) == 0.0);
      CHECK(beta_quantile(1.0, a, b) == 1.0);
      double previous = 0.0;
      for (int i = 1; i < 50; ++i) {
        const double x = beta_quantile(i / 50.0, a, b);
        REQUIRE(x >= previous);
        REQUIRE(x <= 1.0);
        previous = x;
      }
    }
  }
}

TEST_CASE("beta_quantile clamps p and rejects invalid shapes with NaN", "[core][special]") {
  CHECK(beta_quantile(-0.5, 2.0, 3.0) == 0.0);
  CHECK(beta_quantile(1.5, 2.0, 3.0) == 1.0);
  CHECK(std::isnan(beta_quantile(nan, 2.0, 3.0)));
  for (double bad : {0.0, -1.0, inf, nan}) {
    INFO("bad shape = " << bad);
    CHECK(std::isnan(beta_quantile(0.5, bad, 3.0)));
    CHECK(std::isnan(beta_quantile(0.5, 2.0, bad)));
  }
}

TEST_CASE("clopper_pearson has closed forms at k = 0 and k = n", "[core][special]") {
  // k = 0: upper = 1 - (alpha/2)^(1/n); k = n: lower = (alpha/2)^(1/n), where
  // alpha = 1 - level (Clopper & Pearson 1934; the beta quantiles of Beta(1, n)
  // and Beta(n, 1) in closed form).
  for (uint64_t n : {1ULL, 2ULL, 10ULL, 40ULL, 9999ULL, 1000000ULL}) {
    for (double level : {0.9, 0.95, 0.99, 0.999}) {
      const double log_half_alpha = std::log((1.0 - level) / 2.0);
      const double nd = static_cast<double>(n);
      INFO("n = " << n << ", level = " << level);
      const auto none = clopper_pearson(0, n, level);
      CHECK(none.lower == 0.0);
      CHECK(relative_error(none.upper, -std::expm1(log_half_alpha / nd)) <= beta_tolerance);
      const auto all = clopper_pearson(n, n, level);
      CHECK(all.upper == 1.0);
      CHECK(relative_error(all.lower, std::exp(log_half_alpha / nd)) <= beta_tolerance);
    }
  }
}

TEST_CASE("clopper_pearson intervals contain k/n, move with k and widen with the level",
          "[core][special]") {
  const uint64_t n = 9999;
  for (double level : {0.9, 0.99}) {
    double previous_lower = -1.0;
    double previous_upper = -1.0;
    for (uint64_t k = 0; k <= n; k += (k < 100 ? 1 : 997)) {
      const auto ci = clopper_pearson(k, n, level);
      const double share = static_cast<double>(k) / static_cast<double>(n);
      INFO("k = " << k << ", level = " << level);
      CHECK(ci.lower <= share);
      CHECK(ci.upper >= share);
      CHECK(ci.lower > previous_lower);
      CHECK(ci.upper > previous_upper);
      previous_lower = ci.lower;
      previous_upper = ci.upper;
      const auto wider = clopper_pearson(k, n, level + 0.009);
      CHECK(wider.lower <= ci.lower);
      CHECK(wider.upper >= ci.upper);
    }
  }
}

TEST_CASE("clopper_pearson gives finite documented answers outside its preconditions",
          "[core][special]") {
  // n == 0 or a NaN level: nothing is known.
  for (const auto& ci : {clopper_pearson(0, 0, 0.99), clopper_pearson(5, 40, nan)}) {
    CHECK(ci.lower == 0.0);
    CHECK(ci.upper == 1.0);
  }
  // k > n counts as k == n.
  const auto over = clopper_pearson(50, 40, 0.99);
  const auto full = clopper_pearson(40, 40, 0.99);
  CHECK(over.lower == full.lower);
  CHECK(over.upper == full.upper);
  // level >= 1: the whole interval.
  const auto certain = clopper_pearson(5, 40, 1.5);
  CHECK(certain.lower == 0.0);
  CHECK(certain.upper == 1.0);
  // level <= 0: between the medians of Beta(k, n - k + 1) and Beta(k + 1, n - k).
  const auto none = clopper_pearson(5, 40, -0.5);
  CHECK(none.lower == beta_quantile(0.5, 5.0, 36.0));
  CHECK(none.upper == beta_quantile(0.5, 6.0, 35.0));
  CHECK(none.lower < none.upper);
  // Counts beyond the accuracy range still give ordered, finite ends.
  const auto huge = clopper_pearson(3, uint64_t{1} << 40, 0.99);
  CHECK(huge.lower > 0.0);
  CHECK(huge.lower < huge.upper);
  CHECK(huge.upper < 1e-10);
}

}  // namespace
