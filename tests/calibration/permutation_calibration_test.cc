// permutation_calibration_test.cc: Monte Carlo calibration of the permutation engine.
//
// Seeded, bounded simulations that hold core/permutation.h to facts of
// statistics: the size of every test under H0 (continuous, heavy-tailed,
// skewed and tied data), the uniformity of Monte Carlo p-values on their grid,
// power that grows with a shift, the studentized test's validity under
// unequal variances, and the agreement of Monte Carlo and sequential p-values
// with exact enumeration. Every band names its source and its false-failure
// probability. Data come from plumbline::rng alone (Box–Muller normals and
// transforms of them), so each case is reproducible from its seed. Each case
// reports its observed rates and its CPU time with WARN; the whole file needs
// about 20 s of one core in a RelWithDebInfo build.
#include <Eigen/Core>
#include <algorithm>
#include <array>
#include <catch2/catch.hpp>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <ctime>
#include <limits>
#include <map>
#include <span>
#include <string>
#include <vector>

#include "core/permutation.h"
#include "core/rng.h"
#include "core/statistic.h"

namespace {

using plumbline::exact_mode;
using plumbline::permutation_engine;
using plumbline::permutation_options;
using plumbline::permutation_result;
using plumbline::rng;
using plumbline::test_kind;

constexpr double alpha = 0.05;
constexpr double pi = 3.14159265358979323846;

// ---------------------------------------------------------------------------
// Data.
// ---------------------------------------------------------------------------

// Standard normal draws by the Box–Muller transform (Box & Muller 1958), both
// outputs of each pair used. next_double() lies on [0, 1), so 1 - u lies on
// (0, 1] and its logarithm is finite.
class normal_draws {
 public:
  explicit normal_draws(uint64_t seed) : gen_(seed) {}

  double next() {
    if (have_spare_) {
      have_spare_ = false;
      return spare_;
    }
    const double u1 = 1.0 - gen_.next_double();  // (0, 1]
    const double u2 = gen_.next_double();
    const double r = std::sqrt(-2.0 * std::log(u1));
    spare_ = r * std::sin(2.0 * pi * u2);
    have_spare_ = true;
    return r * std::cos(2.0 * pi * u2);
  }

 private:
  rng gen_;
  double spare_ = 0;
  bool have_spare_ = false;
};

// The populations of the H0 simulations.
//   normal      N(0, 1).
//   student_t3  Student's t with 3 df, Z / sqrt(chi2_3 / 3): heavy tails
//               (infinite fourth moment).
//   lognormal   exp(Z): strongly right-skewed.
//   quantised   round(2 Z) / 2: a gauge resolution of half a standard
//               deviation, the coarsest the rule of ten allows (resolution at
//               most a tenth of the 6-sd spread; common practice). A pooled
//               sample of 50 holds about 10 distinct values: many ties.
enum class population { normal, student_t3, lognormal, quantised };

const char* population_name(population p) {
  switch (p) {
    case population::normal:
      return "normal";
    case population::student_t3:
      return "t3";
    case population::lognormal:
      return "lognormal";
    case population::quantised:
      return "quantised";
  }
  return "";
}

double draw(population p, normal_draws& z) {
  switch (p) {
    case population::normal:
      return z.next();
    case population::student_t3: {
      const double num = z.next();
      double chi2 = 0;
      for (int i = 0; i < 3; ++i) {
        const double w = z.next();
        chi2 += w * w;
      }
      return num / std::sqrt(chi2 / 3.0);
    }
    case population::lognormal:
      return std::exp(z.next());
    case population::quantised:
      return std::round(2.0 * z.next()) / 2.0;
  }
  return 0;
}

// One configuration of the engine under test: a statistic, on 1-D values or
// on 2-D rows (energy alone takes rows).
struct configuration {
  test_kind test;
  bool rows;
  const char* label;
};

constexpr std::array<configuration, 8> all_configurations{{
    {test_kind::mean_diff, false, "mean-diff"},
    {test_kind::median_diff, false, "median-diff"},
    {test_kind::welch, false, "welch"},
    {test_kind::ks, false, "ks"},
    {test_kind::cvm, false, "cvm"},
    {test_kind::ad, false, "ad"},
    {test_kind::energy, false, "energy"},
    {test_kind::energy, true, "energy-2d"},
}};
constexpr std::size_t configuration_count = all_configurations.size();

// Two samples, held both as values (1-D) and as two-column rows (2-D).
struct samples {
  std::vector<double> reference, recent;
  Eigen::MatrixXd reference_rows, recent_rows;
};

// Reference values from p, recent values from p plus `shift`; rows likewise,
// the shift on the first column. `recent_scale` multiplies recent values
// before the shift, and `reference_scale` reference values.
void fill(samples& s, population p, std::size_t n, std::size_t m, normal_draws& z, double shift = 0,
          double reference_scale = 1, double recent_scale = 1) {
  s.reference.resize(n);
  s.recent.resize(m);
  for (double& v : s.reference)
    v = reference_scale * draw(p, z);
  for (double& v : s.recent)
    v = shift + recent_scale * draw(p, z);
  s.reference_rows.resize(static_cast<Eigen::Index>(n), 2);
  s.recent_rows.resize(static_cast<Eigen::Index>(m), 2);
  for (Eigen::Index i = 0; i < s.reference_rows.rows(); ++i)
    for (Eigen::Index j = 0; j < 2; ++j)
      s.reference_rows(i, j) = reference_scale * draw(p, z);
  for (Eigen::Index i = 0; i < s.recent_rows.rows(); ++i)
    for (Eigen::Index j = 0; j < 2; ++j)
      s.recent_rows(i, j) = (j == 0 ? shift : 0.0) + recent_scale * draw(p, z);
}

// Runs one configuration; a run that returns an error fails the case.
permutation_result run(permutation_engine& engine, const configuration& c, const samples& s,
                       permutation_options options, rng& gen) {
  options.test = c.test;
  auto r = c.rows ? engine.run(s.reference_rows, s.recent_rows, options, gen)
                  : engine.run(std::span<const double>(s.reference),
                               std::span<const double>(s.recent), options, gen);
  if (!r.ok()) FAIL(std::string(c.label) + ": " + r.err().message);
  return r.value();
}

double binomial_sd(double p, int r) {
  return std::sqrt(p * (1 - p) / r);
}

// CPU time of this process since construction (the suite is single-threaded).
class cpu_timer {
 public:
  double seconds() const { return static_cast<double>(std::clock() - start_) / CLOCKS_PER_SEC; }

