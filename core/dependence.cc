// dependence.cc: see dependence.h for the definitions and their sources.
//
// Design note. Autocovariances up to lag m_max + K_n are formed directly,
// O(n sqrt(n)) in all; for the window sizes plumbline keeps (up to ~10^5)
// this is a few milliseconds and needs no FFT. A constant window has no
// dependence to measure and gets block length 1.
#include "core/dependence.h"

#include <algorithm>
#include <cmath>
#include <vector>

namespace plumbline {

dependence_summary measure_dependence(std::span<const double> x) {
  dependence_summary d;
  const std::size_t n = x.size();
  d.n = n;
  if (n < 3) return d;
  d.lag1_se = 1 / std::sqrt(static_cast<double>(n));
  double mean = 0;
  for (double v : x) mean += v;
  mean /= static_cast<double>(n);
  std::vector<double> e(n);
  for (std::size_t t = 0; t < n; ++t) e[t] = x[t] - mean;
  auto autocov = [&](std::size_t k) {
    double s = 0;
    for (std::size_t t = 0; t + k < n; ++t) s += e[t] * e[t + k];
    return s / static_cast<double>(n);
  };
  const double r0 = autocov(0);
  if (!(r0 > 0)) return d;
  d.lag1 = autocov(1) / r0;
  d.dependent = std::fabs(d.lag1) > 2 * d.lag1_se;

  const double dn = static_cast<double>(n);
  const std::size_t kn = std::max<std::size_t>(5, static_cast<std::size_t>(
                                                      std::ceil(std::sqrt(std::log10(dn)))));
  const std::size_t m_max = static_cast<std::size_t>(std::ceil(std::sqrt(dn))) + kn;
  const std::size_t lags = std::min(n - 1, m_max + kn);
  std::vector<double> r(lags + 1);
  r[0] = r0;
  for (std::size_t k = 1; k <= lags; ++k) r[k] = autocov(k);
  const double threshold = 2 * std::sqrt(std::log10(dn) / dn);
  std::size_t big_m = m_max;
  for (std::size_t m = 0; m + kn <= lags; ++m) {
    bool quiet = true;
    for (std::size_t k = 1; k <= kn && quiet; ++k) quiet = std::fabs(r[m + k] / r0) < threshold;
    if (quiet) {
      big_m = std::min(2 * std::max<std::size_t>(m, 1), m_max);
      break;
    }
  }
  big_m = std::min(big_m, lags);
  double g = r0, big_g = 0;
  for (std::size_t k = 1; k <= big_m; ++k) {
    const double t = static_cast<double>(k) / static_cast<double>(big_m);
    const double lambda = t <= 0.5 ? 1.0 : 2 * (1 - t);
    g += 2 * lambda * r[k];
    big_g += 2 * lambda * static_cast<double>(k) * r[k];
  }
  const double cap = std::ceil(std::min(3 * std::sqrt(dn), dn / 3));
  auto block = [&](double big_d) {
    if (!(big_d > 0)) return 1.0;
    const double b = std::cbrt(2 * big_g * big_g / big_d) * std::cbrt(dn);
    return std::clamp(std::isfinite(b) ? b : 1.0, 1.0, cap);
  };
  d.block_stationary = block(2 * g * g);
  d.block_circular = block(4.0 / 3.0 * g * g);
  return d;
}

}  // namespace plumbline
