// bootstrap_calibration_test.cc: Monte Carlo coverage of the drift intervals, and false alarms
// of the permutation tests on autocorrelated feeds.
//
// Seeded, bounded simulations that hold core/bootstrap.h and core/permutation.h to facts of
// statistics: the coverage of the 95 % BCa interval for a difference of means (normal, lognormal
// and quantised windows at n = m = 30, 100, 500) and of medians; the under-coverage of
// independent resampling on an AR(1) feed, and its repair by automatic block lengths (circular
// and stationary schemes); and the false-alarm rate of the mean-diff and ks permutation tests on
// two independent AR(1) windows, with single values and with automatic blocks. Every band names
// its source and its false-failure probability. Every interval uses B = 999 resamples:
// coverage is a property of the method, and B only adds Monte Carlo noise to the interval's
// ends. At B = 999 the end quantile's Monte Carlo sd is sqrt(.025 .975 / 999) / phi(1.96) =
// 0.085 in z units, which lowers the coverage by about phi(1.96) 1.96 0.085^2 = 0.08 points
// (derived, second-order expansion of 2 Phi(1.96 + e) - 1), negligible against the bands.
// Each case reports its observed rate and its CPU time with WARN.
#include <algorithm>
#include <catch2/catch.hpp>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <ctime>
#include <functional>
#include <span>
#include <string>
#include <vector>

#include "core/bootstrap.h"
#include "core/permutation.h"
#include "core/rng.h"
#include "core/statistic.h"
#include "support/generate.h"

namespace {

using plumbline::block_scheme;
using plumbline::bootstrap_engine;
using plumbline::drift_quantity;
using plumbline::exact_mode;
using plumbline::interval_method;
using plumbline::interval_options;
using plumbline::permutation_engine;
using plumbline::permutation_options;
using plumbline::rng;
using plumbline::test_kind;
using plumbline::testing::ar1_sample;
using plumbline::testing::normal;
using plumbline::testing::normal_sample;

using sample = std::vector<double>;

constexpr double nominal = 0.95;
constexpr uint64_t interval_resamples = 999;

// ---------------------------------------------------------------------------
// Helpers.
// ---------------------------------------------------------------------------

double binomial_sd(double p, int r) { return std::sqrt(p * (1 - p) / r); }

// Standard normal CDF from the C library's erfc, independent of the engine's special functions.
double std_normal_cdf(double x) { return 0.5 * std::erfc(-x / std::sqrt(2.0)); }

// CPU time of this process since construction (the suite is single-threaded).
class cpu_timer {
 public:
  double seconds() const { return static_cast<double>(std::clock() - start_) / CLOCKS_PER_SEC; }

 private:
  std::clock_t start_ = std::clock();
};

std::string fixed(double v, int digits = 3) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.*f", digits, v);
  return buf;
}

std::string percent(double v) { return fixed(100 * v, 1) + " %"; }

// Fills the reference and the recent window of one replication.
using window_maker = std::function<void(rng&, sample&, sample&)>;

struct coverage_tally {
  int replications = 0;
  int covered = 0;
  int fallbacks = 0;      // BCa fell back to the percentile interval
  int blocked = 0;        // replications that resampled blocks (block_length >= 2)
  double block_sum = 0;   // chosen block lengths
  double width_sum = 0;
  double rate() const { return static_cast<double>(covered) / replications; }
  double mean_block() const { return block_sum / replications; }
  double mean_width() const { return width_sum / replications; }
};

