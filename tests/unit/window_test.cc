// window_test.cc: the sample windows of core/window.h.
//
// Ring semantics are checked against the definition (oldest first, eviction
// of the oldest, the newest kept on resize). The running statistics are
// checked against a fresh computation over the stored values: the corrected
// two-pass algorithm (Chan, Golub & LeVeque, "Algorithms for computing the
// sample variance", Am. Stat. 37, 1983, eq. 1.7) in long double (64-bit
// significand on x86-64), about a shift of the first value so that even
// values near 1e9 keep their small spread. Its own error (~1e-18 relative) is
// far below the tolerances used here, which are the header's bounds: a
// relative 2.6e-13 for the standard deviation (at least 12 significant
// digits, the project requirement) and 1e-14 * (|mean| + sd) for the mean
// (the header's 1.1e-16 * (|mean| + 70 sd), rounded up).
#include "core/window.h"

#include <algorithm>
#include <catch2/catch.hpp>
#include <cmath>
#include <cstdint>
#include <limits>
#include <vector>

#include "core/rng.h"

namespace {

using plumbline::row_window;
using plumbline::sample_window;

struct reference_moments {
  long double mean = 0;
  long double sd = 0;
};

// Corrected two-pass mean and standard deviation (divisor n - 1) of v.
reference_moments two_pass(const std::vector<double>& v) {
  reference_moments r;
  const std::size_t n = v.size();
  if (n == 0) return r;
  const long double shift = v[0];
  long double sum = 0;
  for (double x : v)
    sum += static_cast<long double>(x) - shift;
  r.mean = shift + sum / static_cast<long double>(n);
  if (n < 2) return r;
  long double dev = 0;
  long double sq = 0;
  for (double x : v) {
    const long double d = static_cast<long double>(x) - r.mean;
    dev += d;
    sq += d * d;
  }
  long double var =
      (sq - dev * dev / static_cast<long double>(n)) / static_cast<long double>(n - 1);
  if (var < 0) var = 0;
  r.sd = std::sqrt(var);
  return r;
}

// Largest errors seen over a run, against the tolerances above.
struct error_tracker {
  double worst_mean = 0;      // |mean - ref| / (|ref mean| + ref sd)
  double worst_sd = 0;        // |sd - ref| / ref sd
  bool zero_sd_exact = true;  // sd == 0 exactly whenever the reference is 0
  uint64_t checks = 0;
  uint64_t worst_at = 0;

  void add(double mean, double sd, const reference_moments& ref, uint64_t at) {
    ++checks;
    const long double scale = std::fabs(ref.mean) + ref.sd;
    const long double em =
        scale > 0 ? std::fabs(static_cast<long double>(mean) - ref.mean) / scale : mean != 0;
    worst_mean = std::max(worst_mean, static_cast<double>(em));
    if (ref.sd == 0) {
      if (sd != 0) zero_sd_exact = false;
      return;
    }
    const double es = static_cast<double>(std::fabs(sd - ref.sd) / ref.sd);
    if (!(es <= worst_sd)) {  // also records a NaN
      worst_sd = es;
      worst_at = at;
    }
  }

  void add(const sample_window& w, std::vector<double>& scratch, uint64_t at) {
    w.copy_to(scratch);
    add(w.mean(), w.stddev(), two_pass(scratch), at);
  }

  void require_accurate() const {
    WARN("checks " << checks << ", worst sd relative error " << worst_sd << " at push " << worst_at
                   << ", worst mean error " << worst_mean);
    CHECK(checks > 0);
    CHECK(worst_mean <= 1e-14);
    CHECK(worst_sd <= 2.6e-13);
    CHECK(zero_sd_exact);
  }
};

std::vector<double> contents(const sample_window& w) {
  std::vector<double> v;
  w.copy_to(v);
  return v;
}

// Uniform on [-0.5, 0.5) * sqrt(12): mean 0, standard deviation 1.
double unit_noise(plumbline::rng& g) {
  return (g.next_double() - 0.5) * 3.4641016151377544;
}

}  // namespace

TEST_CASE("a sample window keeps the newest values, oldest first, after wrapping",
          "[core][window]") {
  sample_window w(5);
  CHECK(w.empty());
  CHECK(w.capacity() == 5);
  for (int i = 1; i <= 3; ++i)
    w.push(i);
  CHECK(w.size() == 3);
  CHECK_FALSE(w.full());
  CHECK(contents(w) == std::vector<double>{1, 2, 3});
  for (int i = 4; i <= 12; ++i)
    w.push(i);
  CHECK(w.full());
  CHECK(w.size() == 5);
  CHECK(w.pushes() == 12);
  CHECK(w[0] == 8);
  CHECK(w[4] == 12);
  CHECK(w.newest() == 12);
  CHECK(contents(w) == std::vector<double>{8, 9, 10, 11, 12});
  w.push(13);  // evicts 8, the oldest
  CHECK(contents(w) == std::vector<double>{9, 10, 11, 12, 13});

  std::vector<double> newest(3);
  w.copy_newest_to(newest);
  CHECK(newest == std::vector<double>{11, 12, 13});
  std::vector<double> all(5);
  w.copy_newest_to(all);
  CHECK(all == std::vector<double>{9, 10, 11, 12, 13});
  w.copy_newest_to(std::span<double>());  // copying nothing is allowed
}