 private:
  std::clock_t start_ = std::clock();
};

std::string fixed(double v, int digits = 4) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.*f", digits, v);
  return buf;
}

// P(Binom(b, q) <= c_max): the chance that a Monte Carlo test with b
// resamples rejects (at most c_max exceedances) when the exact permutation
// tail is q. Direct summation of the binomial pmf (textbook).
double mc_rejection_probability(double q, int b = 199, int c_max = 9) {
  if (q <= 0) return 1;
  if (q >= 1) return 0;
  double pmf = std::pow(1 - q, b), cdf = pmf;
  for (int k = 0; k < c_max; ++k) {
    pmf *= static_cast<double>(b - k) / (k + 1) * (q / (1 - q));
    cdf += pmf;
  }
  return std::min(cdf, 1.0);
}

// ---------------------------------------------------------------------------
// Exact permutation tails on tied data, by enumeration over tie groups.
//
// For data on a grid, a split is fixed, as far as any of these statistics can
// tell, by how many members d_g of each tie group (of size c_g) go to the
// recent sample: prod_g C(c_g, d_g) of the C(N, m) splits share that count
// vector. Summing the weights over count vectors by dynamic programming gives
// the exact tail P*(T* >= T_obs) over all splits, independently of the engine.
// Values are integers here (half-units for the quantised population, ranks
// for continuous data), so ties are exact. The weights are integers below
// 2^53, exact in double. The enumeration is checked against SciPy below.
// ---------------------------------------------------------------------------

using grid_values = std::vector<int64_t>;

struct tie_group {
  int64_t value;
  int count;
};

std::vector<tie_group> tie_groups(const grid_values& reference, const grid_values& recent) {
  grid_values pooled(reference);
  pooled.insert(pooled.end(), recent.begin(), recent.end());
  std::sort(pooled.begin(), pooled.end());
  std::vector<tie_group> groups;
  for (int64_t v : pooled) {
    if (groups.empty() || groups.back().value != v)
      groups.push_back({v, 1});
    else
      ++groups.back().count;
  }
  return groups;
}

// C(a, b) for 0 <= b <= a <= size, as doubles (Pascal's triangle).
class binomial_table {
 public:
  explicit binomial_table(int size) : c_(static_cast<std::size_t>(size + 1)) {
    for (int a = 0; a <= size; ++a) {
      c_[static_cast<std::size_t>(a)].assign(static_cast<std::size_t>(a + 1), 1.0);
      for (int b = 1; b < a; ++b)
        c_[static_cast<std::size_t>(a)][static_cast<std::size_t>(b)] =
            c_[static_cast<std::size_t>(a - 1)][static_cast<std::size_t>(b - 1)] +
            c_[static_cast<std::size_t>(a - 1)][static_cast<std::size_t>(b)];
    }
  }
  double operator()(int a, int b) const {
    if (b < 0 || a < 0 || b > a) return 0;
    return c_[static_cast<std::size_t>(a)][static_cast<std::size_t>(b)];
  }

 private:
  std::vector<std::vector<double>> c_;
};

const binomial_table& binomials() {
  static const binomial_table table(64);
  return table;
}

int64_t abs64(int64_t v) {
  return v < 0 ? -v : v;
}

int64_t sum_of(const grid_values& v) {
  int64_t s = 0;
  for (int64_t x : v)
    s += x;
  return s;
}

// mean-diff: |mean(y) - mean(x)| is a increasing function of
// |a N - A m|, with a the recent sum and A the pooled sum.
double exact_tail_mean_diff(const grid_values& reference, const grid_values& recent) {
  const binomial_table& choose = binomials();
  const int n = static_cast<int>(reference.size()), m = static_cast<int>(recent.size());
  const int64_t big_n = n + m, total = sum_of(reference) + sum_of(recent);
  const int64_t observed = abs64(sum_of(recent) * big_n - total * m);
  const auto groups = tie_groups(reference, recent);
  const int64_t lo = m * std::min<int64_t>(0, groups.front().value);
  const int64_t hi = m * std::max<int64_t>(0, groups.back().value);
  const std::size_t width = static_cast<std::size_t>(hi - lo + 1);
  // w[r * width + (a - lo)]: weight of count vectors so far with r recent
  // members summing to a.
  std::vector<double> w(static_cast<std::size_t>(m + 1) * width, 0.0), next(w.size());
  w[static_cast<std::size_t>(-lo)] = 1;
  for (const tie_group& g : groups) {
    std::fill(next.begin(), next.end(), 0.0);
    for (int r = 0; r <= m; ++r)
      for (std::size_t i = 0; i < width; ++i) {
        const double weight = w[static_cast<std::size_t>(r) * width + i];
        if (weight == 0) continue;
        for (int d = 0; d <= std::min(g.count, m - r); ++d) {
          // a + d * value stays within [lo, hi] since r + d <= m.
          const int64_t j = static_cast<int64_t>(i) + d * g.value;
          next[static_cast<std::size_t>(r + d) * width + static_cast<std::size_t>(j)] +=
              weight * choose(g.count, d);
        }
      }
    w.swap(next);
  }
  double exceed = 0;
  for (std::size_t i = 0; i < width; ++i) {
    const int64_t a = lo + static_cast<int64_t>(i);
    if (abs64(a * big_n - total * m) >= observed)
      exceed += w[static_cast<std::size_t>(m) * width + i];
  }
  return exceed / choose(n + m, m);
}

