// bench_data.h: the benchmarks' input data.
//
// Normal-like values from the engine's generator (a sum of four uniforms,
// scaled to unit variance), shifted by `shift` and rounded to 0.001 as an
// instrument would, so ties are rare but possible. The Python drivers draw
// data of the same kind with NumPy; only timings are compared.
#pragma once

#include <cmath>
#include <vector>

#include "core/rng.h"

namespace plumbline::bench {

inline std::vector<double> make_sample(rng& g, std::size_t n, double shift) {
  std::vector<double> v(n);
  for (auto& x : v) {
    double s = 0;
    for (int i = 0; i < 4; ++i) s += g.next_double();
    x = std::round(((s - 2) * 1.7320508 + shift) * 1000) / 1000;
  }
  return v;
}

}  // namespace plumbline::bench