// Runs `replications` intervals on fresh windows and counts those that hold `truth`.
coverage_tally coverage(const window_maker& make, double truth, const interval_options& options,
                        int replications, uint64_t seed) {
  rng data(seed);
  rng resampling(seed ^ 0x9e3779b97f4a7c15ULL);
  bootstrap_engine engine;
  sample x, y;
  coverage_tally t;
  t.replications = replications;
  for (int i = 0; i < replications; ++i) {
    make(data, x, y);
    const auto r = engine.run(x, y, options, resampling);
    if (!r.ok()) FAIL("the bootstrap returned an error: " + r.err().message);
    const auto& v = r.value();
    if (v.lower <= truth && truth <= v.upper) ++t.covered;
    if (v.method_used != options.method) ++t.fallbacks;
    if (v.block_length >= 2) ++t.blocked;
    t.block_sum += v.block_length;
    t.width_sum += v.upper - v.lower;
  }
  return t;
}

std::string describe(const std::string& label, const coverage_tally& t, double seconds) {
  return label + ": coverage " + percent(t.rate()) + " (" + std::to_string(t.covered) + "/" +
         std::to_string(t.replications) + ", binomial sd " +
         fixed(100 * binomial_sd(t.rate(), t.replications), 2) + " points), mean width " +
         fixed(t.mean_width(), 4) + ", mean block length " + fixed(t.mean_block(), 2) +
         ", BCa fallbacks " + std::to_string(t.fallbacks) + ", CPU " + fixed(seconds, 2) + " s";
}

interval_options mean_diff_bca() {
  interval_options o;
  o.quantity = drift_quantity::mean_diff;
  o.method = interval_method::bca;
  o.level = nominal;
  o.resamples = interval_resamples;
  o.block_length = 1;
  return o;
}

// ---------------------------------------------------------------------------
// Populations of section 1.
// ---------------------------------------------------------------------------

// Lognormal windows exp(mu + s Z): a skewed measurement (roughness, particle counts, impurity
// levels). s = 0.5 gives a coefficient of variation of 0.53 and a skewness of 1.75
// ((e^{s^2} + 2) sqrt(e^{s^2} - 1), the lognormal's skewness: Johnson, Kotz & Balakrishnan
// 1994, ch. 14, from memory). The recent window has mu = 0.2: a 22 % rise in level and in
// spread, so the two windows' skewness does not cancel in the difference of means. True mean
// exp(mu + s^2 / 2).
constexpr double lognormal_s = 0.5;
constexpr double lognormal_mu_reference = 0.0, lognormal_mu_recent = 0.2;

double lognormal_mean(double mu, double s) { return std::exp(mu + s * s / 2); }

sample lognormal_sample(rng& g, std::size_t n, double mu, double s) {
  sample v(n);
  for (auto& x : v) x = std::exp(mu + s * normal(g));
  return v;
}

// Quantised windows: N(mu, 1) read by a gauge with a resolution of half a standard deviation
// (the coarsest the rule of ten allows: resolution at most a tenth of the 6-sd spread; common
// practice). The recent window is shifted by one grid step, so its quantised distribution is the
// reference's moved by exactly that step and the true difference of means is the step.
constexpr double grid = 0.5;
constexpr double quantised_mu = 10.13;  // off the grid, as a real process centre is

double quantise(double v) { return grid * std::round(v / grid); }

sample quantised_sample(rng& g, std::size_t n, double mu) {
  sample v(n);
  for (auto& x : v) x = quantise(mu + normal(g));
  return v;
}

// E[quantise(mu + Z)] = sum_k k h P((k - 1/2) h <= mu + Z < (k + 1/2) h), h the grid, summed
// over +-12 sd (the remaining mass is below 1e-32).
double quantised_mean(double mu) {
  const long lo = static_cast<long>(std::floor((mu - 12) / grid));
  const long hi = static_cast<long>(std::ceil((mu + 12) / grid));
  double mean = 0;
  for (long k = lo; k <= hi; ++k) {
    const double c = static_cast<double>(k) * grid;
    mean += c * (std_normal_cdf(c + grid / 2 - mu) - std_normal_cdf(c - grid / 2 - mu));
  }
  return mean;
}

enum class population { normal, lognormal, quantised };

const char* population_name(population p) {
  switch (p) {
    case population::normal: return "normal";
    case population::lognormal: return "lognormal";
    case population::quantised: return "quantised";
  }
  return "";
}

