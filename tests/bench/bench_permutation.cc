// bench_permutation.cc: timing of the permutation-test engine.
//
// Prints one JSON object per line: {"test", "n", "m", "resamples",
// "seconds", "ns_per_element"} where an element is one drawn value (k = the
// smaller group's size, drawn B times). Each configuration is run `reps`
// times and the fastest run is reported (the usual way to time a CPU-bound
// loop: it filters out interference from the other processes on the machine).
// tests/bench/permutation_bench.py runs this and SciPy side by side.
//
// Usage: plumbline_bench_permutation [--quick]
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <vector>

#include "core/permutation.h"
#include "core/rng.h"
#include "tests/bench/bench_data.h"

using namespace plumbline;

using bench::make_sample;

int main(int argc, char** argv) {
  const bool quick = argc > 1 && std::strcmp(argv[1], "--quick") == 0;
  const std::size_t sizes[] = {50, 500, 5000};
  const test_kind tests[] = {test_kind::mean_diff, test_kind::ks};
  const uint64_t resamples = 9999;
  const int reps = quick ? 1 : 5;
  permutation_engine engine;
  for (test_kind t : tests) {
    for (std::size_t n : sizes) {
      rng data_gen(12345 + n);
      const auto x = make_sample(data_gen, n, 0);
      const auto y = make_sample(data_gen, n, 0.1);
      permutation_options opt;
      opt.test = t;
      opt.resamples = resamples;
      opt.exact = exact_mode::never;
      double best = 1e300;
      double p = 0;
      for (int r = 0; r < reps; ++r) {
        rng gen(1);
        const auto start = std::chrono::steady_clock::now();
        auto res = engine.run(x, y, opt, gen);
        const auto stop = std::chrono::steady_clock::now();
        if (!res) {
          std::fprintf(stderr, "%s\n", res.err().message.c_str());
          return 1;
        }
        p = res->p_value;
        best = std::min(best, std::chrono::duration<double>(stop - start).count());
      }
      const double elements = static_cast<double>(resamples) * static_cast<double>(n);
      std::printf(
          "{\"test\": \"%s\", \"n\": %zu, \"m\": %zu, \"resamples\": %llu, \"seconds\": %.6g, "
          "\"ns_per_element\": %.4g, \"p_value\": %.6g}\n",
          std::string(test_name(t)).c_str(), n, n, static_cast<unsigned long long>(resamples),
          best, best * 1e9 / elements, p);
      std::fflush(stdout);
    }
  }
  return 0;
}