TEST_CASE("copy_to reuses the output vector's storage", "[core][window]") {
  sample_window w(8);
  for (int i = 0; i < 20; ++i)
    w.push(i * 0.5);
  std::vector<double> out;
  out.reserve(64);
  const double* storage = out.data();
  w.copy_to(out);
  CHECK(out.size() == 8);
  CHECK(out.data() == storage);
  CHECK(out.front() == 6.0);
  CHECK(out.back() == 9.5);
  std::vector<double> big(100, -1.0);
  w.copy_to(big);  // shrinks to size()
  CHECK(big.size() == 8);
}

TEST_CASE("set_capacity keeps the newest values when shrinking and growing", "[core][window]") {
  sample_window w(6);
  for (int i = 1; i <= 10; ++i)
    w.push(i);
  REQUIRE(contents(w) == std::vector<double>{5, 6, 7, 8, 9, 10});

  w.set_capacity(3);
  CHECK(w.capacity() == 3);
  CHECK(w.full());
  CHECK(contents(w) == std::vector<double>{8, 9, 10});
  CHECK(w.pushes() == 10);
  CHECK(w.mean() == 9);
  CHECK(w.variance() == 1);
  w.push(11);
  CHECK(contents(w) == std::vector<double>{9, 10, 11});

  w.set_capacity(5);
  CHECK(w.capacity() == 5);
  CHECK_FALSE(w.full());
  CHECK(contents(w) == std::vector<double>{9, 10, 11});
  for (int i = 12; i <= 14; ++i)
    w.push(i);
  CHECK(contents(w) == std::vector<double>{10, 11, 12, 13, 14});
  CHECK(w.mean() == 12);
  CHECK(w.variance() == 2.5);

  w.set_capacity(5);  // unchanged
  CHECK(contents(w) == std::vector<double>{10, 11, 12, 13, 14});
  w.set_capacity(1);
  CHECK(contents(w) == std::vector<double>{14});
  CHECK(w.variance() == 0);
}

TEST_CASE("clear empties a sample window and resets its push count", "[core][window]") {
  sample_window w(4);
  for (int i = 0; i < 9; ++i)
    w.push(100.0 + i);
  w.clear();
  CHECK(w.empty());
  CHECK(w.size() == 0);
  CHECK(w.capacity() == 4);
  CHECK(w.pushes() == 0);
  CHECK(std::isnan(w.mean()));
  CHECK(w.variance() == 0);
  w.push(2.5);
  CHECK(w.mean() == 2.5);  // a single value is its own mean, exactly
  CHECK(w.variance() == 0);
  w.push(3.5);
  CHECK(contents(w) == std::vector<double>{2.5, 3.5});
  CHECK(w.mean() == 3.0);
  CHECK(w.variance() == 0.5);
}

TEST_CASE("running mean and variance match a two-pass computation after random pushes",
          "[core][window]") {
  // Capacities from 1 up, data of several offsets and scales, each checked
  // after every push (every 7th for the largest window).
  struct scenario {
    std::size_t capacity;
    double offset;
    double scale;
  };
  const scenario scenarios[] = {{1, 3.0, 1.0},   {2, -5.0, 2.0},  {3, 1e4, 1.0},
                                {17, 0.0, 1e-8}, {256, 1e6, 3.0}, {1000, -2e5, 0.01},
                                {64, 1e-3, 1e-9}};
  for (const auto& sc : scenarios) {
    plumbline::rng g(20240601 + sc.capacity);
    sample_window w(sc.capacity);
    error_tracker t;
    std::vector<double> scratch;
    const uint64_t every = sc.capacity >= 1000 ? 7 : 1;
    for (uint64_t i = 0; i < 30000; ++i) {
      w.push(sc.offset + sc.scale * unit_noise(g));
      if (i % every == 0) t.add(w, scratch, i);
    }
    INFO("capacity " << sc.capacity << ", offset " << sc.offset << ", scale " << sc.scale);
    t.require_accurate();
  }
}