// The sum of the two middle values of a sorted copy (twice the median).
int64_t twice_median(grid_values v) {
  std::sort(v.begin(), v.end());
  const std::size_t k = v.size();
  return v[(k - 1) / 2] + v[k / 2];
}

// median-diff: |median(y) - median(x)| = |2 med(y) - 2 med(x)| / 2. The state
// of a partial count vector is the number r of recent members so far and the
// values of the four order statistics that make the two medians, once
// reached (ranks are 1-based within each sample).
double exact_tail_median_diff(const grid_values& reference, const grid_values& recent) {
  const binomial_table& choose = binomials();
  const int n = static_cast<int>(reference.size()), m = static_cast<int>(recent.size());
  const int y1 = (m - 1) / 2 + 1, y2 = m / 2 + 1, x1 = (n - 1) / 2 + 1, x2 = n / 2 + 1;
  const int64_t observed = abs64(twice_median(recent) - twice_median(reference));
  constexpr int64_t unset = std::numeric_limits<int64_t>::min();
  using state = std::array<int64_t, 5>;  // r, y_(y1), y_(y2), x_(x1), x_(x2)
  std::map<state, double> states{{state{0, unset, unset, unset, unset}, 1.0}};
  int t = 0;  // pooled members so far
  for (const tie_group& g : tie_groups(reference, recent)) {
    std::map<state, double> next;
    for (const auto& [s, weight] : states) {
      const int r = static_cast<int>(s[0]), o = t - r;
      for (int d = 0; d <= std::min(g.count, m - r); ++d) {
        const int e = g.count - d;
        if (o + e > n) continue;
        state ns = s;
        ns[0] = r + d;
        if (r < y1 && y1 <= r + d) ns[1] = g.value;
        if (r < y2 && y2 <= r + d) ns[2] = g.value;
        if (o < x1 && x1 <= o + e) ns[3] = g.value;
        if (o < x2 && x2 <= o + e) ns[4] = g.value;
        next[ns] += weight * choose(g.count, d);
      }
    }
    states.swap(next);
    t += g.count;
  }
  double exceed = 0;
  for (const auto& [s, weight] : states)
    if (s[0] == m && abs64(s[1] + s[2] - s[3] - s[4]) >= observed) exceed += weight;
  return exceed / choose(n + m, m);
}

// ks: n m D = max over tie-group ends of |r n - (t - r) m|, with t pooled and
// r recent members up to the group end. P*(n m D >= k) is one minus the
// weight of the count vectors that stay below k at every group end; those
// that reach k are counted as they do, times their completions.
double exact_tail_ks_at(const std::vector<tie_group>& groups, int n, int m, int64_t k) {
  if (k <= 0) return 1;
  const binomial_table& choose = binomials();
  const int big_n = n + m;
  std::vector<double> w(static_cast<std::size_t>(m + 1), 0.0), next(w.size());
  w[0] = 1;
  double exceed = 0;
  int t = 0;
  for (const tie_group& g : groups) {
    std::fill(next.begin(), next.end(), 0.0);
    const int t_end = t + g.count;
    for (int r = 0; r <= m; ++r) {
      if (w[static_cast<std::size_t>(r)] == 0) continue;
      for (int d = 0; d <= std::min(g.count, m - r); ++d) {
        const int r_end = r + d;
        const double weight = w[static_cast<std::size_t>(r)] * choose(g.count, d);
        const int64_t gap =
            abs64(static_cast<int64_t>(r_end) * n - static_cast<int64_t>(t_end - r_end) * m);
        if (gap >= k)
          exceed += weight * choose(big_n - t_end, m - r_end);
        else
          next[static_cast<std::size_t>(r_end)] += weight;
      }
    }
    w.swap(next);
    t = t_end;
  }
  return exceed / choose(big_n, m);
}

int64_t ks_gap(const grid_values& reference, const grid_values& recent) {
  const int n = static_cast<int>(reference.size()), m = static_cast<int>(recent.size());
  grid_values x(reference), y(recent);
  std::sort(x.begin(), x.end());
  std::sort(y.begin(), y.end());
  int64_t best = 0;
  std::size_t i = 0, j = 0;
  while (i < x.size() || j < y.size()) {
    const int64_t v = j == y.size() || (i < x.size() && x[i] <= y[j]) ? x[i] : y[j];
    while (i < x.size() && x[i] == v)
      ++i;
    while (j < y.size() && y[j] == v)
      ++j;
    best = std::max(best, abs64(static_cast<int64_t>(j) * n - static_cast<int64_t>(i) * m));
  }
  return best;
}

double exact_tail_ks(const grid_values& reference, const grid_values& recent) {
  return exact_tail_ks_at(tie_groups(reference, recent), static_cast<int>(reference.size()),
                          static_cast<int>(recent.size()), ks_gap(reference, recent));
}

// Values on the half-unit grid as integers.
grid_values half_units(const std::vector<double>& v) {
  grid_values out;
  out.reserve(v.size());
  for (double x : v)
    out.push_back(std::llround(2.0 * x));
  return out;
}