// Normal windows: reference N(10, 1), recent N(10.3, 1); true difference 0.3.
constexpr double normal_mean_reference = 10.0, normal_shift = 0.3;

window_maker maker(population p, std::size_t n) {
  switch (p) {
    case population::normal:
      return [n](rng& g, sample& x, sample& y) {
        x = normal_sample(g, n, normal_mean_reference);
        y = normal_sample(g, n, normal_mean_reference + normal_shift);
      };
    case population::lognormal:
      return [n](rng& g, sample& x, sample& y) {
        x = lognormal_sample(g, n, lognormal_mu_reference, lognormal_s);
        y = lognormal_sample(g, n, lognormal_mu_recent, lognormal_s);
      };
    case population::quantised:
      return [n](rng& g, sample& x, sample& y) {
        x = quantised_sample(g, n, quantised_mu);
        y = quantised_sample(g, n, quantised_mu + grid);
      };
  }
  return {};
}

double true_mean_difference(population p) {
  switch (p) {
    case population::normal: return normal_shift;
    case population::lognormal:
      return lognormal_mean(lognormal_mu_recent, lognormal_s) -
             lognormal_mean(lognormal_mu_reference, lognormal_s);
    case population::quantised: return quantised_mean(quantised_mu + grid) -
                                       quantised_mean(quantised_mu);
  }
  return 0;
}

// Replications per case of sections 1 and 2. At n >= 100 the requirement is 95 % +- 2 points;
// with R = 2000 the binomial sd is sqrt(.95 .05 / 2000) = 0.49 points, so 2 points is 4.1 sd and
// a method whose true coverage is exactly 95 % fails with probability 2 P(Z > 4.1) ~ 4e-5
// (normal approximation to the binomial).
constexpr int coverage_replications = 2000;

// ---------------------------------------------------------------------------
// AR(1) feeds of sections 2 and 3: x_t = phi x_{t-1} + e_t, e_t ~ N(0, 1), stationary start.
// ---------------------------------------------------------------------------

constexpr double phi = 0.6;

// Variance of the mean of n values of the AR(1) process relative to the variance an independent
// resample sees (gamma_0 / n): sum_{|k| < n} (1 - |k| / n) phi^|k| (the variance of a sum of a
// stationary series, e.g. Brockwell & Davis 1991, section 7.1), about (1 + phi) / (1 - phi) = 4.
double ar1_mean_variance_factor(std::size_t n) {
  double f = 1;
  double pk = 1;
  for (std::size_t k = 1; k < n; ++k) {
    pk *= phi;
    f += 2 * (1 - static_cast<double>(k) / static_cast<double>(n)) * pk;
  }
  return f;
}

}  // namespace

// ---------------------------------------------------------------------------
// 1. Coverage of the 95 % BCa interval, independent windows.
// ---------------------------------------------------------------------------

TEST_CASE("The quantised windows' true difference of means is the one-step shift",
          "[calibration][bootstrap]") {
  // The construction of the quantised population: shifting N(mu, 1) by one grid step shifts the
  // quantised distribution by that step, so the difference of the computed means must equal it
  // (to rounding), and the mean itself is within 1e-6 of mu (Sheppard: the periodic error of a
  // rounded normal's mean is of order exp(-2 pi^2 sigma^2 / h^2) = exp(-79); from memory).
  const double d = true_mean_difference(population::quantised);
  INFO("computed difference " << fixed(d, 15));
  CHECK(std::fabs(d - grid) < 1e-10);
  CHECK(std::fabs(quantised_mean(quantised_mu) - quantised_mu) < 1e-6);
}

