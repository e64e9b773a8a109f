// support/generate.h: test data from the engine's own generator.
//
// Normal variates by the inverse CDF (core/special.h) of the generator's
// uniforms, so test data are reproducible from a seed and no std::
// distribution is involved. AR(1) series x_t = phi x_{t-1} + e_t start from
// the stationary distribution (x_0 ~ N(0, 1 / (1 - phi^2))).
#pragma once

#include <cmath>
#include <vector>

#include "core/rng.h"
#include "core/special.h"

namespace plumbline::testing {

inline double normal(rng& g) {
  double u;
  do u = g.next_double();
  while (u == 0);
  return normal_quantile(u);
}

inline std::vector<double> normal_sample(rng& g, std::size_t n, double mean = 0,
                                         double sd = 1) {
  std::vector<double> v(n);
  for (auto& x : v) x = mean + sd * normal(g);
  return v;
}

inline std::vector<double> ar1_sample(rng& g, std::size_t n, double phi, double mean = 0) {
  std::vector<double> v(n);
  double x = normal(g) / std::sqrt(1 - phi * phi);
  for (auto& out : v) {
    out = mean + x;
    x = phi * x + normal(g);
  }
  return v;
}

}  // namespace plumbline::testing