// SciPy 1.10.1, /usr/bin/python3: scipy.stats.permutation_test((x, y), f,
// permutation_type='independent', vectorized=False, n_resamples=np.inf,
// alternative='greater') with x = [-1, -0.5, -0.5, 0, 0, 0.5, 0.5, 1.5],
// y = [-0.5, 0, 0.5, 1, 1, 2] and f = |mean(y) - mean(x)|, |median(y) -
// median(x)|, ks_2samp(x, y).statistic: exact p = 0.21312021312021312,
// 0.3123543123543124, 0.43656343656343655 over all 3003 splits (SciPy counts
// T* >= T_obs - 1e-14 |T_obs|, ties included, as the engine does).
// For 30 + 20 distinct values, the exact null distribution of D from
// scipy.stats._stats_py._attempt_exact_2kssamp(30, 20, 10, h / 60,
// 'two-sided'), h = 1..60, gives sum_h P(D = h/60) P(Binom(199, P(D >= h/60))
// <= 9) = 0.04267972394108907.
TEST_CASE("The tie-group enumeration reproduces SciPy's exact permutation p-values",
          "[calibration][permutation][enumeration]") {
  const std::vector<double> x{-1, -0.5, -0.5, 0, 0, 0.5, 0.5, 1.5};
  const std::vector<double> y{-0.5, 0, 0.5, 1, 1, 2};
  CHECK(exact_tail_mean_diff(half_units(x), half_units(y)) ==
        Approx(0.21312021312021312).epsilon(1e-12));
  CHECK(exact_tail_median_diff(half_units(x), half_units(y)) ==
        Approx(0.3123543123543124).epsilon(1e-12));
  CHECK(exact_tail_ks(half_units(x), half_units(y)) == Approx(0.43656343656343655).epsilon(1e-12));

  // Continuous data: 50 distinct values (the order is immaterial); tails P(nm D >= 10 h).
  grid_values ref(30), rec(20);
  for (int i = 0; i < 30; ++i)
    ref[static_cast<std::size_t>(i)] = 2 * i;
  for (int j = 0; j < 20; ++j)
    rec[static_cast<std::size_t>(j)] = 2 * j + 1;
  const auto groups = tie_groups(ref, rec);
  double rate = 0;
  for (int h = 1; h <= 60; ++h) {
    const double tail = exact_tail_ks_at(groups, 30, 20, 10 * h);
    const double atom = tail - exact_tail_ks_at(groups, 30, 20, 10 * (h + 1));
    rate += atom * mc_rejection_probability(tail);
  }
  rate += (1 - exact_tail_ks_at(groups, 30, 20, 10)) * mc_rejection_probability(1);
  CHECK(rate == Approx(0.04267972394108907).epsilon(1e-10));
}

// ---------------------------------------------------------------------------
// 1. Size under H0.
//
// n = 30, m = 20, B = 199, so (B + 1) alpha = 10 is an integer and a test
// rejects when at most 9 of the 199 resampled statistics reach the observed
// one. For exchangeable data P(p <= alpha) <= alpha, with equality when the
// statistic has no ties across splits (Phipson & Smyth 2010; Lehmann &
// Romano, Testing Statistical Hypotheses, 3rd ed., Thm 15.2.1: from memory).
//
// Expected rate for continuous data, per configuration:
//   mean-diff, welch, ad, energy: 0.05 (no ties across splits).
//   cvm: 0.04995; ks: 0.04268. Rank statistics on a lattice, so their
//     permutation distribution for continuous data is the exact null
//     distribution, and the rate is sum_t P(T = t) P(Binom(199, P(T >= t))
//     <= 9). ks: from SciPy's exact null distribution (see the enumeration
//     case above), 0.04267972394108907. cvm: from the frequency table of U
//     built by the recursion of scipy.stats._hypotests._pval_cvm_2samp_exact
//     (Xiao, Gordon & Yakovlev 2006; SciPy 1.10.1, /usr/bin/python3),
//     10805 values, largest atom 0.0021: 0.049949453043392766.
//   median-diff: at most 0.05, by an amount that depends on the data (distinct
//     splits can share the middle order statistics, so the statistic ties
//     across splits and counting ties as exceedances is conservative).
// Quantised data: every statistic ties across splits, so every test is
//   conservative by a data-dependent amount. For mean-diff, median-diff and
//   ks the expected count is computed per data set by the tie-group
//   enumeration: sum_i P(Binom(199, q_i) <= 9), q_i the exact tail of data
//   set i, with variance sum_i pi_i (1 - pi_i) (the runs are independent
//   given the data).
//
// Bands: expected +- 4 binomial sd (R = 4000). Where only the upper side is a
// fact (median-diff on continuous data; welch, cvm, ad, energy on quantised
// data) the band is [alpha / 2, alpha + 4 sd]: the lower limit is a
// judgment, no source (a test that keeps less than half its size has lost too
// much; it still catches a test that never rejects). False-failure
// probability of one two-sided 4-sd band, exact binomial at R = 4000 and
// p = 0.05, 0.0427 or 0.04995 (SciPy binom.cdf + binom.sf at the limits):
// below 8.1e-5; of the upper side alone 5.3e-5; over the 32 bands below
// 2.6e-3. CPU time: about 2.5 s per population, 4 s for quantised data (the
// enumeration).
// ---------------------------------------------------------------------------

constexpr int size_replications = 4000;
constexpr std::size_t size_n = 30, size_m = 20;

