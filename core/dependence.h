// dependence.h: serial dependence of a window, and block lengths for it.
//
// Purpose. Sensor feeds are autocorrelated; resampling them as if they were
// independent gives intervals that are too narrow and tests that alarm too
// often. This header measures the dependence (the lag-1 autocorrelation with
// its standard error) and chooses a block length for block resampling by the
// method of Politis & White (2004) with the correction of Patton, Politis &
// White (2009).
//
// Definitions (x_1..x_n in time order, xbar their mean):
//   autocovariance  R(k) = (1/n) sum_{t=1}^{n-k} (x_t - xbar)(x_{t+k} - xbar)
//   autocorrelation r(k) = R(k) / R(0)
//   se of r(1)      1 / sqrt(n): Bartlett's large-sample standard error under
//                   no dependence, the yardstick for "is there dependence".
// Block length (Politis & White 2004, sections 3-4; PPW 2009):
//   m^  = the smallest m >= 0 such that |r(m + k)| < 2 sqrt(log10(n) / n) for
//         k = 1..K_n, K_n = max(5, ceil(sqrt(log10 n))); M = min(2 max(m^, 1),
//         m_max), m_max = ceil(sqrt(n)) + K_n; with no such m, M = m_max.
//   lambda(t) = 1 for |t| <= 1/2, 2(1 - |t|) for 1/2 < |t| <= 1, else 0
//         (the flat-top lag window of Politis & Romano 1995).
//   G   = sum_{|k| <= M} lambda(k/M) |k| R(k),   g = sum_{|k| <= M} lambda(k/M) R(k)
//   D_SB = 2 g^2 (stationary bootstrap), D_CB = (4/3) g^2 (circular blocks)
//   b   = (2 G^2 / D)^(1/3) n^(1/3), capped at ceil(min(3 sqrt(n), n / 3)) and
//         floored at 1.
// For an AR(1) process with coefficient phi the population values give
// G / g = 2 phi / (1 - phi^2), so b_SB = (2 phi / (1 - phi^2))^(2/3) n^(1/3) and
// b_CB = (3/2)^(1/3) b_SB (tests check the estimator against this).
//
// Thread-safety: pure functions.
#pragma once

#include <cstddef>
#include <span>

namespace plumbline {

struct dependence_summary {
  std::size_t n = 0;
  double lag1 = 0;      // r(1); 0 for n < 3 or a constant window
  double lag1_se = 0;   // 1 / sqrt(n)
  bool dependent = false;  // |r(1)| > 2 se
  double block_circular = 1;    // b_CB, >= 1
  double block_stationary = 1;  // b_SB, >= 1
};

// REQUIRES: values in time order (oldest first).
dependence_summary measure_dependence(std::span<const double> values);

}  // namespace plumbline
