// permutation_null_reference_test.cc: the permutation engine against SciPy's
// exact null distributions and binomial tools.
//
// It complements permutation_vs_scipy_test.cc, which compares every statistic
// and exact p-value with scipy.stats.permutation_test. Every reference value
// here is computed live by SciPy through
// tests/reference/permutation_null_reference.py (which names the SciPy call
// behind each one):
//   1. exact KS and CvM p-values against SciPy's own exact methods (lattice
//      path counting; the recursion of Xiao, Gordon & Yakovlev), which need no
//      enumeration and so reach 4.5 million splits;
//   2. for balanced samples, the |T| p-value of the signed statistics against
//      SciPy's default two-sided rule;
//   3. block permutations against scipy.stats.permutation_test over block
//      indices;
//   4. Monte Carlo p-values: exceedance counts against SciPy's exact p-value
//      (scipy.stats.binomtest), the (1 + c) / (1 + B) formula and the
//      Clopper–Pearson interval (scipy.stats.beta.ppf), and the
//      resample count of sequential stopping against the negative binomial
//      law (scipy.stats.nbinom).
// The data are written out literally; they were drawn once with NumPy
// (default_rng, fixed seeds) as gauge readings rounded to the resolution
// stated beside each set.
#include <algorithm>
#include <catch2/catch.hpp>
#include <cmath>
#include <cstdint>
#include <nlohmann/json.hpp>
#include <span>
#include <string>
#include <vector>

#include "core/permutation.h"
#include "core/rng.h"
#include "core/statistic.h"
#include "support/python.h"

namespace {

using nlohmann::json;
using plumbline::exact_mode;
using plumbline::permutation_options;
using plumbline::permutation_result;
using plumbline::rng;
using plumbline::test_kind;
using plumbline::testing::run_python;

constexpr const char* script = "tests/reference/permutation_null_reference.py";

struct data_set {
  const char* label;
  std::vector<double> reference, recent;
};

// Fill weights (g), 500 g nominal, sd 1.5 g, read to 0.01 g, with the recent
// sample shifted; no value occurs twice in a pooled sample (the script checks
// that again before it asks SciPy's exact KS and CvM methods, which assume
// continuous data).
const std::vector<data_set>& untied_sets() {
  static const std::vector<data_set> sets = {
      {"n=10 m=10",
       {499.45, 500.49, 500.15, 496.79, 496.39, 501.19, 500.78, 497.17, 498.83, 499.98},
       {499.43, 505.10, 501.22, 501.88, 501.00, 500.04, 500.67, 500.31, 501.59, 500.07}},
      {"n=12 m=9",
       {499.80, 499.29, 499.07, 498.62, 500.09, 501.32, 501.02, 498.85, 499.30, 501.98, 499.09,
        501.14},
       {500.71, 501.53, 501.25, 500.90, 501.78, 505.49, 501.37, 500.63, 500.32}},
      {"n=15 m=6",
       {498.63, 498.53, 499.07, 499.98, 498.10, 499.42, 498.64, 501.01, 501.97, 501.88, 498.90,
        498.75, 497.37, 499.45, 500.38},
       {502.76, 502.80, 505.09, 499.86, 502.81, 501.71}},
      {"n=6 m=15 (recent larger)",
       {500.47, 497.75, 502.83, 500.09, 499.90, 500.06},
       {501.41, 499.20, 499.87, 499.29, 496.76, 498.78, 496.42, 494.78, 496.25, 499.08, 495.52,
        496.28, 496.52, 497.85, 498.89}},
      {"n=14 m=11",
       {499.64, 499.79, 501.20, 499.49, 498.83, 498.27, 500.01, 499.82, 500.62, 500.58, 498.74,
        500.31, 500.74, 502.22},
       {500.72, 499.94, 501.64, 502.03, 500.76, 502.34, 502.52, 501.14, 500.05, 501.96, 500.16}},
      {"n=20 m=4",
       {499.73, 498.62, 502.73, 499.76, 498.76, 502.27, 498.97, 499.99, 501.61, 500.72,
        501.00, 499.85, 499.38, 500.36, 500.00, 498.93, 500.55, 500.34, 499.98, 499.47},
       {502.06, 502.38, 502.15, 501.14}},
  };
  return sets;
}

json samples_json(const data_set& d) {
  return {{"x", d.reference}, {"y", d.recent}};
}

permutation_result run_engine(std::span<const double> reference, std::span<const double> recent,
                              const permutation_options& o, uint64_t seed) {
  rng gen(seed);
  plumbline::permutation_engine engine;
  auto r = engine.run(reference, recent, o, gen);
  INFO("engine error: " << (r.ok() ? std::string() : r.err().message));
  REQUIRE(r.ok());
  return r.value();
}

permutation_options exact_options(test_kind t) {
  permutation_options o;
  o.test = t;
  o.exact = exact_mode::always;
  return o;
}

// |a - b| within a relative `rel` of the larger magnitude (or equal).
bool rel_close(double a, double b, double rel) {
  return std::fabs(a - b) <= rel * std::max(std::fabs(a), std::fabs(b));
}

// The number of splits behind an exact SciPy p-value, count / splits.
// Exact: both are integers below 2^53, and p was rounded once.
uint64_t count_of(double p, uint64_t splits) {
  return static_cast<uint64_t>(std::llround(p * static_cast<double>(splits)));
}

// Our statistic in SciPy's form (anderson_ksamp reports the standardized AD).
double scipy_form(test_kind t, double statistic, std::size_t n, std::size_t m) {
  return t == test_kind::ad ? plumbline::ad_standardized(statistic, n, m) : statistic;
}

// Tolerance of the exact-method p-values. SciPy computes them in floating
// point (path counts scaled by binomial coefficients; frequency tables
// divided by C(N, n)), ours is one division of two exact integers. They
// agreed to 2e-16 relative when this was written; 1e-12 leaves room for other
// SciPy builds and is still far below the 1 / C(N, n) that one split more or
// less would move p by. The count behind SciPy's p must also be ours.
constexpr double exact_method_rel = 1e-12;

}  // namespace

