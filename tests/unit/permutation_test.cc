// permutation_test.cc: the permutation engine of core/permutation.h against
// independent brute-force computations written here.
//
// Exact p-values are checked against a plain enumeration of every split of
// the pooled sample (a bitmask over N <= 16 positions), with each split's
// statistic taken from statistic_value / energy_statistic (core/statistic.h)
// rather than from the engine's kernels. Monte Carlo counts are checked
// against a replay of the documented draw (a partial Fisher–Yates shuffle of
// a buffer that is never reset, with rng::bounded as the source of positions,
// see the design note in core/permutation.cc), again evaluated with
// statistic_value. Brute-force counts use a relative tolerance of 1e-9 for
// "at least as extreme", and each check first asserts that no split statistic
// lies between 1e-12 and 1e-6 (relative) of the observed one, so that the
// count cannot depend on the tolerance: the engine's own 1e-14 must agree
// with it. Then the Monte Carlo, sequential-stopping and Clopper–Pearson
// formulas, the edge cases, split_count, and finally fixed-seed pins.
#include "core/permutation.h"

#include <algorithm>
#include <bit>
#include <catch2/catch.hpp>
#include <cfloat>
#include <cmath>
#include <cstdint>
#include <iomanip>
#include <set>
#include <string>
#include <vector>

#include "core/rng.h"
#include "core/statistic.h"