TEST_CASE("The 95 % BCa interval for a difference of means covers the true difference",
          "[calibration][bootstrap]") {
  // Requirement at n = m >= 100: coverage 95 % +- 2 points (false-failure probability at a true
  // 95 %: see coverage_replications). For normal data the interval behaves like estimate +- 1.96
  // plug-in se, and the plug-in variance has divisor n, so its coverage is about
  // P(|t_df| < 1.96 sqrt((n - 1) / n)), df = 2 (n - 1) (Welch's df for equal n and variances):
  // 94.1 % at n = 30, 94.7 % at n = 100, 95.0 % at n = 500 (SciPy t.cdf). BCa is known to
  // under-cover a little for skewed data at small n (Efron & Tibshirani 1993, ch. 14, from
  // memory). For the lognormal windows below, a simulation of SciPy's scipy.stats.bootstrap (BCa,
  // B = 999, R = 3000 each, sd 0.47 points) gives 92.3 % at n = 30 and 93.1 % at n = 100: BCa
  // itself sits near the lower edge of the +- 2-point requirement at n = 100, so that check has a
  // false-failure probability of roughly 40 % over seeds (the seed here is fixed, so the outcome
  // is reproducible; a failure there alone says "BCa at n = 100 on skewness 1.75", not "engine
  // regression", unless the coverage drops well below 93 %).
  // Band at n = 30: 91 % .. 97 %. Below: the 0.9-point normal-theory loss plus 2 points for
  // skewness and ties (SciPy's 92.3 % on the lognormal: 2.7 points in all) plus 3 binomial sd
  // (1.5 points), rounded to 4 points under 95 %. Above: 95 % + 2 points, since none of these
  // effects raises coverage (allowance: common practice).
  const auto p = GENERATE(population::normal, population::lognormal, population::quantised);
  const std::size_t n = GENERATE(std::size_t{30}, std::size_t{100}, std::size_t{500});
  const cpu_timer timer;
  const uint64_t seed = 1000 + 10 * static_cast<uint64_t>(p) + n;
  const double truth = true_mean_difference(p);
  const auto t = coverage(maker(p, n), truth, mean_diff_bca(), coverage_replications, seed);
  const std::string label = std::string("mean-diff BCa, ") + population_name(p) +
                            ", n = m = " + std::to_string(n);
  WARN(describe(label, t, timer.seconds()));
  if (n >= 100) {
    CHECK(t.rate() >= nominal - 0.02);
    CHECK(t.rate() <= nominal + 0.02);
  } else {
    CHECK(t.rate() >= nominal - 0.04);
    CHECK(t.rate() <= nominal + 0.02);
  }
}

TEST_CASE("The 95 % BCa interval for a difference of medians covers the true shift",
          "[calibration][bootstrap]") {
  // Normal windows N(10, 1) and N(10.3, 1), n = m = 100: the true difference of medians is the
  // shift. The bootstrap distribution of a sample median is discrete (it lives on the order
  // statistics) and its variance estimate converges slowly, with relative error of order
  // n^(-1/4) (Hall & Martin 1988, from memory), so the median interval is held to a band one
  // point wider than the mean's: 95 % +- 3 points. With R = 2000 the binomial sd is 0.49 points:
  // 3 points is 6 sd (false-failure probability below 1e-8 at a true 95 %; a true coverage of
  // 93 % still passes with probability ~ 0.96).
  const cpu_timer timer;
  auto o = mean_diff_bca();
  o.quantity = drift_quantity::median_diff;
  const auto t =
      coverage(maker(population::normal, 100), normal_shift, o, coverage_replications, 2024);
  WARN(describe("median-diff BCa, normal, n = m = 100", t, timer.seconds()));
  CHECK(t.rate() >= nominal - 0.03);
  CHECK(t.rate() <= nominal + 0.03);
}

// ---------------------------------------------------------------------------
// 2. Coverage on AR(1) feeds, phi = 0.6, n = m = 500.
// ---------------------------------------------------------------------------

