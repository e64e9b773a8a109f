// bench_permutation.cc: timing of the permutation-test engine.
//
// Prints one JSON object per line: {"test", "n", "m", "k", "resamples",
// "elements", "seconds", "wall_seconds", "ns_per_element", "kernel",
// "p_value"}. One timed run is one whole permutation_engine::run call (input
// checks, the pooled sort, the observed statistic, all B resamples and the
// p-value). An element is one value drawn into the resampled group: k = the
// smaller group's size, drawn B times, so elements = B * k and
// ns_per_element = seconds / elements. "seconds" is the thread's CPU time,
// "wall_seconds" the wall time (bench_timing.h); each is the fastest of
// `rounds` runs, taken in rounds that run every configuration once (the
// usual way to time a CPU-bound loop on a shared machine: the fastest run
// is the one least disturbed by other processes, and the rounds spread each
// configuration over the same stretch of time).
// tests/bench/permutation_bench.py runs this and SciPy side by side.
//
// Usage: plumbline_bench_permutation [--quick] [--kernel automatic|avx2|generic]
// (--kernel selects the generator's kernels, rng::use_kernel; results are
// the same with each, only the time differs).
#include <algorithm>
#include <cstdio>
#include <cstring>
#include <string>
#include <vector>

#include "core/permutation.h"
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
                   "usage: plumbline_bench_permutation [--quick] "
                   "[--kernel automatic|avx2|generic]\n");
      return 2;
    }
  }
  const std::size_t sizes[] = {50, 500, 5000};
  const test_kind tests[] = {test_kind::mean_diff, test_kind::ks};
  const uint64_t resamples = 9999;
  const int rounds = quick ? 1 : 21;
  struct config {
    test_kind test;
    std::vector<double> x, y;
    double best_cpu = 1e300, best_wall = 1e300, p = 0;
  };
  std::vector<config> configs;
  for (test_kind t : tests) {
    for (std::size_t n : sizes) {
      rng data_gen(12345 + n);
      config c{t, make_sample(data_gen, n, 0), {}};
      c.y = make_sample(data_gen, n, 0.1);
      configs.push_back(std::move(c));
    }
  }
  // Rounds: every configuration once per round, so that all of them see the
  // same mix of machine load; the fastest round counts for each.
  permutation_engine engine;
  const char* used = "generic";
  for (int r = 0; r < rounds; ++r) {
    for (config& c : configs) {
      permutation_options opt;
      opt.test = c.test;
      opt.resamples = resamples;
      opt.exact = exact_mode::never;
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
      c.p = res->p_value;
      c.best_cpu = std::min(c.best_cpu, time.cpu);
      c.best_wall = std::min(c.best_wall, time.wall);
    }
  }
  for (const config& c : configs) {
    const std::size_t k = std::min(c.x.size(), c.y.size());
    const double elements = static_cast<double>(resamples) * static_cast<double>(k);
    std::printf(
        "{\"test\": \"%s\", \"n\": %zu, \"m\": %zu, \"k\": %zu, \"resamples\": %llu, "
        "\"elements\": %.0f, \"seconds\": %.6g, \"wall_seconds\": %.6g, "
        "\"ns_per_element\": %.4g, \"kernel\": \"%s\", \"p_value\": %.6g}\n",
        std::string(test_name(c.test)).c_str(), c.x.size(), c.y.size(), k,
        static_cast<unsigned long long>(resamples), elements, c.best_cpu, c.best_wall,
        c.best_cpu * 1e9 / elements, used, c.p);
  }
  return 0;
}