namespace {

using plumbline::exact_mode;
using plumbline::permutation_engine;
using plumbline::permutation_options;
using plumbline::permutation_result;
using plumbline::rng;
using plumbline::split_count;
using plumbline::test_kind;

constexpr test_kind all_tests[] = {test_kind::mean_diff, test_kind::median_diff, test_kind::welch,
                                   test_kind::ks,        test_kind::cvm,         test_kind::ad,
                                   test_kind::energy};

std::string name_of(test_kind t) {
  return std::string(plumbline::test_name(t));
}

// Uniform values on [lo, lo + width): continuous, so distinct almost surely.
std::vector<double> uniform_values(rng& gen, std::size_t count, double lo, double width) {
  std::vector<double> v(count);
  for (double& x : v)
    x = lo + width * gen.next_double();
  return v;
}

// Integer values 1..levels: heavy ties whose equal statistics are exactly equal.
std::vector<double> integer_values(rng& gen, std::size_t count, uint32_t levels) {
  std::vector<double> v(count);
  for (double& x : v)
    x = 1 + gen.bounded(levels);
  return v;
}

// Values on a 0.1 grid, as a checkweigher with 0.1 g resolution reports them.
std::vector<double> grid_values(rng& gen, std::size_t count, double lo, uint32_t steps) {
  std::vector<double> v(count);
  for (double& x : v)
    x = std::round(10 * lo + gen.bounded(steps)) / 10;
  return v;
}

Eigen::MatrixXd column(const std::vector<double>& v) {
  Eigen::MatrixXd m(static_cast<Eigen::Index>(v.size()), 1);
  for (std::size_t i = 0; i < v.size(); ++i)
    m(static_cast<Eigen::Index>(i), 0) = v[i];
  return m;
}

// Rows of `cols` values each, row-major from `v`.
Eigen::MatrixXd rows_of(const std::vector<double>& v, Eigen::Index cols) {
  const Eigen::Index r = static_cast<Eigen::Index>(v.size()) / cols;
  Eigen::MatrixXd m(r, cols);
  for (Eigen::Index i = 0; i < r; ++i)
    for (Eigen::Index c = 0; c < cols; ++c)
      m(i, c) = v[static_cast<std::size_t>(i * cols + c)];
  return m;
}

// A statistic in "comparison form": |T| for signed statistics, T otherwise,
// straight from core/statistic.h.
double comparison_value(test_kind t, const std::vector<double>& ref,
                        const std::vector<double>& rec) {
  const double v = t == test_kind::energy ? plumbline::energy_statistic(column(ref), column(rec))
                                          : plumbline::statistic_value(t, ref, rec);
  return plumbline::is_signed(t) ? std::fabs(v) : v;
}

// All split statistics and the observed one.
struct split_values {
  double observed = 0;
  std::vector<double> values;
};

// Count of split statistics at least as extreme as the observed one, with a
// relative tolerance `tol`.
uint64_t count_at(const split_values& s, double tol) {
  uint64_t c = 0;
  for (double v : s.values)
    if (v >= s.observed - tol * std::fabs(s.observed)) ++c;
  return c;
}

// The count at 1e-9, after requiring that it is the same at 1e-12 and 1e-6
// (no split statistic in the band where the tolerance would matter).
uint64_t unambiguous_count(const split_values& s) {
  const uint64_t tight = count_at(s, 1e-12), loose = count_at(s, 1e-6);
  INFO("exceedance count at tolerance 1e-12: " << tight << ", at 1e-6: " << loose);
  REQUIRE(tight == loose);
  return count_at(s, 1e-9);
}

// Every split of reference ++ recent into groups of the original sizes, by
// bitmask: bit i set puts pooled value i into the reference group.
template <typename Eval>
split_values enumerate_splits(std::size_t n, std::size_t m, Eval&& eval) {
  const std::size_t big_n = n + m;
  REQUIRE(big_n <= 20);
  split_values s;
  s.observed = eval((uint32_t{1} << n) - 1);
  for (uint32_t mask = 0; mask < (uint32_t{1} << big_n); ++mask)
    if (static_cast<std::size_t>(std::popcount(mask)) == n) s.values.push_back(eval(mask));
  return s;
}

split_values brute_force(test_kind t, const std::vector<double>& ref,
                         const std::vector<double>& rec) {
  std::vector<double> pooled(ref);
  pooled.insert(pooled.end(), rec.begin(), rec.end());
  return enumerate_splits(ref.size(), rec.size(), [&](uint32_t mask) {
    std::vector<double> a, b;
    for (std::size_t i = 0; i < pooled.size(); ++i)
      ((mask >> i) & 1 ? a : b).push_back(pooled[i]);
    return comparison_value(t, a, b);
  });
}

split_values brute_force_energy(const Eigen::MatrixXd& ref, const Eigen::MatrixXd& rec) {
  const Eigen::Index n = ref.rows(), m = rec.rows();
  Eigen::MatrixXd pooled(n + m, ref.cols());
  pooled << ref, rec;
  return enumerate_splits(static_cast<std::size_t>(n), static_cast<std::size_t>(m),
                          [&](uint32_t mask) {
                            Eigen::MatrixXd a(n, ref.cols()), b(m, ref.cols());
                            Eigen::Index ia = 0, ib = 0;
                            for (Eigen::Index i = 0; i < n + m; ++i) {
                              if ((mask >> i) & 1)
                                a.row(ia++) = pooled.row(i);
                              else
                                b.row(ib++) = pooled.row(i);
                            }
                            return plumbline::energy_statistic(a, b);
                          });
}

permutation_options exact_options(test_kind t) {
  permutation_options o;
  o.test = t;
  o.exact = exact_mode::always;
  return o;
}

permutation_options monte_carlo_options(test_kind t, uint64_t resamples) {
  permutation_options o;
  o.test = t;
  o.exact = exact_mode::never;
  o.resamples = resamples;
  return o;
}

void check_exact_result(const permutation_result& r, const split_values& brute) {
  const uint64_t expected_count = unambiguous_count(brute);
  CHECK(r.exact);
  CHECK_FALSE(r.stopped_early);
  CHECK_FALSE(r.constant_data);
  CHECK(r.resamples == brute.values.size());
  CHECK(r.exceedances == expected_count);
  CHECK(r.p_value ==
        static_cast<double>(expected_count) / static_cast<double>(brute.values.size()));
  CHECK(r.p_low == r.p_value);
  CHECK(r.p_high == r.p_value);
}

struct data_set {
  const char* label;
  std::vector<double> reference, recent;
};

// Small data sets for exact enumeration: both size orders (the engine draws
// the smaller group, so n < m draws the reference and n > m the recent
// sample), equal sizes (every |T| of a signed statistic appears twice), no
// ties and heavy ties, and one clear shift (p near the smallest possible).
std::vector<data_set> small_data_sets() {
  rng gen(314159);
  std::vector<data_set> sets;
  {
    auto ref = uniform_values(gen, 6, 20, 5), rec = uniform_values(gen, 9, 20.5, 5);
    sets.push_back({"continuous, n = 6 < m = 9", ref, rec});
  }
  {
    auto ref = uniform_values(gen, 9, 20, 5), rec = uniform_values(gen, 6, 21, 5);
    sets.push_back({"continuous, n = 9 > m = 6", ref, rec});
  }
  {
    auto ref = uniform_values(gen, 7, 20, 5), rec = uniform_values(gen, 7, 20, 5);
    sets.push_back({"continuous, n = m = 7", ref, rec});
  }
  {
    auto ref = uniform_values(gen, 8, 0, 1), rec = uniform_values(gen, 6, 3, 1);
    sets.push_back({"continuous, clear shift, n = 8, m = 6", ref, rec});
  }
  {
    auto ref = integer_values(gen, 7, 5), rec = integer_values(gen, 8, 5);
    sets.push_back({"integers 1..5, n = 7 < m = 8", ref, rec});
  }
  {
    auto ref = integer_values(gen, 10, 4), rec = integer_values(gen, 5, 4);
    for (double& x : rec)
      x += 1;
    sets.push_back({"integers with shift, n = 10 > m = 5", ref, rec});
  }
  {
    auto ref = integer_values(gen, 7, 3), rec = integer_values(gen, 7, 3);
    sets.push_back({"integers 1..3, n = m = 7", ref, rec});
  }
  {
    auto ref = grid_values(gen, 8, 125.0, 12), rec = grid_values(gen, 7, 125.3, 12);
    sets.push_back({"0.1 g grid near 125 g, n = 8, m = 7", ref, rec});
  }
  return sets;
}

// Replays the documented Monte Carlo draw with statistic_value as the judge:
// the buffer (drawn group then the other for mean-diff, welch and energy; the
// ascending pooled sort for the rank statistics) gets k steps of Fisher–Yates
// per resample from rng::bounded, never reset; buf[0..k) is the drawn group.
split_values replay_monte_carlo(test_kind t, const std::vector<double>& ref,
                                const std::vector<double>& rec, uint64_t seed, uint64_t resamples) {
  const bool drawn_is_recent = rec.size() <= ref.size();
  const auto& drawn = drawn_is_recent ? rec : ref;
  const auto& other = drawn_is_recent ? ref : rec;
  std::vector<double> buf(drawn);
  buf.insert(buf.end(), other.begin(), other.end());
  const bool rank_statistic = t == test_kind::median_diff || t == test_kind::ks ||
                              t == test_kind::cvm || t == test_kind::ad;
  if (rank_statistic) std::sort(buf.begin(), buf.end());
  const uint32_t big_n = static_cast<uint32_t>(buf.size());
  const uint32_t k = static_cast<uint32_t>(drawn.size());
  rng gen(seed);
  split_values s;
  s.observed = comparison_value(t, ref, rec);
  for (uint64_t b = 0; b < resamples; ++b) {
    for (uint32_t i = 0; i < k; ++i)
      std::swap(buf[i], buf[i + gen.bounded(big_n - i)]);
    const std::vector<double> d(buf.begin(), buf.begin() + k), o(buf.begin() + k, buf.end());
    s.values.push_back(drawn_is_recent ? comparison_value(t, o, d) : comparison_value(t, d, o));
  }
  return s;
}

// Binomial tail sums in long double, straight from the probability mass
// function: P(X >= c) and P(X <= c) for X ~ Binomial(n, p).
long double binomial_pmf(uint64_t k, uint64_t n, long double p) {
  const long double log_choose = std::lgamma(static_cast<long double>(n) + 1) -
                                 std::lgamma(static_cast<long double>(k) + 1) -
                                 std::lgamma(static_cast<long double>(n - k) + 1);
  return std::exp(log_choose + static_cast<long double>(k) * std::log(p) +
                  static_cast<long double>(n - k) * std::log1p(-p));
}
long double upper_tail(uint64_t c, uint64_t n, long double p) {
  long double s = 0;
  for (uint64_t k = c; k <= n; ++k)
    s += binomial_pmf(k, n, p);
  return s;
}
long double lower_tail(uint64_t c, uint64_t n, long double p) {
  long double s = 0;
  for (uint64_t k = 0; k <= c; ++k)
    s += binomial_pmf(k, n, p);
  return s;
}

// Clopper–Pearson at level 0.99 by its definition (Clopper & Pearson 1934):
// the lower end solves P(X >= c; p) = 0.005, the upper end P(X <= c; p) =
// 0.005. Checked by bracketing each root within a relative 1e-8.
void check_clopper_pearson(const permutation_result& r) {
  const uint64_t c = r.exceedances, n = r.resamples;
  INFO("exceedances " << c << " of " << n << ", interval [" << r.p_low << ", " << r.p_high
                      << "], p " << r.p_value);
  CHECK(r.p_low <= r.p_value);
  CHECK(r.p_value <= r.p_high);
  const long double half_alpha = 0.005L;
  if (c == 0) {
    CHECK(r.p_low == 0);
  } else {
    const long double lo = r.p_low;
    CHECK(upper_tail(c, n, lo * (1 - 1e-8L)) < half_alpha);
    CHECK(upper_tail(c, n, lo * (1 + 1e-8L)) > half_alpha);
  }
  if (c == n) {
    CHECK(r.p_high == 1);
  } else {
    const long double hi = r.p_high;
    CHECK(lower_tail(c, n, hi * (1 - 1e-8L)) > half_alpha);
    CHECK(lower_tail(c, n, hi * (1 + 1e-8L)) < half_alpha);
  }
}

bool same_result(const permutation_result& a, const permutation_result& b) {
  return a.test == b.test && a.statistic == b.statistic && a.p_value == b.p_value &&
         a.p_low == b.p_low && a.p_high == b.p_high && a.resamples == b.resamples &&
         a.exceedances == b.exceedances && a.exact == b.exact &&
         a.stopped_early == b.stopped_early && a.constant_data == b.constant_data &&
         a.n_reference == b.n_reference && a.n_recent == b.n_recent;
}

permutation_result run_ok(permutation_engine& engine, const std::vector<double>& ref,
                          const std::vector<double>& rec, const permutation_options& o,
                          uint64_t seed) {
  rng gen(seed);
  auto r = engine.run(ref, rec, o, gen);
  INFO((r.ok() ? std::string("ok") : r.err().message));
  REQUIRE(r.ok());
  return r.value();
}

permutation_result run_ok(const std::vector<double>& ref, const std::vector<double>& rec,
                          const permutation_options& o, uint64_t seed) {
  permutation_engine engine;
  return run_ok(engine, ref, rec, o, seed);
}

std::string error_of(const std::vector<double>& ref, const std::vector<double>& rec,
                     const permutation_options& o) {
  rng gen(1);
  auto r = plumbline::permutation_test(ref, rec, o, gen);
  REQUIRE_FALSE(r.ok());
  return r.err().message;
}

std::string row_error_of(const Eigen::MatrixXd& ref, const Eigen::MatrixXd& rec,
                         const permutation_options& o) {
  rng gen(1);
  permutation_engine engine;
  auto r = engine.run(ref, rec, o, gen);
  REQUIRE_FALSE(r.ok());
  return r.err().message;
}

using Catch::Matchers::Contains;

}  // namespace