namespace {

// Two independent AR(1) windows; the recent one's process mean is 0.5 higher. The interval for a
// difference of means is translation-equivariant, so the value of the shift does not matter
// (0.5 stands for "a shift"; 0 behaves the same).
constexpr std::size_t ar1_n = 500;
constexpr double ar1_shift = 0.5;

window_maker ar1_maker(std::size_t n, double shift) {
  return [n, shift](rng& g, sample& x, sample& y) {
    x = ar1_sample(g, n, phi);
    y = ar1_sample(g, n, phi, shift);
  };
}

}  // namespace

TEST_CASE("Independent resampling of an AR(1) feed under-covers as theory predicts",
          "[calibration][bootstrap]") {
  // An independent resample sees the variance gamma_0 / n of the mean, the truth is
  // gamma_0 / n * sum_{|k|<n} (1 - |k|/n) phi^|k|, about (1 + phi) / (1 - phi) = 4 times more
  // (derived; Brockwell & Davis 1991, section 7.1). The interval is then half as wide as it
  // should be and covers about P(|Z| < 1.96 / 2) = 67.3 % (derived). Band: +- 5 points around
  // the prediction (R = 2000: binomial sd 1.05 points, so 4.8 sd; the normal approximation of the
  // mean difference at n = 500 and the noise of the plug-in variance move the prediction by well
  // under a point). And "clearly": at most 80 %.
  const cpu_timer timer;
  const double factor = ar1_mean_variance_factor(ar1_n);
  const double predicted = 2 * std_normal_cdf(1.959964 / std::sqrt(factor)) - 1;
  auto o = mean_diff_bca();
  o.block_length = 1;
  const auto t = coverage(ar1_maker(ar1_n, ar1_shift), ar1_shift, o, coverage_replications, 3100);
  WARN(describe("AR(1) phi 0.6, n = m = 500, mean-diff BCa, independent resampling", t,
                timer.seconds()) +
       "; predicted " + percent(predicted) + " (variance factor " + fixed(factor, 3) + ")");
  CHECK(t.blocked == 0);
  CHECK(std::fabs(t.rate() - predicted) <= 0.05);
  CHECK(t.rate() <= 0.80);
}

TEST_CASE("Automatic circular blocks restore the coverage of an AR(1) feed's interval",
          "[calibration][bootstrap]") {
  // Requirement: 95 % +- 4 points with block_length 0 and the circular scheme. The block
  // bootstrap variance of a mean is biased down by about G / b, G = sum_k |k| gamma_k, relative to
  // the long-run variance LRV = sum_k gamma_k (Kuensch 1989; Lahiri 2003, ch. 5; from memory).
  // For AR(1), G = 2 gamma_0 phi / (1 - phi)^2 = 11.7 and LRV = 1 / (1 - phi)^2 = 6.25; with the
  // population Politis-White length b_CB = 13.8 at n = 500 the variance is 14 % low and the
  // coverage about 2 Phi(1.96 sqrt(0.86)) - 1 = 93.2 % (derived). R = 2000: binomial sd 0.49
  // points at 95 % (0.56 at 93.2 %); the lower edge 91 % is 3.9 sd below the prediction. The
  // automatic rule must choose blocks in every replication (|r(1)| ~ 0.6 against 2 se = 0.09).
  // The percentile interval on the same data is reported beside BCa.
  const cpu_timer timer;
  auto o = mean_diff_bca();
  o.block_length = 0;
  o.scheme = block_scheme::circular;
  const auto t = coverage(ar1_maker(ar1_n, ar1_shift), ar1_shift, o, coverage_replications, 3200);
  const double bca_seconds = timer.seconds();
  WARN(describe("AR(1) phi 0.6, n = m = 500, mean-diff BCa, automatic circular blocks", t,
                bca_seconds));
  o.method = interval_method::percentile;
  const auto tp = coverage(ar1_maker(ar1_n, ar1_shift), ar1_shift, o, coverage_replications, 3200);
  WARN(describe("AR(1) phi 0.6, n = m = 500, mean-diff percentile, automatic circular blocks",
                tp, timer.seconds() - bca_seconds));
  CHECK(t.blocked == t.replications);
  CHECK(t.rate() >= nominal - 0.04);
  CHECK(t.rate() <= nominal + 0.04);
}