TEST_CASE(
    "Exact KS p-values on untied data equal ks_2samp's exact method up to 4.5 million "
    "splits",
    "[reference][scipy][permutation]") {
  json request;
  request["ks_exact"] = json::array();
  for (const auto& d : untied_sets())
    request["ks_exact"].push_back(samples_json(d));
  const json answer = run_python(script, request);
  REQUIRE(answer.at("ks_exact").size() == untied_sets().size());
  for (std::size_t i = 0; i < untied_sets().size(); ++i) {
    const data_set& d = untied_sets()[i];
    const json& ref = answer["ks_exact"][i];
    INFO(d.label);
    const permutation_result r = run_engine(d.reference, d.recent, exact_options(test_kind::ks), 1);
    REQUIRE(r.exact);
    CHECK(r.resamples == plumbline::split_count(d.reference.size(), d.recent.size()));
    const double p_scipy = ref.at("pvalue").get<double>();
    CAPTURE(r.p_value, p_scipy, r.exceedances, r.resamples);
    CHECK(rel_close(r.p_value, p_scipy, exact_method_rel));
    CHECK(r.exceedances == count_of(p_scipy, r.resamples));
    CHECK(rel_close(r.statistic, ref.at("statistic").get<double>(), 1e-12));
  }
}

TEST_CASE(
    "Exact CvM p-values on untied data equal cramervonmises_2samp's exact method up to "
    "4.5 million splits",
    "[reference][scipy][permutation]") {
  json request;
  request["cvm_exact"] = json::array();
  for (const auto& d : untied_sets())
    request["cvm_exact"].push_back(samples_json(d));
  const json answer = run_python(script, request);
  REQUIRE(answer.at("cvm_exact").size() == untied_sets().size());
  for (std::size_t i = 0; i < untied_sets().size(); ++i) {
    const data_set& d = untied_sets()[i];
    const json& ref = answer["cvm_exact"][i];
    INFO(d.label);
    const permutation_result r =
        run_engine(d.reference, d.recent, exact_options(test_kind::cvm), 1);
    REQUIRE(r.exact);
    const double p_scipy = ref.at("pvalue").get<double>();
    CAPTURE(r.p_value, p_scipy, r.exceedances, r.resamples);
    CHECK(rel_close(r.p_value, p_scipy, exact_method_rel));
    CHECK(r.exceedances == count_of(p_scipy, r.resamples));
    // 1e-10 relative, as in permutation_vs_scipy_test.cc: T = U / (n m N) -
    // (4 n m - 1) / (6 N) is a difference, and SciPy forms U from float ranks.
    CHECK(rel_close(r.statistic, ref.at("statistic").get<double>(), 1e-10));
  }
}

