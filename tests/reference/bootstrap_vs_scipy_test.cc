// bootstrap_vs_scipy_test.cc: the bootstrap drift-interval engine against SciPy.
//
// Reference values are computed live by scipy.stats.bootstrap (SciPy 1.10)
// through tests/reference/scipy_bootstrap_ref.py, which documents the calls:
//   1. percentile, basic and BCa intervals of mean-diff and median-diff on
//      skewed continuous data and on quantised (tied) data, and of
//      quantile-diff at q = 0.1 and 0.9, compared within their joint Monte
//      Carlo error (the two programs draw with different generators);
//   2. the BCa acceleration, which depends on the jackknife only, against
//      SciPy's a_hat to 1e-12 relative; the bias correction z0 within Monte
//      Carlo error;
//   3. the mouse survival-time data of Efron & Tibshirani, An Introduction to
//      the Bootstrap (1993), Table 2.1: the book's summary values, the
//      bootstrap standard error of a mean difference against its closed form,
//      and the percentile and BCa intervals against SciPy.
// Data are drawn with plumbline::rng (fixed seeds) or written out literally,
// and sent to the script in the request. Runtime: about 6 s of CPU, most of it
// SciPy's (about 20 s wall on a loaded 2-core machine).
#include <algorithm>
#include <catch2/catch.hpp>
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "core/bootstrap.h"
#include "core/rng.h"
#include "support/generate.h"
#include "support/python.h"