TEST_CASE("Exact p-values equal a brute-force enumeration of all splits for every test",
          "[core][permutation]") {
  permutation_engine engine;
  for (const data_set& d : small_data_sets()) {
    for (test_kind t : all_tests) {
      INFO(d.label << ", test " << name_of(t));
      const split_values brute = brute_force(t, d.reference, d.recent);
      const permutation_result r = run_ok(engine, d.reference, d.recent, exact_options(t), 7);
      check_exact_result(r, brute);
      CHECK(r.test == t);
      CHECK(r.n_reference == d.reference.size());
      CHECK(r.n_recent == d.recent.size());
      const double direct = t == test_kind::energy
                                ? plumbline::energy_statistic(column(d.reference), column(d.recent))
                                : plumbline::statistic_value(t, d.reference, d.recent);
      CHECK(r.statistic == Approx(direct).epsilon(1e-13).margin(1e-300));
    }
  }
}

TEST_CASE("Exact energy p-values on rows equal a brute-force enumeration", "[core][permutation]") {
  rng gen(271828);
  struct row_set {
    const char* label;
    Eigen::MatrixXd reference, recent;
  };
  std::vector<row_set> sets;
  sets.push_back({"2-column continuous rows, n = 6 < m = 8",
                  rows_of(uniform_values(gen, 12, 0, 1), 2),
                  rows_of(uniform_values(gen, 16, 0.3, 1), 2)});
  sets.push_back({"2-column continuous rows, n = 9 > m = 5",
                  rows_of(uniform_values(gen, 18, 0, 1), 2),
                  rows_of(uniform_values(gen, 10, 0.5, 1), 2)});
  sets.push_back({"2-column integer rows, n = 7, m = 7", rows_of(integer_values(gen, 14, 3), 2),
                  rows_of(integer_values(gen, 14, 3), 2)});
  sets.push_back({"3-column continuous rows, n = 5, m = 7",
                  rows_of(uniform_values(gen, 15, 0, 1), 3),
                  rows_of(uniform_values(gen, 21, 0, 1.5), 3)});
  sets.push_back({"one-column matrices, n = 8, m = 6", column(uniform_values(gen, 8, 2, 1)),
                  column(uniform_values(gen, 6, 2.4, 1))});
  permutation_engine engine;
  for (const row_set& s : sets) {
    INFO(s.label);
    const split_values brute = brute_force_energy(s.reference, s.recent);
    rng g(11);
    auto r = engine.run(s.reference, s.recent, exact_options(test_kind::energy), g);
    REQUIRE(r.ok());
    check_exact_result(r.value(), brute);
    CHECK(r->statistic ==
          Approx(plumbline::energy_statistic(s.reference, s.recent)).epsilon(1e-13));
  }
}

