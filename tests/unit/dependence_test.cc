// Lag-1 autocorrelation and the Politis–White block length (core/dependence.h).
//
// Sources. The AR(1) closed form of the Politis–White block length follows
// from the definitions in the header with the AR(1) autocovariances
// R(k) = phi^|k| / (1 - phi^2) (a textbook fact of AR(1) processes):
// g = sum R(k) = 1 / (1 - phi)^2, G = sum |k| R(k) = 2 phi / ((1 - phi)^2 (1 - phi^2)),
// so b_SB = (G / g)^(2/3) n^(1/3) = (2 phi / (1 - phi^2))^(2/3) n^(1/3) and
// b_CB = (3/2)^(1/3) b_SB (Politis & White 2004, eq. for b_opt, with the
// constants D_SB = 2 g^2, D_CB = (4/3) g^2 of Patton, Politis & White 2009).
// Bartlett's standard error 1/sqrt(n) of r(1) under independence is a
// textbook result (Box & Jenkins).
#include <catch2/catch.hpp>
#include <algorithm>
#include <cmath>
#include <vector>

#include "core/dependence.h"
#include "support/generate.h"

using plumbline::measure_dependence;
using plumbline::rng;

TEST_CASE("Politis-White block length approaches its AR(1) closed form", "[core][dependence]") {
  const double phi = GENERATE(0.3, 0.6, 0.8);
  const std::size_t n = 200000;
  rng g(4242);
  const auto x = plumbline::testing::ar1_sample(g, n, phi);
  const auto d = measure_dependence(x);
  const double b_sb = std::pow(2 * phi / (1 - phi * phi), 2.0 / 3.0) * std::cbrt(double(n));
  const double b_cb = std::cbrt(1.5) * b_sb;
  CAPTURE(phi, d.block_stationary, b_sb, d.block_circular, b_cb, d.lag1);
  // The estimator converges at a slower rate than sqrt(n) (a lag-window
  // spectral estimate); 15 % at n = 200000 is common practice for this check.
  CHECK(d.block_stationary == Approx(b_sb).epsilon(0.15));
  CHECK(d.block_circular == Approx(b_cb).epsilon(0.15));
  CHECK(d.block_circular / d.block_stationary == Approx(std::cbrt(1.5)).epsilon(1e-12));
  CHECK(d.lag1 == Approx(phi).margin(4 / std::sqrt(double(n))));
  CHECK(d.dependent);
}

TEST_CASE("independent data show no dependence and get block length near 1",
          "[core][dependence]") {
  rng g(99);
  int flagged = 0;
  std::vector<double> blocks;
  for (int rep = 0; rep < 200; ++rep) {
    const auto x = plumbline::testing::normal_sample(g, 400);
    const auto d = measure_dependence(x);
    CHECK(d.lag1_se == Approx(1 / std::sqrt(400.0)));
    flagged += d.dependent ? 1 : 0;
    CHECK(d.block_circular >= 1);
    blocks.push_back(d.block_circular);
  }
  // The estimate is noisy for independent data (a small g in the
  // denominator can give a long block now and then; automatic mode
  // therefore asks the lag-1 test first), but it is centred near 1.
  std::sort(blocks.begin(), blocks.end());
  CHECK(blocks[blocks.size() / 2] < 2);
  // |r(1)| > 2 se happens with probability ~4.6 % under independence;
  // Binomial(200, 0.046) exceeds 20 with probability < 0.1 %.
  CHECK(flagged <= 20);
}

TEST_CASE("a constant window or a tiny one gives a neutral diagnostic", "[core][dependence]") {
  const std::vector<double> c(50, 3.25);
  const auto d = measure_dependence(c);
  CHECK(d.lag1 == 0);
  CHECK_FALSE(d.dependent);
  CHECK(d.block_circular == 1);
  CHECK(d.block_stationary == 1);
  const std::vector<double> two{1.0, 2.0};
  CHECK(measure_dependence(two).block_circular == 1);
}

TEST_CASE("block length is capped at min(3 sqrt(n), n / 3)", "[core][dependence]") {
  // A random walk has no finite block length; the cap must hold.
  rng g(5);
  std::vector<double> walk(900);
  double s = 0;
  for (auto& v : walk) v = (s += plumbline::testing::normal(g));
  const auto d = measure_dependence(walk);
  CHECK(d.block_circular <= 90);
  CHECK(d.block_stationary <= 90);
  CHECK(d.dependent);
}