TEST_CASE("running variance follows a process that drifts by a million standard deviations",
          "[core][window]") {
  SECTION("a slow ramp, in a small window") {
    // Noise sd 1, level rising by 1 per push over 1e6 pushes.
    plumbline::rng g(7);
    sample_window w(16);
    error_tracker t;
    std::vector<double> scratch;
    for (uint64_t i = 0; i < 1000000; ++i) {
      w.push(static_cast<double>(i) + unit_noise(g));
      t.add(w, scratch, i);
    }
    CHECK(w.mean() > 999990);
    t.require_accurate();
  }
  SECTION("a fast ramp, in a large window") {
    // Noise sd 1, level falling by 5 per push: 1e6 over 2e5 pushes.
    plumbline::rng g(8);
    sample_window w(1000);
    error_tracker t;
    std::vector<double> scratch;
    for (uint64_t i = 0; i < 200000; ++i) {
      w.push(-5.0 * static_cast<double>(i) + unit_noise(g));
      if (i % 11 == 0) t.add(w, scratch, i);
    }
    t.require_accurate();
  }
  SECTION("steps of a million standard deviations") {
    // Noise sd 1; the level jumps by 1e6 every 3000 pushes, so the window
    // (1000) spends a while as a mixture and then holds one level far from
    // the anchor the sums had when the jump came.
    plumbline::rng g(9);
    sample_window w(1000);
    error_tracker t;
    std::vector<double> scratch;
    for (uint64_t i = 0; i < 30000; ++i) {
      const double level = 1e6 * static_cast<double>(i / 3000);
      w.push(level + unit_noise(g));
      t.add(w, scratch, i);
    }
    t.require_accurate();
  }
}

TEST_CASE("a constant stream has variance exactly 0 and mean exactly its value", "[core][window]") {
  // Fixed values, and random ones: for about one value in seven, n copies of
  // a double summed and divided by n do not give the value back, so exactness
  // cannot come from dividing a sum.
  std::vector<double> values{0.1, -7.3, 1e7 + 0.3, 1e-310, 0.0};
  plumbline::rng v(16);
  for (int k = 0; k < 40; ++k)
    values.push_back(10 * v.next_double());
  for (const double value : values) {
    for (const std::size_t capacity : {3, 100}) {
      sample_window w(capacity);
      for (int i = 0; i < 500; ++i) {
        w.push(value);
        INFO("value " << value << ", capacity " << capacity << ", push " << i);
        REQUIRE(w.variance() == 0);
        REQUIRE(w.mean() == value);
      }
    }
  }
  SECTION("after a varying history") {
    plumbline::rng g(11);
    for (int k = 0; k < 20; ++k) {
      sample_window w(100);
      for (int i = 0; i < 1234; ++i)
        w.push(1e7 + 1e3 * unit_noise(g));
      const double value = k == 0 ? 10000000.3 : 1e7 + 1e3 * unit_noise(g);
      for (int i = 0; i < 100; ++i)
        w.push(value);
      for (int i = 0; i < 300; ++i) {
        INFO("value " << value << ", push " << i);
        REQUIRE(w.variance() == 0);
        REQUIRE(w.stddev() == 0);
        REQUIRE(w.mean() == value);
        w.push(value);
      }
    }
  }
  SECTION("in a window of capacity 1") {
    sample_window w(1);
    for (const double x : {1e9 + 0.1, -3.0, 0.7, 0.7}) {
      w.push(x);
      CHECK(w.mean() == x);
      CHECK(w.variance() == 0);
    }
  }
}

TEST_CASE("values near 1e9 with standard deviation 1e-3 keep twelve digits", "[core][window]") {
  // The stored values are 1e9 plus multiples of 2^-23 (about 1.2e-7), so the
  // reference is the variance of exactly those values.
  plumbline::rng g(12);
  sample_window w(500);
  error_tracker t;
  std::vector<double> scratch;
  for (uint64_t i = 0; i < 60000; ++i) {
    w.push(1e9 + 1e-3 * unit_noise(g));
    if (i % 5 == 0) t.add(w, scratch, i);
  }
  CHECK(w.stddev() == Approx(1e-3).epsilon(0.1));
  t.require_accurate();
}

TEST_CASE("an outlier leaving the window does not spoil the running variance", "[core][window]") {
  // A process near 1 with sd 1e-3 and bursts of five readings between 1e12
  // and 2e12 (15 orders of magnitude above the spread); after each burst has
  // left, the variance must be as accurate as ever.
  plumbline::rng g(13);
  sample_window w(200);
  error_tracker t;
  std::vector<double> scratch;
  for (uint64_t i = 0; i < 5000; ++i) {
    w.push(i % 1000 < 500 && i % 1000 >= 495 ? 1e12 * (1 + g.next_double())
                                             : 1.0 + 1e-3 * unit_noise(g));
    t.add(w, scratch, i);
  }
  t.require_accurate();
}