TEST_CASE("Univariate tests give the same result on one-column matrices as on spans",
          "[core][permutation]") {
  rng gen(5);
  const auto ref = uniform_values(gen, 30, 0, 1), rec = uniform_values(gen, 25, 0.2, 1);
  for (test_kind t : all_tests) {
    INFO("test " << name_of(t));
    const permutation_options o = monte_carlo_options(t, 499);
    const permutation_result a = run_ok(ref, rec, o, 99);
    permutation_engine engine;
    rng g(99);
    auto b = engine.run(column(ref), column(rec), o, g);
    REQUIRE(b.ok());
    CHECK(same_result(a, b.value()));
  }
}

TEST_CASE("Monte Carlo exceedances equal a replay of the documented draw", "[core][permutation]") {
  rng gen(8675309);
  std::vector<data_set> sets;
  sets.push_back({"continuous, n = 40 > m = 30 (recent drawn)", uniform_values(gen, 40, 10, 2),
                  uniform_values(gen, 30, 10.3, 2)});
  sets.push_back({"continuous, n = 25 < m = 45 (reference drawn)", uniform_values(gen, 25, 10, 2),
                  uniform_values(gen, 45, 10.2, 2.5)});
  sets.push_back(
      {"integers 1..6, n = 36, m = 36", integer_values(gen, 36, 6), integer_values(gen, 36, 6)});
  const uint64_t resamples = 1500, seed = 424242;
  for (const data_set& d : sets) {
    for (test_kind t : all_tests) {
      INFO(d.label << ", test " << name_of(t));
      const split_values replay = replay_monte_carlo(t, d.reference, d.recent, seed, resamples);
      const uint64_t c = unambiguous_count(replay);
      const permutation_result r =
          run_ok(d.reference, d.recent, monte_carlo_options(t, resamples), seed);
      CHECK_FALSE(r.exact);
      CHECK(r.resamples == resamples);
      CHECK(r.exceedances == c);
      CHECK(r.p_value == static_cast<double>(c + 1) / static_cast<double>(resamples + 1));
    }
  }
}

TEST_CASE("Monte Carlo p-values agree with exact ones within sampling error",
          "[core][permutation]") {
  // A statistical check of the draw's uniformity over splits: with B = 20000
  // the Monte Carlo p has standard error sqrt(p (1 - p) / B); 4.5 standard
  // errors (common practice for a fixed-seed check) plus 1/B for the +1.
  const auto sets = small_data_sets();
  const uint64_t resamples = 20000;
  for (std::size_t i : {std::size_t{0}, std::size_t{1}, std::size_t{4}}) {
    const data_set& d = sets[i];
    for (test_kind t : all_tests) {
      INFO(d.label << ", test " << name_of(t));
      const double exact_p = run_ok(d.reference, d.recent, exact_options(t), 1).p_value;
      const permutation_result mc =
          run_ok(d.reference, d.recent, monte_carlo_options(t, resamples), 2026);
      const double se = std::sqrt(exact_p * (1 - exact_p) / static_cast<double>(resamples));
      CHECK(std::fabs(mc.p_value - exact_p) <= 4.5 * se + 1.0 / static_cast<double>(resamples));
    }
  }
}