TEST_CASE("Automatic stationary-bootstrap blocks restore the coverage of an AR(1) feed",
          "[calibration][bootstrap]") {
  // The stationary bootstrap (Politis & Romano 1994) has the same first-order bias G / b as
  // circular blocks of the same mean length but a larger variance of the variance estimate
  // (Lahiri 1999, from memory), and its Politis-White length is shorter (b_SB = 12.1 at n = 500,
  // b_CB = (3/2)^(1/3) b_SB): the bias of the previous case gives about 92.8 % (derived), less
  // with the extra noise. Held to 95 % +- 6 points (R = 2000: 6.6 binomial sd between the
  // prediction and the lower edge 89 %); the report says whether it meets the +- 4 points of the
  // circular scheme.
  const cpu_timer timer;
  auto o = mean_diff_bca();
  o.block_length = 0;
  o.scheme = block_scheme::stationary;
  const auto t = coverage(ar1_maker(ar1_n, ar1_shift), ar1_shift, o, coverage_replications, 3300);
  const bool within_4 = std::fabs(t.rate() - nominal) <= 0.04;
  WARN(describe("AR(1) phi 0.6, n = m = 500, mean-diff BCa, automatic stationary blocks", t,
                timer.seconds()) +
       (within_4 ? "; meets 95 % +- 4 points" : "; does NOT meet 95 % +- 4 points"));
  CHECK(t.blocked == t.replications);
  CHECK(t.rate() >= nominal - 0.06);
  CHECK(t.rate() <= nominal + 0.06);
}

// ---------------------------------------------------------------------------
// 3. Permutation false alarms on AR(1) feeds, phi = 0.6, n = m = 200.
// ---------------------------------------------------------------------------

namespace {

constexpr std::size_t perm_n = 200;
constexpr int perm_replications = 2000;
constexpr double alpha = 0.05;

struct alarm_tally {
  int replications = 0;
  int single_alarms = 0;
  int block_alarms = 0;
  int blocked = 0;
  double block_sum = 0;
  double single_rate() const { return static_cast<double>(single_alarms) / replications; }
  double block_rate() const { return static_cast<double>(block_alarms) / replications; }
};

// Both windows from the same AR(1) process, independent of each other (H0 holds); each pair is
// tested with single-value permutation and with automatic blocks. Monte Carlo p-values with
// B = 199: p = (1 + #) / 200 <= 0.05 exactly when at most 9 of 199 exceed, a test of size
// exactly 10 / 200 = 5 % under exchangeability (Phipson & Smyth 2010).
alarm_tally false_alarms(test_kind test, uint64_t seed) {
  rng data(seed);
  rng resampling(seed ^ 0x9e3779b97f4a7c15ULL);
  permutation_engine engine;
  permutation_options o;
  o.test = test;
  o.resamples = 199;
  o.exact = exact_mode::never;
  alarm_tally t;
  t.replications = perm_replications;
  for (int i = 0; i < perm_replications; ++i) {
    const sample x = ar1_sample(data, perm_n, phi), y = ar1_sample(data, perm_n, phi);
    o.block_length = 1;
    const auto single = engine.run(x, y, o, resampling);
    if (!single.ok()) FAIL("the permutation test returned an error: " + single.err().message);
    if (single.value().p_value <= alpha) ++t.single_alarms;
    o.block_length = 0;
    const auto blocks = engine.run(x, y, o, resampling);
    if (!blocks.ok()) FAIL("the permutation test returned an error: " + blocks.err().message);
    if (blocks.value().p_value <= alpha) ++t.block_alarms;
    if (blocks.value().block_length >= 2) ++t.blocked;
    t.block_sum += blocks.value().block_length;
  }
  return t;
}

std::string describe(const std::string& label, const alarm_tally& t, double seconds) {
  return label + ": false alarms with single values " + percent(t.single_rate()) + " (" +
         std::to_string(t.single_alarms) + "/" + std::to_string(t.replications) +
         "), with automatic blocks " + percent(t.block_rate()) + " (" +
         std::to_string(t.block_alarms) + "/" + std::to_string(t.replications) +
         ", mean block length " + fixed(t.block_sum / t.replications, 2) +
         "), binomial sd at 5 % " + fixed(100 * binomial_sd(alpha, t.replications), 2) +
         " points, CPU " + fixed(seconds, 2) + " s";
}

}  // namespace

