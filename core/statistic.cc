// statistic.cc: direct evaluation of the two-sample statistics.
//
// Design note. These are the plain textbook computations of the definitions
// in statistic.h, written for clarity and accuracy rather than speed: the
// observed statistic that `compare` and the daemon report, and the reference
// that the resampling kernels in permutation.cc are tested against. Sums use
// Neumaier compensation; nothing here depends on long double, so results are
// the same on every IEEE-754 platform. The AD and CvM forms follow the
// operation order of SciPy's implementations where that is free to choose,
// so reference tests can compare to 1e-10.
#include "core/statistic.h"

#include <algorithm>
#include <cfloat>
#include <cmath>
#include <vector>

namespace plumbline {

namespace {

struct neumaier_sum {
  double sum = 0, comp = 0;
  void add(double x) {
    const double t = sum + x;
    if (std::fabs(sum) >= std::fabs(x))
      comp += (sum - t) + x;
    else
      comp += (x - t) + sum;
    sum = t;
  }
  double value() const { return sum + comp; }
};

double mean_of(std::span<const double> v) {
  neumaier_sum s;
  for (double x : v) s.add(x);
  return s.value() / static_cast<double>(v.size());
}

double variance_of(std::span<const double> v, double mean) {
  // A constant sample has variance exactly 0, although its computed mean
  // may differ from its values by rounding.
  if (std::all_of(v.begin(), v.end(), [&](double x) { return x == v[0]; })) return 0;
  neumaier_sum s;
  for (double x : v) s.add((x - mean) * (x - mean));
  return s.value() / static_cast<double>(v.size() - 1);
}

double median_of(std::span<const double> v) {
  std::vector<double> c(v.begin(), v.end());
  const std::size_t n = c.size();
  const std::size_t hi = n / 2;
  std::nth_element(c.begin(), c.begin() + static_cast<std::ptrdiff_t>(hi), c.end());
  const double upper = c[hi];
  if (n % 2 == 1) return upper;
  const double lower = *std::max_element(c.begin(), c.begin() + static_cast<std::ptrdiff_t>(hi));
  return (lower + upper) / 2;
}

// Number of elements of sorted `s` that are <= z (right side) and < z (left).
std::size_t count_le(const std::vector<double>& s, double z) {
  return static_cast<std::size_t>(std::upper_bound(s.begin(), s.end(), z) - s.begin());
}
std::size_t count_lt(const std::vector<double>& s, double z) {
  return static_cast<std::size_t>(std::lower_bound(s.begin(), s.end(), z) - s.begin());
}

double ks_statistic(std::span<const double> x, std::span<const double> y) {
  std::vector<double> xs(x.begin(), x.end()), ys(y.begin(), y.end());
  std::sort(xs.begin(), xs.end());
  std::sort(ys.begin(), ys.end());
  const double n = static_cast<double>(xs.size()), m = static_cast<double>(ys.size());
  double d = 0;
  for (const auto* s : {&xs, &ys})
    for (double z : *s) {
      const double diff = static_cast<double>(count_le(xs, z)) / n -
                          static_cast<double>(count_le(ys, z)) / m;
      d = std::max(d, std::fabs(diff));
    }
  return d;
}

// Pooled midranks (1-based, ties averaged) of the values of `v` in `sorted_all`.
double midrank(const std::vector<double>& sorted_all, double z) {
  const double lo = static_cast<double>(count_lt(sorted_all, z));
  const double hi = static_cast<double>(count_le(sorted_all, z));
  return (lo + 1 + hi) / 2;
}

double cvm_statistic(std::span<const double> x, std::span<const double> y) {
  std::vector<double> xs(x.begin(), x.end()), ys(y.begin(), y.end());
  std::sort(xs.begin(), xs.end());
  std::sort(ys.begin(), ys.end());
  std::vector<double> all(xs);
  all.insert(all.end(), ys.begin(), ys.end());
  std::sort(all.begin(), all.end());
  const double n = static_cast<double>(xs.size()), m = static_cast<double>(ys.size());
  double ux = 0, uy = 0;
  for (std::size_t i = 0; i < xs.size(); ++i) {
    const double d = midrank(all, xs[i]) - static_cast<double>(i + 1);
    ux += d * d;
  }
  for (std::size_t j = 0; j < ys.size(); ++j) {
    const double d = midrank(all, ys[j]) - static_cast<double>(j + 1);
    uy += d * d;
  }
  const double u = n * ux + m * uy;
  const double k = n * m, big_n = n + m;
  return u / (k * big_n) - (4 * k - 1) / (6 * big_n);
}

double ad_statistic(std::span<const double> x, std::span<const double> y) {
  std::vector<double> all(x.begin(), x.end());
  all.insert(all.end(), y.begin(), y.end());
  std::sort(all.begin(), all.end());
  std::vector<double> distinct(all);
  distinct.erase(std::unique(distinct.begin(), distinct.end()), distinct.end());
  const double big_n = static_cast<double>(all.size());
  double a2 = 0;
  for (auto sample : {x, y}) {
    std::vector<double> s(sample.begin(), sample.end());
    std::sort(s.begin(), s.end());
    const double ni = static_cast<double>(s.size());
    double inner = 0;
    for (double z : distinct) {
      const double left = static_cast<double>(count_lt(all, z));
      const double lj = static_cast<double>(count_le(all, z)) - left;
      const double bj = left + lj / 2;
      const double right_i = static_cast<double>(count_le(s, z));
      const double fij = right_i - static_cast<double>(count_lt(s, z));
      const double mij = right_i - fij / 2;
      const double num = big_n * mij - bj * ni;
      inner += lj / big_n * num * num / (bj * (big_n - bj) - big_n * lj / 4);
    }
    a2 += inner / ni;
  }
  return a2 * (big_n - 1) / big_n;
}

}  // namespace

std::string_view test_name(test_kind t) {
  switch (t) {
    case test_kind::mean_diff: return "mean-diff";
    case test_kind::median_diff: return "median-diff";
    case test_kind::welch: return "welch";
    case test_kind::ks: return "ks";
    case test_kind::cvm: return "cvm";
    case test_kind::ad: return "ad";
    case test_kind::energy: return "energy";
  }
  return "?";
}

std::optional<test_kind> parse_test_name(std::string_view name) {
  for (test_kind t : {test_kind::mean_diff, test_kind::median_diff, test_kind::welch,
                      test_kind::ks, test_kind::cvm, test_kind::ad, test_kind::energy})
    if (test_name(t) == name) return t;
  return std::nullopt;
}

bool is_signed(test_kind t) {
  return t == test_kind::mean_diff || t == test_kind::median_diff || t == test_kind::welch;
}

bool is_multivariate(test_kind t) { return t == test_kind::energy; }

double statistic_value(test_kind t, std::span<const double> reference,
                       std::span<const double> recent) {
  switch (t) {
    case test_kind::mean_diff: return mean_of(recent) - mean_of(reference);
    case test_kind::median_diff: return median_of(recent) - median_of(reference);
    case test_kind::welch: {
      const double mx = mean_of(reference), my = mean_of(recent);
      const double vx = variance_of(reference, mx), vy = variance_of(recent, my);
      const double se = std::sqrt(vy / static_cast<double>(recent.size()) +
                                  vx / static_cast<double>(reference.size()));
      const double diff = my - mx;
      if (se == 0) return diff == 0 ? 0.0 : std::copysign(DBL_MAX, diff);
      return diff / se;
    }
    case test_kind::ks: return ks_statistic(reference, recent);
    case test_kind::cvm: return cvm_statistic(reference, recent);
    case test_kind::ad: return ad_statistic(reference, recent);
    case test_kind::energy: {
      const Eigen::Map<const Eigen::MatrixXd> x(reference.data(),
                                                static_cast<Eigen::Index>(reference.size()), 1);
      const Eigen::Map<const Eigen::MatrixXd> y(recent.data(),
                                                static_cast<Eigen::Index>(recent.size()), 1);
      return energy_statistic(x, y);
    }
  }
  return 0;
}

double energy_statistic(const Eigen::MatrixXd& reference, const Eigen::MatrixXd& recent) {
  const Eigen::Index n = reference.rows(), m = recent.rows();
  auto mean_distance = [](const Eigen::MatrixXd& a, const Eigen::MatrixXd& b) {
    neumaier_sum s;
    for (Eigen::Index i = 0; i < a.rows(); ++i)
      for (Eigen::Index j = 0; j < b.rows(); ++j) s.add((a.row(i) - b.row(j)).norm());
    return s.value() / (static_cast<double>(a.rows()) * static_cast<double>(b.rows()));
  };
  const double a = mean_distance(reference, recent);
  const double b = mean_distance(reference, reference);
  const double c = mean_distance(recent, recent);
  const double dn = static_cast<double>(n), dm = static_cast<double>(m);
  return dn * dm / (dn + dm) * (2 * a - b - c);
}

double ad_standardized(double a2akn, std::size_t n_x, std::size_t n_y) {
  // Scholz & Stephens (1987), eqs. 4-5, with k = 2; the sums H, h, g are
  // formed in the order SciPy's anderson_ksamp uses.
  const double k = 2;
  const std::size_t big_n = n_x + n_y;
  const double n = static_cast<double>(big_n);
  const double big_h = 1.0 / static_cast<double>(n_x) + 1.0 / static_cast<double>(n_y);
  double cum = 0, g = 0;
  for (std::size_t t = big_n - 1, i = 0; t >= 2; --t, ++i) {
    cum += 1.0 / static_cast<double>(t);
    g += cum / static_cast<double>(i + 2);
  }
  const double h = cum + 1;
  const double a = (4 * g - 6) * (k - 1) + (10 - 6 * g) * big_h;
  const double b = (2 * g - 4) * k * k + 8 * h * k + (2 * g - 14 * h - 4) * big_h - 8 * h +
                   4 * g - 6;
  const double c = (6 * h + 2 * g - 2) * k * k + (4 * h - 4 * g + 6) * k + (2 * h - 6) * big_h +
                   4 * h;
  const double d = (2 * h + 6) * k * k - 4 * h * k;
  const double sigmasq =
      (a * n * n * n + b * n * n + c * n + d) / ((n - 1.) * (n - 2.) * (n - 3.));
  return (a2akn - (k - 1)) / std::sqrt(sigmasq);
}

}  // namespace plumbline