// Expected rejection rate for continuous data, or a negative value where only
// the upper side holds.
double continuous_expected_rate(const configuration& c) {
  switch (c.test) {
    case test_kind::ks:
      return 0.04267972394108907;
    case test_kind::cvm:
      return 0.049949453043392766;
    case test_kind::median_diff:
      return -1;
    default:
      return alpha;
  }
}

struct size_outcome {
  std::array<int, configuration_count> rejections{};
  std::array<std::vector<double>, configuration_count> p_values;
  // Quantised data: per configuration, sum of pi_i and of pi_i (1 - pi_i),
  // where enumeration applies.
  std::array<bool, configuration_count> enumerated{};
  std::array<double, configuration_count> expected_count{}, count_variance{};
};

size_outcome simulate_h0(population p, int replications, uint64_t seed) {
  normal_draws z(seed);
  rng gen(seed ^ 0x9e3779b97f4a7c15ULL);
  permutation_engine engine;
  permutation_options options;
  options.resamples = 199;
  options.exact = exact_mode::never;
  samples s;
  size_outcome out;
  for (auto& v : out.p_values)
    v.reserve(static_cast<std::size_t>(replications));
  for (int rep = 0; rep < replications; ++rep) {
    fill(s, p, size_n, size_m, z);
    grid_values ref_grid, rec_grid;
    if (p == population::quantised) {
      ref_grid = half_units(s.reference);
      rec_grid = half_units(s.recent);
    }
    for (std::size_t k = 0; k < configuration_count; ++k) {
      const configuration& c = all_configurations[k];
      const permutation_result r = run(engine, c, s, options, gen);
      out.p_values[k].push_back(r.p_value);
      if (r.p_value <= alpha) ++out.rejections[k];
      if (p != population::quantised || c.rows) continue;
      double tail = -1;
      if (c.test == test_kind::mean_diff) tail = exact_tail_mean_diff(ref_grid, rec_grid);
      if (c.test == test_kind::median_diff) tail = exact_tail_median_diff(ref_grid, rec_grid);
      if (c.test == test_kind::ks) tail = exact_tail_ks(ref_grid, rec_grid);
      if (tail < 0) continue;
      const double pi_i = mc_rejection_probability(tail);
      out.enumerated[k] = true;
      out.expected_count[k] += pi_i;
      out.count_variance[k] += pi_i * (1 - pi_i);
    }
  }
  return out;
}

void check_size(population p, uint64_t seed) {
  const cpu_timer timer;
  const size_outcome out = simulate_h0(p, size_replications, seed);
  const int r = size_replications;
  std::string summary = std::string(population_name(p)) + " data, rejection rates at 0.05:";
  for (std::size_t k = 0; k < configuration_count; ++k) {
    const configuration& c = all_configurations[k];
    const double rate = static_cast<double>(out.rejections[k]) / r;
    double low = alpha / 2, high = alpha + 4 * binomial_sd(alpha, r), expected = -1;
    if (out.enumerated[k]) {
      expected = out.expected_count[k] / r;
      low = expected - 4 * std::sqrt(out.count_variance[k]) / r;
      high = expected + 4 * std::sqrt(out.count_variance[k]) / r;
    } else if (p != population::quantised && continuous_expected_rate(c) > 0) {
      expected = continuous_expected_rate(c);
      low = expected - 4 * binomial_sd(expected, r);
      high = expected + 4 * binomial_sd(expected, r);
    }
    summary += " " + std::string(c.label) + " " + fixed(rate);
    if (out.enumerated[k]) summary += " (expected " + fixed(expected) + ")";
    INFO(population_name(p) << " " << c.label << ": rate " << rate << ", expected "
                            << (expected < 0 ? std::string("<= 0.05") : fixed(expected, 5))
                            << ", band [" << low << ", " << high << "]");
    CHECK(rate <= high);
    CHECK(rate >= low);
    // A check on the enumeration: under H0 the mean rejection chance is at most alpha.
    if (out.enumerated[k]) CHECK(expected <= alpha);
  }
  WARN(summary << " (R = " << r << ", " << fixed(timer.seconds(), 1) << " s CPU)");
}

TEST_CASE("Under H0 with normal data every test rejects at its nominal rate",
          "[calibration][permutation][size]") {
  check_size(population::normal, 0x51e0001);
}

TEST_CASE("Under H0 with heavy-tailed t3 data every test rejects at its nominal rate",
          "[calibration][permutation][size]") {
  check_size(population::student_t3, 0x51e0002);
}

TEST_CASE("Under H0 with skewed lognormal data every test rejects at its nominal rate",
          "[calibration][permutation][size]") {
  check_size(population::lognormal, 0x51e0003);
}

TEST_CASE("Under H0 with quantised data full of ties every test rejects at most at its rate",
          "[calibration][permutation][size]") {
  check_size(population::quantised, 0x51e0004);
}

// ---------------------------------------------------------------------------
// 2. Uniformity of Monte Carlo p-values under H0.
//
// For continuous data and a statistic without ties across splits, the rank of
// the observed statistic among the B + 1 = 200 values is uniform, so
// p = (1 + c) / 200 is uniform on {1/200, ..., 200/200} (Phipson & Smyth 2010).
// Ten bins of width 0.1 each hold 20 grid points, so each has probability 0.1
// exactly; the chi-square statistic on 9 df must stay below
// scipy.stats.chi2.ppf(1 - 1e-4, 9) = 33.719948438964906 (SciPy 1.10.1:
// /usr/bin/python3 -c "from scipy.stats import chi2; print(chi2.ppf(1-1e-4, 9))").
// False-failure probability 1e-4 per configuration (asymptotic chi-square; 400
// expected per bin), 6e-4 over the six. ks and median-diff are left out: their
// statistics tie across splits, so their p-values are not uniform (they are
// conservative, which the size cases check). cvm stays in: its largest atom is
// 0.0021 (the SciPy table above), which moves a bin's probability far less
// than the chi-square test can see at R = 4000. CPU time: about 2.5 s.
// ---------------------------------------------------------------------------