TEST_CASE("The mean-diff permutation test alarms too often on AR(1) feeds unless blocked",
          "[calibration][bootstrap][permutation]") {
  // Single values: the permutation distribution of the mean difference has variance
  // gamma_0 (1/n + 1/m), the truth about 4 times that (section 2), so the test rejects when
  // |Z| > 1.96 / 2: predicted 2 P(Z > 0.98) = 32.7 % (derived). Band +- 5 points (R = 2000:
  // binomial sd 1.05 points, so 4.8 sd; the B = 199 Monte Carlo p-value smooths the cut by well
  // under a point). Automatic blocks: the requirement 5 % +- 4 points. Permuting blocks of L
  // keeps within-block dependence but sees the variance of block means, low by G / L as in
  // section 2: at the population b_CB = 10.2 for n = 200, 18 % low, so the rate is about
  // 1 - (2 Phi(1.96 sqrt(0.82)) - 1) = 7.7 % (derived). The upper edge 9 % is then only 2.2
  // binomial sd (0.6 points at 7.7 %) above the prediction: a false-failure probability of
  // about 1.5 % over seeds, accepted because 5 % +- 4 points is the requirement.
  const cpu_timer timer;
  const double factor = ar1_mean_variance_factor(perm_n);
  const double predicted = 2 * (1 - std_normal_cdf(1.959964 / std::sqrt(factor)));
  const auto t = false_alarms(test_kind::mean_diff, 4100);
  WARN(describe("AR(1) phi 0.6, n = m = 200, mean-diff, B = 199", t, timer.seconds()) +
       "; predicted with single values " + percent(predicted));
  CHECK(t.blocked == t.replications);
  CHECK(std::fabs(t.single_rate() - predicted) <= 0.05);
  CHECK(t.block_rate() >= alpha - 0.04);
  CHECK(t.block_rate() <= alpha + 0.04);
}

TEST_CASE("The ks permutation test alarms too often on AR(1) feeds unless blocked",
          "[calibration][bootstrap][permutation]") {
  // The empirical CDF at z is a mean of indicators 1(x_t <= z); for a Gaussian AR(1) the
  // indicators at the median have lag-k correlation (2 / pi) arcsin(phi^k) (Sheppard's orthant
  // formula), so their long-run variance is 1 + 2 sum_k (2 / pi) arcsin(0.6^k) = 2.98 times the
  // independent one (derived), less in the tails. A factor of 2.98 on the whole empirical
  // process would give P(K > 1.358 / sqrt(2.98)) = 57 % (Kolmogorov distribution, SciPy
  // kstwobign); the tails' smaller factor and the discreteness of D lower that, but the
  // single-value test must stay far above 5 %: required above 15 %. Automatic blocks: required
  // below 10 % (the block bias of the mean-diff case, ~ 7.7 %, applies about equally to the
  // indicators: their G / LRV is 1.6 against the mean's 1.9, derived; 10 % is 3.8 binomial sd
  // above 7.7 %).
  const cpu_timer timer;
  const auto t = false_alarms(test_kind::ks, 4200);
  WARN(describe("AR(1) phi 0.6, n = m = 200, ks, B = 199", t, timer.seconds()));
  CHECK(t.blocked == t.replications);
  CHECK(t.single_rate() > 0.15);
  CHECK(t.block_rate() < 0.10);
}