TEST_CASE("Monte Carlo results depend on the seed and the data alone", "[core][permutation]") {
  rng gen(1001);
  // A borderline shift: p-values between about 0.04 and 0.2, where the
  // exceedance count out of 999 has a standard deviation of 6 to 13 between
  // seeds, so ten seeds give mostly distinct counts.
  const auto ref = uniform_values(gen, 40, 0, 1), rec = uniform_values(gen, 35, 0.08, 1);
  const auto big_ref = uniform_values(gen, 300, 0, 1), big_rec = uniform_values(gen, 200, 0, 1);
  SECTION("the same seed gives the same result") {
    for (test_kind t : all_tests) {
      INFO("test " << name_of(t));
      const permutation_options o = monte_carlo_options(t, 999);
      CHECK(same_result(run_ok(ref, rec, o, 77), run_ok(ref, rec, o, 77)));
    }
  }
  SECTION("a reused engine gives the same result as a fresh one") {
    permutation_engine engine;
    for (test_kind t : all_tests) {
      INFO("test " << name_of(t));
      const permutation_options o = monte_carlo_options(t, 999);
      const permutation_result fresh = run_ok(ref, rec, o, 77);
      const permutation_result fresh_big = run_ok(big_ref, big_rec, o, 5);
      CHECK(same_result(run_ok(engine, big_ref, big_rec, o, 5), fresh_big));
      CHECK(same_result(run_ok(engine, ref, rec, o, 77), fresh));
      CHECK(same_result(run_ok(engine, ref, rec, o, 77), fresh));
      CHECK(same_result(run_ok(engine, big_ref, big_rec, o, 5), fresh_big));
      // Runs of every other test, exact and swapped, leave no trace either.
      for (test_kind u : all_tests) {
        (void)run_ok(engine, rec, ref, monte_carlo_options(u, 50), 3);
        (void)run_ok(engine, {1, 2, 3, 4}, {2, 3, 5}, exact_options(u), 3);
      }
      CHECK(same_result(run_ok(engine, ref, rec, o, 77), fresh));
    }
  }
  SECTION("different seeds give different exceedance counts") {
    for (test_kind t : all_tests) {
      INFO("test " << name_of(t));
      const permutation_options o = monte_carlo_options(t, 999);
      std::set<uint64_t> counts;
      for (uint64_t seed = 1; seed <= 10; ++seed)
        counts.insert(run_ok(ref, rec, o, seed).exceedances);
      INFO("distinct exceedance counts over seeds 1..10: " << counts.size());
      CHECK(counts.size() >= 5);
    }
  }
}

TEST_CASE("Monte Carlo p-values are (1 + c) / (1 + B), never 0, with B resamples",
          "[core][permutation]") {
  rng gen(2718);
  const auto ref = uniform_values(gen, 30, 0, 1), null_rec = uniform_values(gen, 20, 0, 1);
  const auto far_rec = uniform_values(gen, 20, 10, 1);
  for (test_kind t : all_tests) {
    for (uint64_t resamples : {uint64_t{1}, uint64_t{99}, uint64_t{2000}}) {
      for (const auto* rec : {&null_rec, &far_rec}) {
        INFO("test " << name_of(t) << ", B = " << resamples
                     << (rec == &far_rec ? ", separated samples" : ", same distribution"));
        const permutation_result r = run_ok(ref, *rec, monte_carlo_options(t, resamples), 12);
        CHECK_FALSE(r.exact);
        CHECK_FALSE(r.stopped_early);
        CHECK(r.resamples == resamples);
        CHECK(r.exceedances <= resamples);
        CHECK(r.p_value > 0);
        CHECK(r.p_value ==
              static_cast<double>(r.exceedances + 1) / static_cast<double>(resamples + 1));
        check_clopper_pearson(r);
        // Fully separated samples of unequal sizes: only the observed split
        // is that extreme, so no draw of 20 from 50 reaches it (chance
        // 1 / C(50, 20) per draw).
        if (rec == &far_rec) {
          CHECK(r.exceedances == 0);
          CHECK(r.p_value == 1.0 / static_cast<double>(resamples + 1));
        }
      }
    }
  }
}

TEST_CASE("Sequential stopping ends after h exceedances with p = h / L", "[core][permutation]") {
  rng gen(99991);
  const auto ref = uniform_values(gen, 50, 0, 1), rec = uniform_values(gen, 40, 0, 1);
  const auto far_rec = uniform_values(gen, 40, 3, 1);
  for (test_kind t : all_tests) {
    for (uint64_t h : {uint64_t{1}, uint64_t{10}, uint64_t{25}}) {
      INFO("test " << name_of(t) << ", h = " << h);
      permutation_options o = monte_carlo_options(t, 9999);
      o.stop_after = h;
      const permutation_result r = run_ok(ref, rec, o, 31337);
      CHECK(r.stopped_early);
      CHECK_FALSE(r.exact);
      CHECK(r.resamples < o.resamples);
      CHECK(r.exceedances == h);
      CHECK(r.p_value == static_cast<double>(h) / static_cast<double>(r.resamples));
      check_clopper_pearson(r);
      // The stopped run is the prefix of the unstopped one: the same seed
      // without stopping sees h exceedances in the first L resamples and
      // h - 1 in the first L - 1.
      const permutation_result prefix =
          run_ok(ref, rec, monte_carlo_options(t, r.resamples), 31337);
      CHECK(prefix.exceedances == h);
      if (r.resamples > 1) {
        const permutation_result shorter =
            run_ok(ref, rec, monte_carlo_options(t, r.resamples - 1), 31337);
        CHECK(shorter.exceedances == h - 1);
      }
      // Strongly shifted data: fewer than h exceedances, so all B run.
      const permutation_result far = run_ok(ref, far_rec, o, 31337);
      CHECK_FALSE(far.stopped_early);
      CHECK(far.resamples == o.resamples);
      CHECK(far.exceedances < h);
      CHECK(far.p_value ==
            static_cast<double>(far.exceedances + 1) / static_cast<double>(o.resamples + 1));
    }
  }
}