namespace {

using nlohmann::json;
using plumbline::bootstrap_engine;
using plumbline::drift_quantity;
using plumbline::interval_method;
using plumbline::interval_options;
using plumbline::interval_result;
using plumbline::rng;
using plumbline::testing::run_python;

constexpr const char* script = "tests/reference/scipy_bootstrap_ref.py";

// Seeds per side and resamples per run. S = 20 gives each mean endpoint a
// standard error of sd / sqrt(20) and estimates sd to about +-16%.
constexpr std::size_t seeds_per_side = 20;
constexpr uint64_t resamples = 9999;

constexpr interval_method all_methods[] = {interval_method::percentile, interval_method::basic,
                                           interval_method::bca};

// Skewed continuous windows (shifted lognormal, so that the acceleration is
// clearly away from 0): 41 reference values 5 + exp(z / 2) and 30 recent
// values 5.3 + exp(z / 2), z standard normal from rng(1201). An odd
// reference size makes the median's jackknife values asymmetric.
struct windows {
  std::vector<double> reference, recent;
};

windows skewed_windows() {
  rng gen(1201);
  windows w;
  for (double z : plumbline::testing::normal_sample(gen, 41))
    w.reference.push_back(5 + std::exp(0.5 * z));
  for (double z : plumbline::testing::normal_sample(gen, 30))
    w.recent.push_back(5.3 + std::exp(0.5 * z));
  return w;
}

// A coarse gauge: 41 reference values N(10, 0.4^2) and 31 recent values
// N(10.2, 0.4^2), rounded to 0.1 (about 25 distinct levels, many ties), from
// rng(1211). Both sizes are odd, so medians and their differences lie on the
// 0.1 grid. The seed was chosen (among 1202..1214) so that the values next to
// a median are not all tied: otherwise every jackknife median is the same,
// the acceleration is 0 / 0, SciPy's a_hat is NaN (with a warning) and our
// BCa falls back to percentile, which the unit tests check instead.
constexpr double quantised_median_grid = 0.1;

windows quantised_windows() {
  rng gen(1211);
  windows w;
  for (double v : plumbline::testing::normal_sample(gen, 41, 10, 0.4))
    w.reference.push_back(std::round(10 * v) / 10);
  for (double v : plumbline::testing::normal_sample(gen, 31, 10.2, 0.4))
    w.recent.push_back(std::round(10 * v) / 10);
  return w;
}

std::string quantity_json_name(drift_quantity q) {
  return std::string(plumbline::quantity_name(q));
}

// One comparison job: a quantity on two windows.
struct job {
  std::string label;
  windows data;
  drift_quantity quantity;
  double quantile;
  double resolution;  // the resolution term of the tolerance (see below)
};

json job_request(const job& j, uint64_t first_seed) {
  json seeds = json::array();
  for (std::size_t s = 0; s < seeds_per_side; ++s)
    seeds.push_back(first_seed + s);
  json r = {{"quantity", quantity_json_name(j.quantity)},
            {"x", j.data.reference},
            {"y", j.data.recent},
            {"level", 0.95},
            {"n_resamples", resamples},
            {"seeds", seeds}};
  if (j.quantity == drift_quantity::quantile_diff) r["q"] = j.quantile;
  return r;
}

interval_result run_ours(const windows& w, drift_quantity q, double quantile, interval_method m,
                         uint64_t seed, uint64_t b = resamples) {
  bootstrap_engine engine;
  interval_options o;
  o.quantity = q;
  o.quantile = quantile;
  o.method = m;
  o.level = 0.95;
  o.resamples = b;
  o.block_length = 1;
  rng gen(seed);
  auto r = engine.run(w.reference, w.recent, o, gen);
  INFO("engine error: " << (r.ok() ? std::string() : r.err().message));
  REQUIRE(r.ok());
  return r.value();
}

struct spread {
  double mean = 0, sd = 0;
};

spread spread_of(const std::vector<double>& v) {
  spread s;
  for (double x : v)
    s.mean += x;
  s.mean /= static_cast<double>(v.size());
  double ss = 0;
  for (double x : v)
    ss += (x - s.mean) * (x - s.mean);
  s.sd = std::sqrt(ss / static_cast<double>(v.size() - 1));
  return s;
}

std::vector<double> doubles(const json& a) {
  std::vector<double> v;
  for (const auto& x : a)
    v.push_back(x.get<double>());
  return v;
}

// The Monte Carlo comparison of one endpoint (or z0, or a standard error).
//
// Derivation. Run i of either program gives E_i = e + d_i, where e is the
// ideal bootstrap value (B -> infinity, the same for both programs: both
// resample each window independently and with replacement, and both read
// percentiles by the same linear rule, so even the O(1/B) bias of a B-sample
// percentile is shared) and d_i is Monte Carlo noise, independent across
// seeds and programs. The mean of S runs then has variance sd^2 / S, and the
// difference of the two means has standard deviation
//   sigma = sqrt(sd_ours^2 / S + sd_scipy^2 / S),
// with each sd estimated from that side's own S runs. By the central limit
// theorem over seeds the difference is near normal; with sigma estimated it
// is near Student t with about 2 (S - 1) = 38 degrees of freedom, so 4 sigma
// gives a false alarm of about 3e-4 per check (and the seeds are fixed, so a
// pass is reproducible). Two additions:
//   * resolution: for median-diff on quantised data the replicates take few
//     distinct values and an endpoint sits on, or jumps between, points of
//     the 0.1 grid. A side whose S runs never jump has sd 0 and understates
//     the spread; one jump in S runs moves a mean by grid / S, which is the
//     term added (0 for continuous data). Common practice, no source.
//   * round-off: 1e-12 (1 + |value|), as the two programs compute the same
//     differences of the same doubles in a different order.
void check_monte_carlo(const char* what, const std::vector<double>& ours,
                       const std::vector<double>& theirs, double resolution) {
  const spread a = spread_of(ours), b = spread_of(theirs);
  const double s = static_cast<double>(seeds_per_side);
  const double sigma = std::sqrt(a.sd * a.sd / s + b.sd * b.sd / s);
  const double tol = 4 * sigma + resolution + 1e-12 * (1 + std::fabs(b.mean));
  INFO(what << ": ours " << a.mean << " (sd " << a.sd << "), SciPy " << b.mean << " (sd " << b.sd
            << "), |difference| " << std::fabs(a.mean - b.mean) << ", tolerance " << tol);
  CHECK(std::fabs(a.mean - b.mean) <= tol);
}

// The relative comparison of deterministic values.
bool rel_close(double ours, double theirs, double rel) {
  return std::fabs(ours - theirs) <= rel * std::max(std::fabs(ours), std::fabs(theirs));
}

// Runs every method of `j` over S seeds on our side and compares with the
// SciPy answer `ref` of the same job: each endpoint, z0 and the standard
// error within Monte Carlo error, and the estimate and the acceleration to
// 1e-12 relative.
void compare_job(const job& j, const json& ref) {
  INFO("job: " << j.label);
  std::vector<double> lo[3], hi[3], z0, se;
  double estimate = 0, acceleration = 0;
  for (std::size_t s = 0; s < seeds_per_side; ++s) {
    // Our seeds 1..S, SciPy's 1001..1000+S: independent runs either way.
    const uint64_t seed = 1 + s;
    for (std::size_t k = 0; k < 3; ++k) {
      const interval_result r = run_ours(j.data, j.quantity, j.quantile, all_methods[k], seed);
      REQUIRE_FALSE(r.degenerate);
      lo[k].push_back(r.lower);
      hi[k].push_back(r.upper);
      if (all_methods[k] == interval_method::bca) {
        INFO("note: " << r.note);
        REQUIRE(r.method_used == interval_method::bca);
        z0.push_back(r.bias_correction);
        acceleration = r.acceleration;
      }
      if (k == 0) se.push_back(r.standard_error);
      estimate = r.estimate;
    }
  }
  // Deterministic: the estimate (same definition, same doubles) and the
  // acceleration (jackknife only, eq. 15.36 summed over samples, as SciPy's
  // _bca_interval).
  CHECK(rel_close(estimate, ref["estimate"].get<double>(), 1e-12));
  const double a_hat = ref["a_hat"].get<double>();
  INFO("acceleration: ours " << acceleration << ", SciPy a_hat " << a_hat);
  CHECK(rel_close(acceleration, a_hat, 1e-12));
  const char* names[] = {"percentile", "basic", "bca"};
  for (std::size_t k = 0; k < 3; ++k) {
    const std::string lo_name = std::string(names[k]) + " lower";
    const std::string hi_name = std::string(names[k]) + " upper";
    check_monte_carlo(lo_name.c_str(), lo[k], doubles(ref[names[k]]["low"]), j.resolution);
    check_monte_carlo(hi_name.c_str(), hi[k], doubles(ref[names[k]]["high"]), j.resolution);
  }
  // z0 is a smooth function of the share of replicates below the estimate;
  // its resolution term is 0 (it moves by 1 / (2B) steps, not grid steps).
  check_monte_carlo("BCa bias correction z0", z0, doubles(ref["z0"]), 0);
  check_monte_carlo("standard error", se, doubles(ref["standard_error"]), 0);
}

std::vector<job> all_jobs() {
  const windows skewed = skewed_windows(), quantised = quantised_windows();
  return {
      {"mean-diff, skewed continuous", skewed, drift_quantity::mean_diff, 0.5, 0},
      {"median-diff, skewed continuous", skewed, drift_quantity::median_diff, 0.5, 0},
      {"mean-diff, quantised", quantised, drift_quantity::mean_diff, 0.5, 0},
      {"median-diff, quantised", quantised, drift_quantity::median_diff, 0.5,
       quantised_median_grid / static_cast<double>(seeds_per_side)},
      {"quantile-diff q = 0.1, skewed continuous", skewed, drift_quantity::quantile_diff, 0.1, 0},
      {"quantile-diff q = 0.9, skewed continuous", skewed, drift_quantity::quantile_diff, 0.9, 0},
  };
}

}  // namespace

