// bench_bootstrap.cc: timing of the bootstrap drift-interval engine.
//
// Prints one JSON object per line: {"method", "n", "m", "resamples",
// "indices", "seconds", "wall_seconds", "ns_per_index", "kernel", "lower",
// "upper"}. One timed run is one whole bootstrap_engine::run call (input
// checks, the windows' sorts and dependence summaries, all B resamples, the
// sort of the replicates and, for BCa, the jackknife). An index is one drawn
// bootstrap index: n + m per resample, so indices = B * (n + m) and
// ns_per_index = seconds / indices. The quantity is the difference of means,
// resampled independently (block length 1), B = 9999. "seconds" is the
// thread's CPU time, "wall_seconds" the wall time (bench_timing.h); each is
// the fastest of `rounds` runs, taken in rounds that run every configuration
// once (so that all see the same stretch of machine load). tests/bench/bootstrap_bench.py runs this
// and SciPy side by side.
//
// Usage: plumbline_bench_bootstrap [--quick] [--kernel automatic|avx2|generic]
// (--kernel selects the generator's kernels, rng::use_kernel; results are
// the same with each, only the time differs).
#include <algorithm>
#include <cstdio>
#include <cstring>
#include <string>
#include <vector>

#include "core/bootstrap.h"
#include "core/rng.h"
#include "tests/bench/bench_data.h"
#include "tests/bench/bench_timing.h"

using namespace plumbline;

using bench::make_sample;

namespace {

bool parse_kernel(const char* text, rng::kernel& k) {
  if (std::strcmp(text, "automatic") == 0)
    k = rng::kernel::automatic;
  else if (std::strcmp(text, "avx2") == 0)
    k = rng::kernel::avx2;
  else if (std::strcmp(text, "generic") == 0)
    k = rng::kernel::generic;
  else
    return false;
  return true;
}

}  // namespace

int main(int argc, char** argv) {
  bool quick = false;
  rng::kernel kernel = rng::kernel::automatic;
  for (int a = 1; a < argc; ++a) {
    if (std::strcmp(argv[a], "--quick") == 0) {
      quick = true;
    } else if (std::strcmp(argv[a], "--kernel") == 0 && a + 1 < argc &&
               parse_kernel(argv[a + 1], kernel)) {
      ++a;
    } else {
      std::fprintf(stderr,
                   "usage: plumbline_bench_bootstrap [--quick] "
                   "[--kernel automatic|avx2|generic]\n");
      return 2;
    }
  }
  const std::size_t sizes[] = {50, 500, 5000};
  const interval_method methods[] = {interval_method::percentile, interval_method::bca};
  const uint64_t resamples = 9999;
  const int rounds = quick ? 1 : 21;
  struct config {
    interval_method method;
    std::vector<double> x, y;
    double best_cpu = 1e300, best_wall = 1e300, lower = 0, upper = 0;
  };
  std::vector<config> configs;
  for (interval_method method : methods) {
    for (std::size_t n : sizes) {
      rng data_gen(777 + n);
      config c{method, make_sample(data_gen, n, 0), {}};
      c.y = make_sample(data_gen, n, 0.1);
      configs.push_back(std::move(c));
    }
  }
  // Rounds: every configuration once per round, so that all of them see the
  // same mix of machine load; the fastest round counts for each.
  bootstrap_engine engine;
  const char* used = "generic";
  for (int r = 0; r < rounds; ++r) {
    for (config& c : configs) {
      interval_options opt;
      opt.quantity = drift_quantity::mean_diff;
      opt.method = c.method;
      opt.resamples = resamples;
      opt.block_length = 1;
      rng gen(1);
      gen.use_kernel(kernel);
      used = gen.kernel_in_use() == rng::kernel::avx2 ? "avx2" : "generic";
      const bench::stopwatch clock;
      auto res = engine.run(c.x, c.y, opt, gen);
      const bench::stopwatch::reading time = clock.elapsed();
      if (!res) {
        std::fprintf(stderr, "%s\n", res.err().message.c_str());
        return 1;
      }
      c.lower = res->lower;
      c.upper = res->upper;
      c.best_cpu = std::min(c.best_cpu, time.cpu);
      c.best_wall = std::min(c.best_wall, time.wall);
    }
  }
  for (const config& c : configs) {
    const double indices =
        static_cast<double>(resamples) * static_cast<double>(c.x.size() + c.y.size());
    std::printf(
        "{\"method\": \"%s\", \"n\": %zu, \"m\": %zu, \"resamples\": %llu, \"indices\": %.0f, "
        "\"seconds\": %.6g, \"wall_seconds\": %.6g, \"ns_per_index\": %.4g, \"kernel\": \"%s\", "
        "\"lower\": %.6g, \"upper\": %.6g}\n",
        std::string(method_name(c.method)).c_str(), c.x.size(), c.y.size(),
        static_cast<unsigned long long>(resamples), indices, c.best_cpu, c.best_wall,
        c.best_cpu * 1e9 / indices, used, c.lower, c.upper);
  }
  return 0;
}