TEST_CASE(
    "For balanced samples the |T| p-value of signed statistics equals SciPy's default "
    "two-sided p-value",
    "[reference][scipy][permutation]") {
  // With n = m, swapping the two groups maps every split to one with -T, so
  // the permutation law of T is symmetric and, for T_obs != 0, SciPy's
  // default two-sided rule 2 min(P(T* <= T_obs), P(T* >= T_obs)) equals
  // P(|T*| >= |T_obs|), the rule of core/permutation.h. This ties our
  // convention to SciPy's own default, not only to |T| fed to SciPy.
  const std::vector<data_set> sets = {
      // Process temperatures (degC), read to 0.01.
      {"n=m=7 continuous",
       {20.16, 18.60, 19.96, 21.04, 17.98, 19.31, 17.15},
       {19.07, 18.24, 20.65, 19.10, 21.41, 21.24, 20.72}},
      // The same process read to 0.5: ties within and across the samples.
      {"n=m=7 read to 0.5",
       {16.0, 19.0, 20.0, 20.0, 17.5, 19.5, 18.5},
       {20.0, 22.5, 20.0, 21.0, 22.5, 20.0, 21.0}},
  };
  const test_kind tests[] = {test_kind::mean_diff, test_kind::median_diff, test_kind::welch};
  json request;
  request["permutation"] = json::array();
  for (const auto& d : sets)
    for (test_kind t : tests) {
      json job = samples_json(d);
      job["test"] = std::string(plumbline::test_name(t));
      job["alternative"] = "two-sided";
      request["permutation"].push_back(job);
    }
  const json answer = run_python(script, request);
  REQUIRE(answer.at("permutation").size() == 2 * std::size(tests));
  std::size_t job = 0;
  for (const auto& d : sets)
    for (test_kind t : tests) {
      const json& ref = answer["permutation"][job++];
      INFO(d.label << ", test " << plumbline::test_name(t));
      const permutation_result r = run_engine(d.reference, d.recent, exact_options(t), 1);
      REQUIRE(r.exact);
      const double t_scipy = ref.at("statistic").get<double>();
      CAPTURE(r.statistic, t_scipy);
      REQUIRE(t_scipy != 0);  // the equivalence needs T_obs != 0
      CHECK(rel_close(r.statistic, t_scipy, 1e-10));
      const uint64_t splits = ref.at("splits").get<uint64_t>();
      REQUIRE(ref.at("null_size").get<uint64_t>() == splits);  // SciPy enumerated
      CHECK(r.resamples == splits);
      const double p_scipy = ref.at("pvalue").get<double>();
      CAPTURE(r.p_value, p_scipy, r.exceedances);
      CHECK(r.exceedances == count_of(p_scipy, splits));
      CHECK(std::fabs(r.p_value - p_scipy) <= 1e-12);
    }
}