TEST_CASE("Bootstrap intervals of mean, median and quantile differences agree with SciPy",
          "[reference][scipy][bootstrap]") {
  // scipy.stats.bootstrap, percentile / basic / BCa, level 0.95, B = 9999,
  // independent resampling of each window (block_length = 1).
  const std::vector<job> jobs = all_jobs();
  json request = {{"jobs", json::array()}};
  for (const job& j : jobs)
    request["jobs"].push_back(job_request(j, 1001));
  const json answer = run_python(script, request);
  REQUIRE(answer["jobs"].size() == jobs.size());
  for (std::size_t i = 0; i < jobs.size(); ++i)
    compare_job(jobs[i], answer["jobs"][i]);
}

TEST_CASE("Efron and Tibshirani's mouse data: summary values and the bootstrap standard error",
          "[reference][bootstrap][worked-example]") {
  // Efron & Tibshirani, An Introduction to the Bootstrap (1993), Table 2.1,
  // the mouse survival times in days (data from memory): treatment (here the
  // recent window) and control (the reference window).
  const std::vector<double> treatment = {94, 197, 16, 38, 99, 141, 23};
  const std::vector<double> control = {52, 104, 146, 10, 51, 30, 40, 27, 46};
  const windows w{control, treatment};

  // Table 2.1 (values from memory): means 86.86 and 56.22, difference 30.63;
  // estimated standard errors s / sqrt(n) of the means 25.24 (treatment) and
  // 14.14 (control) and of the difference sqrt(s_T^2 / 7 + s_C^2 / 9) = 28.93.
  // 28.93 equals sqrt(25.24^2 + 14.14^2) of those entries, but from the data
  // the control's standard error is 14.159 and the difference's 28.936 (a
  // slip in the remembered entry or in the book; not resolved here), so the
  // control entry is not checked and the difference is checked to 0.01, the
  // two values' distance. Means and standard deviations come from
  // the engine (mean-diff: the windows' means; sd-ratio: their sds, divisor
  // n - 1).
  const interval_result means =
      run_ours(w, drift_quantity::mean_diff, 0.5, interval_method::percentile, 7, 999);
  const interval_result sds =
      run_ours(w, drift_quantity::sd_ratio, 0.5, interval_method::percentile, 7, 999);
  CHECK(means.recent_value == Approx(86.86).margin(0.005));
  CHECK(means.reference_value == Approx(56.22).margin(0.005));
  CHECK(means.estimate == Approx(30.63).margin(0.005));
  const double s_t = sds.recent_value, s_c = sds.reference_value;
  CHECK(s_t / std::sqrt(7.0) == Approx(25.24).margin(0.005));
  CHECK(std::sqrt(s_t * s_t / 7 + s_c * s_c / 9) == Approx(28.93).margin(0.01));

  // The bootstrap standard error of a mean difference. For the mean the ideal
  // bootstrap (B -> infinity) has a closed form: a resample mean of n values
  // drawn with replacement has variance sigma^2 / n with the plug-in variance
  // sigma^2 = (1/n) sum (x - xbar)^2, and the windows are resampled
  // independently, so se_boot = sqrt(sigma_T^2 / 7 + sigma_C^2 / 9) = 26.908
  // here (Efron & Tibshirani 1993, ch. 5-6, the plug-in principle). The book
  // reports a Monte Carlo value near 26.85 (from memory; not checked: its B is
  // not at hand). Ours: the mean of S runs' standard errors (B = 9999), with
  // the tolerance derived from their spread as in check_monte_carlo.
  double plug_in = 0;
  for (const std::vector<double>* v : {&treatment, &control}) {
    double mean = 0, ss = 0;
    for (double x : *v)
      mean += x;
    mean /= static_cast<double>(v->size());
    for (double x : *v)
      ss += (x - mean) * (x - mean);
    const double n = static_cast<double>(v->size());
    plug_in += ss / n / n;
  }
  plug_in = std::sqrt(plug_in);
  CHECK(plug_in == Approx(26.908).margin(0.0005));
  std::vector<double> se;
  for (std::size_t s = 0; s < seeds_per_side; ++s)
    se.push_back(run_ours(w, drift_quantity::mean_diff, 0.5, interval_method::percentile, 1 + s)
                     .standard_error);
  const spread se_spread = spread_of(se);
  const double tol = 4 * se_spread.sd / std::sqrt(static_cast<double>(seeds_per_side));
  INFO("bootstrap standard error: mean " << se_spread.mean << " (sd " << se_spread.sd
                                         << "), closed form " << plug_in);
  CHECK(std::fabs(se_spread.mean - plug_in) <= tol);
  CHECK(tol < 0.5);  // the check has teeth: well under 2% of the value
}

TEST_CASE("Efron and Tibshirani's mouse data: percentile and BCa intervals agree with SciPy",
          "[reference][scipy][bootstrap][worked-example]") {
  // The same data as above; mean-diff, all three methods, against
  // scipy.stats.bootstrap within Monte Carlo error (see check_monte_carlo).
  const job j{"mouse data, mean-diff",
              {{52, 104, 146, 10, 51, 30, 40, 27, 46}, {94, 197, 16, 38, 99, 141, 23}},
              drift_quantity::mean_diff,
              0.5,
              0};
  const json answer = run_python(script, {{"jobs", json::array({job_request(j, 1001)})}});
  REQUIRE(answer["jobs"].size() == 1);
  compare_job(j, answer["jobs"][0]);
}