TEST_CASE("Under H0 the Monte Carlo p-values of untied statistics are uniform on their grid",
          "[calibration][permutation][uniformity]") {
  const cpu_timer timer;
  const int r = size_replications;
  const size_outcome out = simulate_h0(population::normal, r, 0x5a11f0);
  constexpr double critical = 33.719948438964906;
  std::string summary = "chi-square (9 df) of p-values over 10 bins:";
  for (std::size_t k = 0; k < configuration_count; ++k) {
    const configuration& c = all_configurations[k];
    if (c.test == test_kind::ks || c.test == test_kind::median_diff) continue;
    std::array<int, 10> counts{};
    bool on_grid = true;
    for (double p : out.p_values[k]) {
      const double j = std::round(p * 200);  // p = j / 200, j = 1..200
      const bool ok = j >= 1 && j <= 200 && std::fabs(p * 200 - j) < 1e-9;
      on_grid = on_grid && ok;
      if (ok) ++counts[static_cast<std::size_t>((static_cast<int>(j) - 1) / 20)];
    }
    const double expected = r / 10.0;
    double chi2 = 0;
    for (int count : counts)
      chi2 += (count - expected) * (count - expected) / expected;
    summary += " " + std::string(c.label) + " " + fixed(chi2, 2);
    INFO(c.label << ": chi-square " << chi2 << " against " << critical);
    CHECK(on_grid);
    CHECK(chi2 < critical);
  }
  WARN(summary << " (critical " << critical << ", R = " << r << ", " << fixed(timer.seconds(), 1)
               << " s CPU)");
}

// ---------------------------------------------------------------------------
// 3. Power, and the studentized test under unequal variances.
// ---------------------------------------------------------------------------

// Rejection rates at alpha of `tests` for normal data: reference N(0, sd_x^2)
// of size n, recent N(shift, sd_y^2) of size m; B = 199.
std::vector<double> rejection_rates(const std::vector<test_kind>& tests, std::size_t n,
                                    std::size_t m, double shift, double sd_x, double sd_y,
                                    int replications, uint64_t seed) {
  normal_draws z(seed);
  rng gen(seed ^ 0x9e3779b97f4a7c15ULL);
  permutation_engine engine;
  permutation_options options;
  options.resamples = 199;
  options.exact = exact_mode::never;
  std::vector<int> rejections(tests.size(), 0);
  std::vector<double> x(n), y(m);
  for (int rep = 0; rep < replications; ++rep) {
    for (double& v : x)
      v = sd_x * z.next();
    for (double& v : y)
      v = shift + sd_y * z.next();
    for (std::size_t k = 0; k < tests.size(); ++k) {
      options.test = tests[k];
      auto r = engine.run(std::span<const double>(x), std::span<const double>(y), options, gen);
      if (!r.ok()) FAIL(r.err().message);
      if (r->p_value <= alpha) ++rejections[k];
    }
  }
  std::vector<double> rates;
  for (int c : rejections)
    rates.push_back(static_cast<double>(c) / replications);
  return rates;
}

// n = m = 30 normal data, shifts 0, 0.25, 0.5, 1 sd, R = 2000 per shift.
// Monotone power is a fact for these tests under a location shift of normal
// data (they are unbiased and consistent; from memory). Each step must exceed
// the previous by more than 3 sd of the difference of two independent
// binomial proportions, from the observed rates. The smallest step, ks from
// 0.032 to 0.098 (observed; at n = m = 30 the KS lattice makes it conservative
// at shift 0), is about 8.5 sd; mean-diff's smallest, 0.05 to 0.157 (SciPy,
// below), about 11 sd: false-failure probability below 1e-6.
// For mean-diff and welch (which for n = m is the same test: the t statistic is
// an increasing function of |mean difference| given the pooled data) the rate
// is also compared with the power of the Monte Carlo t-test: E[P(Binom(199,
// p_t) <= 9)] with p_t the two-sided pooled t-test p-value, T ~ noncentral t
// (58 df, ncp = shift sqrt(15)), by scipy.integrate.quad over scipy.stats.nct
// (SciPy 1.10.1): 0.05, 0.15666908887147418, 0.47106774542244506,
// 0.9649217752959962. The permutation and t-test p-values agree closely for
// normal data at n = m = 30 but not exactly, so the band is 4 sd plus an
// allowance of 0.01 (judgment, no source). CPU time: about 2.5 s.
TEST_CASE("Power grows with the shift for mean-diff, welch, ks and ad",
          "[calibration][permutation][power]") {
  const cpu_timer timer;
  const std::vector<test_kind> tests{test_kind::mean_diff, test_kind::welch, test_kind::ks,
                                     test_kind::ad};
  const std::array<double, 4> shifts{0, 0.25, 0.5, 1.0};
  const std::array<double, 4> t_test_power{0.05, 0.15666908887147418, 0.47106774542244506,
                                           0.9649217752959962};
  constexpr int r = 2000;
  std::vector<std::vector<double>> rates;  // [shift][test]
  for (std::size_t s = 0; s < shifts.size(); ++s)
    rates.push_back(rejection_rates(tests, 30, 30, shifts[s], 1, 1, r, 0x90e0 + s));
  std::string summary = "power at shifts 0, 0.25, 0.5, 1:";
  for (std::size_t k = 0; k < tests.size(); ++k) {
    const std::string name(plumbline::test_name(tests[k]));
    summary += " " + name;
    for (std::size_t s = 0; s < shifts.size(); ++s)
      summary += " " + fixed(rates[s][k], 3);
    for (std::size_t s = 1; s < shifts.size(); ++s) {
      const double step = rates[s][k] - rates[s - 1][k];
      const double sd = std::sqrt(rates[s][k] * (1 - rates[s][k]) / r +
                                  rates[s - 1][k] * (1 - rates[s - 1][k]) / r);
      INFO(name << ": shift " << shifts[s - 1] << " -> " << shifts[s] << ", rate "
                << rates[s - 1][k] << " -> " << rates[s][k] << ", step " << step << ", 3 sd "
                << 3 * sd);
      CHECK(step > 3 * sd);
    }
    if (tests[k] == test_kind::mean_diff || tests[k] == test_kind::welch) {
      for (std::size_t s = 0; s < shifts.size(); ++s) {
        const double margin = 4 * binomial_sd(t_test_power[s], r) + 0.01;
        INFO(name << ": shift " << shifts[s] << ", rate " << rates[s][k]
                  << ", Monte Carlo t-test power " << t_test_power[s] << " +- " << margin);
        CHECK(std::fabs(rates[s][k] - t_test_power[s]) < margin);
      }
    }
  }
  WARN(summary << " (R = " << r << ", " << fixed(timer.seconds(), 1) << " s CPU)");
}