TEST_CASE("Exact block-permutation p-values equal SciPy's permutation_test over block indices",
          "[reference][scipy][permutation]") {
  // A filler's head pressure (bar), logged in time order (oldest first) and
  // read to 0.1, drawn from an AR(1) process with coefficient 0.6, as sensor
  // feeds are autocorrelated (core/dependence.h). With block length L
  // each window keeps its newest multiple of L values and the units permuted
  // are its consecutive blocks of L (core/permutation.h); SciPy permutes
  // block indices and evaluates the statistic on the values of the blocks
  // each side receives. n = 13, m = 10: L = 2 leaves out the oldest reference
  // value and permutes 6 + 5 blocks (C(11, 5) = 462 splits); L = 3 leaves out
  // one value of each window and permutes 4 + 3 blocks (35 splits).
  const std::vector<double> reference = {50.1, 50.1, 49.1, 49.5, 50.8, 49.2, 50.2,
                                         50.2, 49.6, 51.4, 51.4, 49.9, 50.0};
  const std::vector<double> recent = {51.3, 50.9, 51.4, 51.0, 51.4, 52.3, 51.1, 51.1, 50.6, 50.7};
  const test_kind tests[] = {test_kind::mean_diff, test_kind::median_diff, test_kind::welch,
                             test_kind::ks,        test_kind::cvm,         test_kind::ad};
  const uint32_t lengths[] = {2, 3};
  json request;
  request["permutation"] = json::array();
  for (uint32_t len : lengths)
    for (test_kind t : tests)
      request["permutation"].push_back({{"test", std::string(plumbline::test_name(t))},
                                        {"x", reference},
                                        {"y", recent},
                                        {"block", len}});
  const json answer = run_python(script, request);
  REQUIRE(answer.at("permutation").size() == std::size(lengths) * std::size(tests));
  std::size_t job = 0;
  for (uint32_t len : lengths)
    for (test_kind t : tests) {
      const json& ref = answer["permutation"][job++];
      INFO("block length " << len << ", test " << plumbline::test_name(t));
      permutation_options o = exact_options(t);
      o.block_length = len;
      const permutation_result r = run_engine(reference, recent, o, 1);
      REQUIRE(r.exact);
      CHECK(r.block_length == len);
      CHECK(r.n_reference == reference.size() - reference.size() % len);
      CHECK(r.n_recent == recent.size() - recent.size() % len);
      const uint64_t splits = ref.at("splits").get<uint64_t>();
      REQUIRE(ref.at("null_size").get<uint64_t>() == splits);
      CHECK(r.resamples == splits);
      const double p_scipy = ref.at("pvalue").get<double>();
      CAPTURE(r.p_value, p_scipy, r.exceedances);
      CHECK(r.exceedances == count_of(p_scipy, splits));
      const double ours = scipy_form(t, r.statistic, r.n_reference, r.n_recent);
      const double theirs = ref.at("statistic").get<double>();
      CAPTURE(ours, theirs);
      CHECK(rel_close(ours, theirs, 1e-10));
    }
}

namespace {

// Capper torque readings (N cm), read to 0.5: 792 splits, ties within and
// across the samples, exact p-values between 0.09 and 0.26 (so the counts
// below are far from 0 and from B). The Monte Carlo cases are judged against
// SciPy's exact p-value of this set.
const data_set& torque_set() {
  static const data_set d{"torque n=7 m=5",
                          {500.0, 500.5, 499.5, 499.0, 499.5, 499.0, 500.0},
                          {500.5, 500.5, 499.5, 501.5, 500.0}};
  return d;
}

constexpr test_kind univariate_tests[] = {test_kind::mean_diff, test_kind::median_diff,
                                          test_kind::welch,     test_kind::ks,
                                          test_kind::cvm,       test_kind::ad};

// SciPy's exact permutation p-value of the torque set for each test above.
std::vector<double> torque_exact_p() {
  json request;
  request["permutation"] = json::array();
  for (test_kind t : univariate_tests) {
    json job = samples_json(torque_set());
    job["test"] = std::string(plumbline::test_name(t));
    request["permutation"].push_back(job);
  }
  const json answer = run_python(script, request);
  std::vector<double> p;
  for (const json& ref : answer.at("permutation")) {
    REQUIRE(ref.at("null_size").get<uint64_t>() == ref.at("splits").get<uint64_t>());
    p.push_back(ref.at("pvalue").get<double>());
  }
  REQUIRE(p.size() == std::size(univariate_tests));
  return p;
}

// Level of the binomial checks: a correct engine fails one with probability
// 1e-6 (common practice for seeded statistical checks, no source: so small
// that a failure means a defect, not bad luck).
constexpr double alpha = 1e-6;

}  // namespace