TEST_CASE("A side with fewer than 2 values is an error naming the side", "[core][permutation]") {
  const std::vector<double> two = {1.0, 2.0}, one = {3.0}, none = {}, many = {1, 2, 3, 4, 5};
  for (test_kind t : all_tests) {
    INFO("test " << name_of(t));
    const permutation_options o = monte_carlo_options(t, 99);
    CHECK_THAT(error_of(one, many, o), Contains("reference") && Contains("1 value"));
    CHECK_THAT(error_of(none, many, o), Contains("reference") && Contains("0 values"));
    CHECK_THAT(error_of(many, one, o), Contains("recent") && Contains("1 value"));
    CHECK_THAT(error_of(two, none, o), Contains("recent") && Contains("0 values"));
    // Exactly 2 on each side is enough.
    CHECK(run_ok(two, {2.0, 5.0}, o, 1).n_recent == 2);
  }
  CHECK_THAT(row_error_of(rows_of({1, 2}, 2), rows_of({1, 2, 3, 4}, 2),
                          monte_carlo_options(test_kind::energy, 9)),
             Contains("reference"));
  CHECK_THAT(row_error_of(rows_of({1, 2, 3, 4}, 2), rows_of({1, 2}, 2),
                          monte_carlo_options(test_kind::energy, 9)),
             Contains("recent"));
}

TEST_CASE("NaN and infinite values are errors naming the side", "[core][permutation]") {
  const double nan = std::nan(""), inf = HUGE_VAL;
  const std::vector<double> good = {1, 2, 3, 4};
  for (test_kind t : all_tests) {
    INFO("test " << name_of(t));
    const permutation_options o = monte_carlo_options(t, 99);
    CHECK_THAT(error_of({1, nan, 3}, good, o), Contains("reference") && Contains("NaN"));
    CHECK_THAT(error_of(good, {1, 2, inf}, o), Contains("recent"));
    CHECK_THAT(error_of(good, {-inf, 2, 3}, o), Contains("recent"));
    // A NaN among otherwise equal values is not "constant data".
    CHECK_THAT(error_of({5, 5, 5}, {5, nan, 5}, o), Contains("recent"));
  }
  CHECK_THAT(row_error_of(rows_of({1, 2, 3, nan}, 2), rows_of({1, 2, 3, 4}, 2),
                          monte_carlo_options(test_kind::energy, 9)),
             Contains("reference"));
  CHECK_THAT(row_error_of(rows_of({1, 2, 3, 4}, 2), rows_of({inf, 2, 3, 4}, 2),
                          monte_carlo_options(test_kind::energy, 9)),
             Contains("recent"));
}

TEST_CASE("A pooled sample of one value gives p = 1 and constant_data", "[core][permutation]") {
  const std::vector<double> ref(12, 4.2), rec(9, 4.2);
  for (test_kind t : all_tests) {
    for (exact_mode e : {exact_mode::automatic, exact_mode::always, exact_mode::never}) {
      INFO("test " << name_of(t) << ", exact mode " << static_cast<int>(e));
      permutation_options o = monte_carlo_options(t, 999);
      o.exact = e;
      const permutation_result r = run_ok(ref, rec, o, 3);
      CHECK(r.constant_data);
      CHECK(r.p_value == 1);
      CHECK(r.statistic == 0);
      CHECK(std::isfinite(r.p_low));
      CHECK(std::isfinite(r.p_high));
      CHECK(r.n_reference == 12);
      CHECK(r.n_recent == 9);
    }
  }
  rng gen(1);
  permutation_engine engine;
  auto r =
      engine.run(rows_of(std::vector<double>(10, 1.5), 2), rows_of(std::vector<double>(8, 1.5), 2),
                 monte_carlo_options(test_kind::energy, 99), gen);
  REQUIRE(r.ok());
  CHECK(r->constant_data);
  CHECK(r->p_value == 1);
  // Every row the same row (1, 2): constant data, though the columns differ.
  const Eigen::MatrixXd same_rows = rows_of({1, 2, 1, 2, 1, 2}, 2);
  auto s = engine.run(same_rows, same_rows, monte_carlo_options(test_kind::energy, 99), gen);
  REQUIRE(s.ok());
  CHECK(s->constant_data);
  CHECK(s->p_value == 1);
}

TEST_CASE("Welch with zero variance in both groups gives a finite result", "[core][permutation]") {
  // Exact: of the C(6, 3) = 20 splits only the observed one and its mirror
  // have zero variance in both groups (statistic +-infinity, reported as
  // +-DBL_MAX); every other split is finite, so p = 2 / 20.
  struct levels {
    double low, high;
  };
  for (levels lv : {levels{1.0, 2.0}, levels{0.1, 0.3}, levels{1e6 + 0.1, 1e6 + 0.7}}) {
    INFO(std::setprecision(17) << "reference all " << lv.low << ", recent all " << lv.high);
    const std::vector<double> ref(3, lv.low), rec(3, lv.high);
    const permutation_result r = run_ok(ref, rec, exact_options(test_kind::welch), 1);
    CHECK(std::isfinite(r.statistic));
    CHECK(r.statistic == DBL_MAX);
    CHECK(std::isfinite(r.p_value));
    CHECK(r.resamples == 20);
    CHECK(r.exceedances == unambiguous_count(brute_force(test_kind::welch, ref, rec)));
    CHECK(r.exceedances == 2);
    CHECK(r.p_value == 0.1);
    const permutation_result mirrored = run_ok(rec, ref, exact_options(test_kind::welch), 1);
    CHECK(mirrored.statistic == -DBL_MAX);
    CHECK(mirrored.exceedances == unambiguous_count(brute_force(test_kind::welch, rec, ref)));
    CHECK(mirrored.p_value == 0.1);
    const permutation_result mc = run_ok(ref, rec, monte_carlo_options(test_kind::welch, 999), 1);
    CHECK(std::isfinite(mc.p_value));
    CHECK(mc.p_value > 0);
    CHECK(mc.p_value < 1);
  }
}