// Equal means, sd 1 versus sd 3, n = 40 and m = 10, both ways round, R = 4000.
// The studentized (welch) permutation test is asymptotically valid here
// (Janssen 1997; Chung & Romano 2013); the unstudentized (mean-diff) one is
// not: its permutation distribution has variance sigma_pooled^2 (1/n + 1/m)
// with sigma_pooled^2 = (n sd_x^2 + m sd_y^2) / N, not sd_x^2/n + sd_y^2/m
// (Romano 1990; Chung & Romano 2013: from memory). Asymptotic mean-diff rate
// 2 (1 - Phi(1.96 / sqrt(ratio))): recent sd 3, ratio 0.925 / 0.325, rate
// about 0.245; reference sd 3, ratio 0.325 / 0.925, rate about 0.001 (hand
// computation from that formula).
// In finite samples welch errs a little both ways: the permutation
// distribution of the studentized statistic is close to t with the
// equal-variance Welch–Satterthwaite df (13.9 here), the statistic itself to t
// with its own (9.5 when the small sample has sd 3, 43.8 when the large one
// has), which predicts rates of about 0.059 and 0.037 (heuristic, judgment;
// numbers from scipy.stats.t, SciPy 1.10.1). Observed: 0.055 and 0.0345.
// Bands: welch within Bradley's (1978) liberal criterion [alpha/2, 3 alpha/2]
// = [0.025, 0.075] (from memory); at the predicted rates each limit is more
// than 4 sd away (sd about 0.003), false-failure probability below 1e-4.
// mean-diff outside it by more than 4 sd: above 0.075 + 4 sd(0.075) = 0.092
// when the small sample has the large variance, below 0.025 - 4 sd(0.025) =
// 0.015 when the large one has. CPU time: about 0.6 s.
TEST_CASE("Under unequal variances welch keeps its size and mean-diff does not",
          "[calibration][permutation][welch]") {
  const cpu_timer timer;
  constexpr int r = 4000;
  const std::vector<test_kind> tests{test_kind::mean_diff, test_kind::welch};
  const auto small_noisy = rejection_rates(tests, 40, 10, 0, 1, 3, r, 0xbe11);
  const auto large_noisy = rejection_rates(tests, 40, 10, 0, 3, 1, r, 0xbe12);
  INFO("recent (m = 10) sd 3: mean-diff " << small_noisy[0] << ", welch " << small_noisy[1]);
  INFO("reference (n = 40) sd 3: mean-diff " << large_noisy[0] << ", welch " << large_noisy[1]);
  CHECK(small_noisy[1] >= 0.5 * alpha);
  CHECK(small_noisy[1] <= 1.5 * alpha);
  CHECK(large_noisy[1] >= 0.5 * alpha);
  CHECK(large_noisy[1] <= 1.5 * alpha);
  CHECK(small_noisy[0] > 1.5 * alpha + 4 * binomial_sd(1.5 * alpha, r));
  CHECK(large_noisy[0] < 0.5 * alpha - 4 * binomial_sd(0.5 * alpha, r));
  WARN("equal means, n = 40 sd 1 / m = 10 sd 3: mean-diff "
       << fixed(small_noisy[0]) << ", welch " << fixed(small_noisy[1])
       << "; n = 40 sd 3 / m = 10 sd 1: mean-diff " << fixed(large_noisy[0]) << ", welch "
       << fixed(large_noisy[1]) << " (R = " << r << ", " << fixed(timer.seconds(), 1) << " s CPU)");
}