TEST_CASE("a NaN stops affecting the statistics once it has left the window", "[core][window]") {
  plumbline::rng g(14);
  sample_window w(50);
  for (int i = 0; i < 80; ++i)
    w.push(unit_noise(g));
  w.push(std::numeric_limits<double>::quiet_NaN());
  CHECK(std::isnan(w.mean()));
  CHECK(std::isnan(w.variance()));
  for (int i = 0; i < 100; ++i)
    w.push(unit_noise(g));  // 2 capacities
  error_tracker t;
  std::vector<double> scratch;
  t.add(w, scratch, 0);
  t.require_accurate();
}

TEST_CASE("a row window keeps rows in order and copies them oldest first", "[core][window]") {
  row_window w(4, 3);
  CHECK(w.empty());
  CHECK(w.dim() == 3);
  CHECK(w.capacity() == 4);
  for (int i = 1; i <= 6; ++i) {
    const std::vector<double> r{1.0 * i, 10.0 * i, 100.0 * i};
    if (i % 2) {
      w.push(r);
    } else {
      w.push(Eigen::Map<const Eigen::VectorXd>(r.data(), 3));
    }
  }
  CHECK(w.full());
  CHECK(w.size() == 4);
  CHECK(w.pushes() == 6);
  for (int i = 0; i < 4; ++i) {
    const double k = i + 3;  // rows 3..6 remain
    CHECK(w.row(i)(0) == k);
    CHECK(w.row(i)(1) == 10 * k);
    CHECK(w.row(i)(2) == 100 * k);
  }
  Eigen::MatrixXd m;
  w.copy_to(m);
  REQUIRE(m.rows() == 4);
  REQUIRE(m.cols() == 3);
  for (int i = 0; i < 4; ++i)
    CHECK(m(i, 2) == 100.0 * (i + 3));

  Eigen::VectorXd r(3);
  r << 7, 70, 700;
  w.push(r);
  w.copy_to(m);
  CHECK(m(0, 0) == 4);
  CHECK(m(3, 1) == 70);

  CHECK(w.mean()(0) == 5.5);  // rows 4..7
  CHECK(w.variance()(2) == Approx(100.0 * 100.0 * 5.0 / 3.0).epsilon(1e-15));

  w.set_capacity(2);
  w.copy_to(m);
  CHECK(m.rows() == 2);
  CHECK(m(0, 0) == 6);
  CHECK(m(1, 0) == 7);
  w.set_capacity(5);
  w.push(std::vector<double>{8, 80, 800});
  w.copy_to(m);
  CHECK(m.rows() == 3);
  CHECK(m(2, 2) == 800);
  CHECK(w.mean(1) == 70);

  w.clear();
  CHECK(w.empty());
  CHECK(w.pushes() == 0);
  w.copy_to(m);
  CHECK(m.rows() == 0);
  CHECK(std::isnan(w.mean(0)));
  CHECK(w.variance(0) == 0);
}

TEST_CASE("row window mean and variance match a two-pass computation per column",
          "[core][window]") {
  // Four columns: unit noise; 1e9 with sd 1e-3; a constant (variance exactly
  // 0); a ramp of 1e6 sd with a level jump.
  plumbline::rng g(15);
  const std::size_t dim = 4;
  row_window w(300, dim);
  std::vector<error_tracker> t(dim);
  Eigen::MatrixXd m;
  std::vector<double> column;
  for (uint64_t i = 0; i < 20000; ++i) {
    const double step = i >= 10000 ? 1e6 : 0.0;
    const double r[dim] = {unit_noise(g), 1e9 + 1e-3 * unit_noise(g), 7.7,
                           50.0 * static_cast<double>(i) + step + unit_noise(g)};
    w.push(std::span<const double>(r, dim));
    if (i % 13 != 0 && i < 19990) continue;
    w.copy_to(m);
    const Eigen::VectorXd mean = w.mean();
    const Eigen::VectorXd var = w.variance();
    for (std::size_t j = 0; j < dim; ++j) {
      const auto jj = static_cast<Eigen::Index>(j);
      REQUIRE(mean(jj) == w.mean(j));
      REQUIRE(var(jj) == w.variance(j));
      column.assign(m.col(jj).data(), m.col(jj).data() + m.rows());
      t[j].add(w.mean(j), std::sqrt(w.variance(j)), two_pass(column), i);
    }
  }
  for (std::size_t j = 0; j < dim; ++j) {
    INFO("column " << j);
    t[j].require_accurate();
  }
  CHECK(w.variance(2) == 0);
  CHECK(w.mean(2) == 7.7);
}