TEST_CASE("exact_mode chooses enumeration as documented", "[core][permutation]") {
  rng gen(606);
  const auto ref = uniform_values(gen, 5, 0, 1), rec = uniform_values(gen, 5, 0, 1);
  for (test_kind t : all_tests) {
    INFO("test " << name_of(t));
    permutation_options o = monte_carlo_options(t, 777);
    o.exact = exact_mode::automatic;
    o.exact_limit = 252;  // C(10, 5) = 252
    const permutation_result at_limit = run_ok(ref, rec, o, 1);
    CHECK(at_limit.exact);
    CHECK(at_limit.resamples == 252);
    o.exact_limit = 251;
    const permutation_result below = run_ok(ref, rec, o, 1);
    CHECK_FALSE(below.exact);
    CHECK(below.resamples == 777);
    o.exact = exact_mode::never;
    o.exact_limit = 100000;
    CHECK_FALSE(run_ok(ref, rec, o, 1).exact);
    // The default limit (100000) enumerates 10 + 10 values (184756 splits: no).
    permutation_options d;
    d.test = t;
    CHECK(run_ok(ref, rec, d, 1).exact);
    const auto ref10 = uniform_values(gen, 10, 0, 1), rec10 = uniform_values(gen, 10, 0, 1);
    d.resamples = 99;
    CHECK_FALSE(run_ok(ref10, rec10, d, 1).exact);
  }
  // always: more splits than max_exact_splits is an error, not a long wait.
  const auto ref30 = uniform_values(gen, 30, 0, 1), rec30 = uniform_values(gen, 30, 0, 1);
  permutation_options o = exact_options(test_kind::mean_diff);
  CHECK_THAT(error_of(ref30, rec30, o), Contains("118264581564861424") && Contains("splits"));
  const auto ref100 = uniform_values(gen, 100, 0, 1), rec100 = uniform_values(gen, 100, 0, 1);
  CHECK_THAT(error_of(ref100, rec100, o), Contains("more than 2^64"));
  o.test = test_kind::energy;
  CHECK_THAT(error_of(ref30, rec30, o), Contains("splits"));
}

TEST_CASE("Option and shape errors are reported, not run", "[core][permutation]") {
  rng gen(7);
  const auto ref = uniform_values(gen, 10, 0, 1), rec = uniform_values(gen, 10, 0, 1);
  permutation_options o = monte_carlo_options(test_kind::ad, 0);
  CHECK_THAT(error_of(ref, rec, o), Contains("resamples"));
  o.resamples = plumbline::max_resamples + 1;
  CHECK_THAT(error_of(ref, rec, o), Contains("resamples"));
  o.resamples = 99;
  o.ci_level = 1.0;
  CHECK_THAT(error_of(ref, rec, o), Contains("level"));

  SECTION("energy rows of different widths") {
    CHECK_THAT(row_error_of(rows_of(uniform_values(gen, 8, 0, 1), 2),
                            rows_of(uniform_values(gen, 9, 0, 1), 3),
                            monte_carlo_options(test_kind::energy, 9)),
               Contains("2") && Contains("3"));
  }
  SECTION("energy above max_energy_pooled rows") {
    const std::size_t half = plumbline::max_energy_pooled / 2;
    const auto big_ref = uniform_values(gen, half, 0, 1),
               big_rec = uniform_values(gen, half + 1, 0, 1);
    CHECK_THAT(error_of(big_ref, big_rec, monte_carlo_options(test_kind::energy, 9)),
               Contains("4096"));
    // Exactly at the limit runs.
    CHECK(run_ok(big_ref, std::vector<double>(big_rec.begin(), big_rec.end() - 1),
                 monte_carlo_options(test_kind::energy, 2), 1)
              .resamples == 2);
  }
  SECTION("univariate tests on rows of several values") {
    for (test_kind t : all_tests) {
      if (t == test_kind::energy) continue;
      INFO("test " << name_of(t));
      CHECK_THAT(row_error_of(rows_of(uniform_values(gen, 8, 0, 1), 2),
                              rows_of(uniform_values(gen, 8, 0, 1), 2), monte_carlo_options(t, 9)),
                 Contains(name_of(t)) && Contains("energy"));
    }
  }
}

TEST_CASE("split_count gives binomial coefficients and saturates", "[core][permutation]") {
  // Known values: C(16, 7) = 11440 and C(60, 30) = 118264581564861424 (both
  // from memory; recomputed below by Pascal's rule).
  CHECK(split_count(7, 9) == 11440);
  CHECK(split_count(9, 7) == 11440);
  CHECK(split_count(30, 30) == 118264581564861424ULL);
  CHECK(split_count(100, 100) == UINT64_MAX);
  CHECK(split_count(1, 1) == 2);
  CHECK(split_count(0, 5) == 1);
  // Pascal's triangle with saturating addition, independent of split_count's
  // multiplicative formula. Row 67 still fits in 64 bits (C(67, 33) =
  // 14226520737620288370); C(68, 34) does not.
  std::vector<std::vector<uint64_t>> pascal(121);
  for (std::size_t r = 0; r < pascal.size(); ++r) {
    pascal[r].assign(r + 1, 1);
    for (std::size_t c = 1; c < r; ++c) {
      const uint64_t a = pascal[r - 1][c - 1], b = pascal[r - 1][c];
      pascal[r][c] = a > UINT64_MAX - b ? UINT64_MAX : a + b;
    }
  }
  for (std::size_t r = 0; r < pascal.size(); ++r)
    for (std::size_t c = 0; c <= r; ++c) {
      INFO("C(" << r << ", " << c << ")");
      REQUIRE(split_count(c, r - c) == pascal[r][c]);
    }
  CHECK(pascal[16][7] == 11440);
  CHECK(pascal[60][30] == 118264581564861424ULL);
  CHECK(split_count(33, 34) == 14226520737620288370ULL);
  CHECK(split_count(34, 34) == UINT64_MAX);
}