TEST_CASE(
    "Monte Carlo exceedance counts are binomial around SciPy's exact p-value for every "
    "test",
    "[reference][scipy][permutation]") {
  // Each of B random splits exceeds the observed statistic with probability
  // p_exact (the share of all splits that do), independently, so the count c
  // is Binomial(B, p_exact). A two-sided binomial test at level 1e-6 then
  // detects a sampler or comparison bias of about 5 standard errors: 0.011
  // at p = 0.1 with B = 20000, less than the 1/792 = 0.0013 that one tie
  // group of splits miscounted would move p by only when that group is large;
  // the exact comparisons (permutation_vs_scipy_test.cc) catch the rest.
  constexpr uint64_t b = 20000;
  const std::vector<double> p_exact = torque_exact_p();
  json request;
  request["binomtest"] = json::array();
  std::vector<permutation_result> runs;
  for (std::size_t i = 0; i < std::size(univariate_tests); ++i) {
    permutation_options o;
    o.test = univariate_tests[i];
    o.exact = exact_mode::never;
    o.resamples = b;
    runs.push_back(run_engine(torque_set().reference, torque_set().recent, o, 20261201 + i));
    request["binomtest"].push_back({{"k", runs.back().exceedances}, {"n", b}, {"p", p_exact[i]}});
  }
  const json answer = run_python(script, request);
  REQUIRE(answer.at("binomtest").size() == runs.size());
  for (std::size_t i = 0; i < runs.size(); ++i) {
    const permutation_result& r = runs[i];
    INFO("test " << plumbline::test_name(univariate_tests[i]));
    CHECK_FALSE(r.exact);
    CHECK(r.resamples == b);
    // The check says little for p near 0 or 1; the data were chosen so.
    REQUIRE(p_exact[i] > 0.05);
    REQUIRE(p_exact[i] < 0.5);
    const double binom_p = answer["binomtest"][i].get<double>();
    CAPTURE(r.exceedances, b, p_exact[i], binom_p);
    CHECK(binom_p >= alpha);
  }
}

TEST_CASE(
    "Monte Carlo p-values are SciPy's (1 + c) / (1 + B) with SciPy's Clopper-Pearson "
    "interval",
    "[reference][scipy][permutation]") {
  // scipy.stats.permutation_test reports (c + 1) / (B + 1) for B random
  // permutations (its `adjustment` of 1, after Phipson & Smyth 2010). The
  // interval is Clopper–Pearson for (c, B), widened to contain p where needed
  // (core/permutation.h); its ends are beta quantiles, from scipy.stats.beta
  // .ppf (see the script for why not binomtest's proportion_ci). Tolerance
  // 1e-10 relative, the accuracy core/special.h states for the beta quantile.
  struct mc_case {
    test_kind test;
    uint64_t resamples;
    double level;
    const char* what;
  };
  const mc_case cases[] = {
      {test_kind::mean_diff, 9999, 0.99, "default level"},
      {test_kind::ks, 4999, 0.95, "level 0.95"},
      {test_kind::ad, 2000, 0.999, "level 0.999"},
      {test_kind::welch, 100, 0.99, "B = 100"},
  };
  // Fully separated samples as well: the fill weights of the n = 15 set
  // against the same values 6 g heavier. Only the observed split and its
  // mirror image reach the observed statistic, p_exact = 2 / C(30, 15) =
  // 1.3e-8, so c = 0 (in all four runs with probability 1 - 2e-4; at least
  // one is required) and the interval's lower end is exactly 0.
  data_set shifted{"separated n=m=15", untied_sets()[2].reference, untied_sets()[2].reference};
  for (double& v : shifted.recent)
    v += 6.0;

  json request;
  request["clopper_pearson"] = json::array();
  std::vector<permutation_result> runs;
  std::vector<std::string> labels;
  for (const data_set* d : {&torque_set(), static_cast<const data_set*>(&shifted)})
    for (const auto& c : cases) {
      permutation_options o;
      o.test = c.test;
      o.exact = exact_mode::never;
      o.resamples = c.resamples;
      o.ci_level = c.level;
      runs.push_back(run_engine(d->reference, d->recent, o, 7));
      labels.push_back(std::string(d == &shifted ? "separated, " : "") + c.what + ", test " +
                       std::string(plumbline::test_name(c.test)));
      request["clopper_pearson"].push_back(
          {{"k", runs.back().exceedances}, {"n", c.resamples}, {"level", c.level}});
    }
  const json answer = run_python(script, request);
  REQUIRE(answer.at("clopper_pearson").size() == runs.size());
  bool saw_zero = false;
  for (std::size_t i = 0; i < runs.size(); ++i) {
    const permutation_result& r = runs[i];
    INFO(labels[i]);
    const double c = static_cast<double>(r.exceedances), b = static_cast<double>(r.resamples);
    CAPTURE(r.exceedances, r.resamples, r.p_value, r.p_low, r.p_high);
    CHECK_FALSE(r.stopped_early);
    CHECK(r.p_value == (c + 1) / (b + 1));
    const double low = std::min(answer["clopper_pearson"][i][0].get<double>(), r.p_value);
    const double high = std::max(answer["clopper_pearson"][i][1].get<double>(), r.p_value);
    CAPTURE(low, high);
    if (low == 0) {
      saw_zero = true;
      CHECK(r.p_low == 0);
    } else {
      CHECK(rel_close(r.p_low, low, 1e-10));
    }
    CHECK(rel_close(r.p_high, high, 1e-10));
  }
  CHECK(saw_zero);
}

