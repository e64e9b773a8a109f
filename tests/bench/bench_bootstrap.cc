// bench_bootstrap.cc: timing of the bootstrap drift-interval engine.
//
// Prints one JSON object per line: {"method", "n", "m", "resamples",
// "seconds", "ns_per_index"}, where an index is one drawn bootstrap index
// (n + m per resample). The quantity is the difference of means, resampled
// independently (block none), B = 9999. Fastest of several runs.
// tests/bench/bootstrap_bench.py runs this and SciPy side by side.
//
// Usage: plumbline_bench_bootstrap [--quick]
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <vector>

#include "core/bootstrap.h"
#include "core/rng.h"
#include "tests/bench/bench_data.h"

using namespace plumbline;

using bench::make_sample;

int main(int argc, char** argv) {
  const bool quick = argc > 1 && std::strcmp(argv[1], "--quick") == 0;
  const std::size_t sizes[] = {50, 500, 5000};
  const interval_method methods[] = {interval_method::percentile, interval_method::bca};
  const uint64_t resamples = 9999;
  const int reps = quick ? 1 : 5;
  bootstrap_engine engine;
  for (interval_method method : methods) {
    for (std::size_t n : sizes) {
      rng data_gen(777 + n);
      const auto x = make_sample(data_gen, n, 0);
      const auto y = make_sample(data_gen, n, 0.1);
      interval_options opt;
      opt.quantity = drift_quantity::mean_diff;
      opt.method = method;
      opt.resamples = resamples;
      opt.block_length = 1;
      double best = 1e300, lower = 0, upper = 0;
      for (int r = 0; r < reps; ++r) {
        rng gen(1);
        const auto start = std::chrono::steady_clock::now();
        auto res = engine.run(x, y, opt, gen);
        const auto stop = std::chrono::steady_clock::now();
        if (!res) {
          std::fprintf(stderr, "%s\n", res.err().message.c_str());
          return 1;
        }
        lower = res->lower;
        upper = res->upper;
        best = std::min(best, std::chrono::duration<double>(stop - start).count());
      }
      const double indices = static_cast<double>(resamples) * static_cast<double>(2 * n);
      std::printf(
          "{\"method\": \"%s\", \"n\": %zu, \"m\": %zu, \"resamples\": %llu, \"seconds\": %.6g, "
          "\"ns_per_index\": %.4g, \"lower\": %.6g, \"upper\": %.6g}\n",
          std::string(method_name(method)).c_str(), n, n,
          static_cast<unsigned long long>(resamples), best, best * 1e9 / indices, lower, upper);
      std::fflush(stdout);
    }
  }
  return 0;
}