TEST_CASE("Clopper-Pearson ends solve their defining binomial tail equations",
          "[core][permutation]") {
  rng gen(4711);
  const auto ref = uniform_values(gen, 40, 0, 1), rec = uniform_values(gen, 30, 0.15, 1);
  for (test_kind t : all_tests) {
    for (uint64_t resamples : {uint64_t{20}, uint64_t{999}}) {
      INFO("test " << name_of(t) << ", B = " << resamples);
      check_clopper_pearson(run_ok(ref, rec, monte_carlo_options(t, resamples), 8));
    }
  }
}

TEST_CASE("Every generator kernel gives the same permutation results bit for bit",
          "[core][permutation]") {
  // core/rng.h, "Kernels": rng::use_kernel switches the bulk draws between
  // the AVX2 and the generic code. Results and the generator's final state
  // must not depend on it. Sizes: tiny pooled samples, where swap partners
  // inside a group of four positions are common (the one-at-a-time path of
  // the fused shuffle in permutation.cc), drawn groups of every size mod 4,
  // several blocks of draws per resample, and block mode.
  if (!rng::vector_path_is_avx2()) WARN("no AVX2 on this CPU: both runs use the generic kernel");
  struct sizes {
    std::size_t n, m;
    uint32_t block;
  };
  const sizes cases[] = {{4, 3, 1},     {7, 9, 1},     {40, 30, 1},
                         {203, 201, 1}, {390, 402, 1}, {60, 45, 3}};
  const std::vector<plumbline::rng::kernel> kernels = {rng::kernel::generic, rng::kernel::avx2};
  rng data(5151);
  for (const sizes& c : cases) {
    const auto ref = uniform_values(data, c.n, 10, 2), rec = uniform_values(data, c.m, 10.1, 2);
    const auto ref_int = integer_values(data, c.n, 5), rec_int = integer_values(data, c.m, 5);
    for (test_kind t : all_tests) {
      for (const bool ties : {false, true}) {
        INFO("n = " << c.n << ", m = " << c.m << ", block " << c.block << ", test " << name_of(t)
                    << (ties ? ", integer data" : ", continuous data"));
        permutation_options o = monte_carlo_options(t, 301);
        o.block_length = c.block;
        std::vector<permutation_result> results;
        std::vector<rng::state_type> states;
        for (const rng::kernel k : kernels) {
          permutation_engine engine;
          rng gen(8080);
          gen.use_kernel(k);
          auto r = ties ? engine.run(ref_int, rec_int, o, gen) : engine.run(ref, rec, o, gen);
          REQUIRE(r.ok());
          results.push_back(r.value());
          states.push_back(gen.state());
        }
        CHECK(same_result(results[0], results[1]));
        CHECK(states[0] == states[1]);
      }
    }
  }
}

TEST_CASE("Fixed-seed pins: exceedances and p-values for seed 20261201",
          "[core][permutation][pin]") {
  // PINS. These values were generated once from the implementation, after the
  // brute-force checks above and the replay on these very data (below) had
  // agreed with it; they make any change of results visible. A deliberate
  // change of the draw or the statistics must update them, with the reason
  // in the commit message. As a sanity check at the time, the statistics
  // agreed with SciPy 1.10 to 1e-14 (mean, median, Welch t, ks_2samp,
  // cramervonmises_2samp, energy_distance) and the Monte Carlo p-values were
  // near the asymptotic ones (Welch 0.547, KS 0.310, CvM 0.381).
  // Data: rng(20261201); reference: 40 values round(10 u, 1); recent: 30
  // values round(10 u + 1.5, 1), u = next_double() in that order.
  rng data_gen(20261201);
  std::vector<double> ref(40), rec(30);
  for (double& x : ref)
    x = std::round(100 * data_gen.next_double()) / 10;
  for (double& x : rec)
    x = std::round(100 * data_gen.next_double() + 15) / 10;
  struct pin {
    test_kind test;
    double statistic;
    uint64_t exceedances;
  };
  const pin pins[] = {
      {test_kind::mean_diff, -0.41916666666666647, 533},
      {test_kind::median_diff, -0.84999999999999964, 575},
      {test_kind::welch, -0.60544673328957366, 535},
      {test_kind::ks, 0.22500000000000009, 286},
      {test_kind::cvm, 0.15535714285714342, 371},
      {test_kind::ad, 1.0943314428997941, 302},
      {test_kind::energy, 3.6269047619047736, 287},
  };
  const uint64_t resamples = 999, seed = 20261201;
  for (const pin& p : pins) {
    INFO("test " << name_of(p.test));
    const permutation_result r = run_ok(ref, rec, monte_carlo_options(p.test, resamples), seed);
    // Plausibility: the replay of the documented draw, judged by
    // statistic_value, sees the same exceedances.
    CHECK(r.exceedances ==
          unambiguous_count(replay_monte_carlo(p.test, ref, rec, seed, resamples)));
    // The pins.
    CHECK(r.statistic == Approx(p.statistic).epsilon(1e-12));
    CHECK(r.exceedances == p.exceedances);
    CHECK(r.p_value == static_cast<double>(p.exceedances + 1) / 1000.0);
    CHECK(r.resamples == resamples);
  }
}