TEST_CASE(
    "Sequential stopping uses a negative binomial number of resamples around SciPy's "
    "exact p-value",
    "[reference][scipy][permutation]") {
  // With stop_after = h, resampling stops at the h-th exceedance, so the
  // number of non-exceeding splits before it, L - h, is negative binomial
  // with h successes of probability p_exact (scipy.stats.nbinom). The check
  // is two-sided at level 1e-6: 2 min(P(F <= f), P(F >= f)). Then p = h / L
  // (Besag & Clifford 1991) and the interval is the Clopper–Pearson interval
  // for (h, L) from SciPy's beta quantiles, widened to contain p, as for plain
  // Monte Carlo.
  constexpr uint64_t h = 40;
  const std::vector<double> p_exact = torque_exact_p();
  json request;
  request["nbinom"] = json::array();
  request["clopper_pearson"] = json::array();
  std::vector<permutation_result> runs;
  for (std::size_t i = 0; i < std::size(univariate_tests); ++i) {
    permutation_options o;
    o.test = univariate_tests[i];
    o.exact = exact_mode::never;
    o.resamples = 1000000;  // never reached: about h / p_exact < 500 are needed
    o.stop_after = h;
    runs.push_back(run_engine(torque_set().reference, torque_set().recent, o, 99 + i));
    const permutation_result& r = runs.back();
    request["nbinom"].push_back(
        {{"failures", r.resamples - r.exceedances}, {"successes", h}, {"p", p_exact[i]}});
    request["clopper_pearson"].push_back(
        {{"k", r.exceedances}, {"n", r.resamples}, {"level", 0.99}});
  }
  const json answer = run_python(script, request);
  REQUIRE(answer.at("nbinom").size() == runs.size());
  for (std::size_t i = 0; i < runs.size(); ++i) {
    const permutation_result& r = runs[i];
    INFO("test " << plumbline::test_name(univariate_tests[i]));
    CAPTURE(r.resamples, r.exceedances, r.p_value, p_exact[i]);
    REQUIRE(r.stopped_early);
    CHECK(r.exceedances == h);
    CHECK(r.p_value == static_cast<double>(h) / static_cast<double>(r.resamples));
    const double tail = answer["nbinom"][i].get<double>();
    CAPTURE(tail);
    CHECK(tail >= alpha);
    const double low = std::min(answer["clopper_pearson"][i][0].get<double>(), r.p_value);
    const double high = std::max(answer["clopper_pearson"][i][1].get<double>(), r.p_value);
    CHECK(rel_close(r.p_low, low, 1e-10));
    CHECK(rel_close(r.p_high, high, 1e-10));
  }
}