// ---------------------------------------------------------------------------
// 4. Monte Carlo and sequential p-values against exact enumeration.
//
// 60 small data sets, n = m = 7 (C(14, 7) = 3432 splits), normal with the
// recent sample shifted by 0, 0.3, ..., 1.5 sd in turn, so the exact p-values
// spread over (0, 1]. Per configuration:
// * Monte Carlo (B = 9999): the exact p lies inside the reported 99%
//   interval [p_low, p_high] in at least 57 of 60. The Clopper–Pearson
//   interval on the exceedance count covers the exact share with probability
//   at least 0.99 (Clopper & Pearson 1934), so misses are at most
//   Binomial(60, 0.01) and P(more than 3) <= 0.0031 (SciPy binom.sf(3, 60,
//   0.01)); over the 8 configurations <= 0.025.
// * Sequential (stop_after h = 20, B = 9999), for exact p in (0.01, 0.5): the
//   p-value h / L (Besag & Clifford 1991) lies within a factor of 2.5 of the
//   exact p. L is negative binomial, so h / L has relative sd about 1 / sqrt(h)
//   = 0.22 and a factor 2.5 is about 4 sd on the log scale: P(L < 8/p) +
//   P(L > 50/p) <= 2.3e-4 for any p in (0.01, 0.5) (SciPy binom.sf(19,
//   ceil(8/p) - 1, p) + binom.cdf(19, floor(50/p), p), maximised over a grid).
//   At most one data set per configuration may miss: P(two or more of about
//   30) < 3e-5. With p > 0.01 about 100 exceedances are expected in 9999
//   resamples, so the run must stop early. At least 15 data sets per
//   configuration must fall in the range, or the check is void.
// CPU time: about 1 s.
// ---------------------------------------------------------------------------

TEST_CASE("Monte Carlo and sequential p-values agree with exact enumeration",
          "[calibration][permutation][exact]") {
  const cpu_timer timer;
  constexpr int data_sets = 60;
  normal_draws z(0xe0ac7);
  rng gen(0xe0ac8);
  permutation_engine engine;
  permutation_options exact_options, mc_options, sequential_options;
  exact_options.exact = exact_mode::always;
  mc_options.exact = exact_mode::never;
  mc_options.resamples = 9999;
  sequential_options = mc_options;
  sequential_options.stop_after = 20;
  std::array<int, configuration_count> inside{}, in_range{}, within_factor{};
  samples s;
  for (int i = 0; i < data_sets; ++i) {
    fill(s, population::normal, 7, 7, z, 0.3 * (i % 6));
    for (std::size_t k = 0; k < configuration_count; ++k) {
      const configuration& c = all_configurations[k];
      const permutation_result exact = run(engine, c, s, exact_options, gen);
      const permutation_result mc = run(engine, c, s, mc_options, gen);
      const permutation_result sequential = run(engine, c, s, sequential_options, gen);
      INFO(c.label << ", data set " << i << ": exact p " << exact.p_value << ", Monte Carlo "
                   << mc.p_value << " [" << mc.p_low << ", " << mc.p_high << "], sequential "
                   << sequential.p_value << " after " << sequential.resamples);
      REQUIRE(exact.exact);
      REQUIRE(exact.resamples == 3432);
      REQUIRE(!mc.exact);
      REQUIRE(mc.resamples == 9999);
      if (mc.p_low <= exact.p_value && exact.p_value <= mc.p_high) ++inside[k];
      if (exact.p_value > 0.01 && exact.p_value < 0.5) {
        ++in_range[k];
        CHECK(sequential.stopped_early);
        const double ratio = sequential.p_value / exact.p_value;
        if (ratio <= 2.5 && ratio >= 1 / 2.5) ++within_factor[k];
      }
    }
  }
  std::string summary = "of 60: inside the 99% interval / sequential within 2.5x (in range):";
  for (std::size_t k = 0; k < configuration_count; ++k) {
    const configuration& c = all_configurations[k];
    summary += " " + std::string(c.label) + " " + std::to_string(inside[k]) + " / " +
               std::to_string(within_factor[k]) + " (" + std::to_string(in_range[k]) + ")";
    INFO(c.label << ": exact p inside the interval for " << inside[k] << " of 60; sequential "
                 << within_factor[k] << " of " << in_range[k] << " within a factor 2.5");
    CHECK(inside[k] >= 57);
    CHECK(in_range[k] >= 15);
    CHECK(within_factor[k] >= in_range[k] - 1);
  }
  WARN(summary << " (" << fixed(timer.seconds(), 1) << " s CPU)");
}

// With n = m, swapping the two groups maps each split to its complement, and
// every statistic here is symmetric under that swap (up to sign for the
// signed ones, which are tested by |T|). So the splits pair off with equal
// values, and the exact exceedance count #{T* >= T_obs} over all C(14, 7)
// splits is even: a fact of the definitions, with no false failures. An odd
// count means the engine's comparison split a pair of theoretically equal
// values apart (the relative 1e-14 tolerance is meant to keep them together).
// Same 60 data sets as above. CPU time: about 0.2 s.
TEST_CASE("With equal sizes exact enumeration counts each split together with its mirror",
          "[calibration][permutation][exact]") {
  const cpu_timer timer;
  constexpr int data_sets = 60;
  normal_draws z(0xe0ac7);
  rng gen(0xe0ac8);
  permutation_engine engine;
  permutation_options options;
  options.exact = exact_mode::always;
  std::array<int, configuration_count> odd{};
  samples s;
  for (int i = 0; i < data_sets; ++i) {
    fill(s, population::normal, 7, 7, z, 0.3 * (i % 6));
    for (std::size_t k = 0; k < configuration_count; ++k) {
      const permutation_result r = run(engine, all_configurations[k], s, options, gen);
      if (r.exceedances % 2 != 0) ++odd[k];
    }
  }
  std::string summary = "data sets (of 60) with an odd exact exceedance count:";
  for (std::size_t k = 0; k < configuration_count; ++k) {
    const configuration& c = all_configurations[k];
    summary += " " + std::string(c.label) + " " + std::to_string(odd[k]);
    INFO(c.label << ": " << odd[k] << " of 60 data sets have an odd exceedance count");
    CHECK(odd[k] == 0);
  }
  WARN(summary << " (" << fixed(timer.seconds(), 1) << " s CPU)");
}

}  // namespace
