// bench_rng.cc: timing of the generator's pieces, side by side in one run.
//
// Prints one JSON object per line: {"what", "kernel", "unit", "ns_per_unit"}.
// Rows:
//   fill              a block fill of 64 64-bit values, per 32-bit value
//                     (scalar: rng::fill_scalar; generic and avx2:
//                     rng::fill_with);
//   bounded           successive bounded(1000) calls, per value;
//   bounded_fill      bounded_fill(500) then bounded_fill(499), 500 values
//                     each (the bootstrap's pattern), per value;
//   bounded_descending bounded_descending(1000, 500) (one permutation
//                     resample's draws), per value.
// Each row is timed in `rounds` interleaved rounds (every row once per round,
// so the rows see the same machine load) and the fastest round counts. Times
// are the thread's CPU time (bench_timing.h).
//
// Usage: plumbline_bench_rng [--quick]
#include <algorithm>
#include <array>
#include <cstdint>
#include <cstdio>
#include <cstring>
#include <functional>
#include <memory>
#include <string>
#include <vector>

#include "core/rng.h"
#include "tests/bench/bench_timing.h"

using namespace plumbline;

namespace {

struct row {
  std::string what, kernel, unit;
  double units = 0;  // units of work per timed call
  std::function<void()> body;
  double best = 1e300;
};

volatile uint64_t sink;

}  // namespace

int main(int argc, char** argv) {
  const bool quick = argc > 1 && std::strcmp(argv[1], "--quick") == 0;
  const int rounds = quick ? 2 : 15;
  const int calls = 20000;
  std::vector<row> rows;
  std::vector<uint32_t> out(1000);
  std::array<uint64_t, rng::block> block{};

  auto lanes_of = [](uint64_t seed) { return rng(seed).state().lane; };
  auto fill_lanes = std::make_shared<std::array<std::array<uint64_t, 4>, rng::lanes>>(lanes_of(1));
  rows.push_back({"fill", "scalar", "32-bit value", 2.0 * rng::block * calls, [&, fill_lanes] {
                    for (int c = 0; c < calls; ++c) {
                      rng::fill_scalar(*fill_lanes, block.data(), block.size());
                      sink = block[c % rng::block];
                    }
                  }});
  for (const rng::kernel k : {rng::kernel::generic, rng::kernel::avx2}) {
    if (k == rng::kernel::avx2 && !rng::vector_path_is_avx2()) continue;
    const std::string name = k == rng::kernel::avx2 ? "avx2" : "generic";
    rows.push_back({"fill", name, "32-bit value", 2.0 * rng::block * calls, [&, fill_lanes, k] {
                      for (int c = 0; c < calls; ++c) {
                        rng::fill_with(k, *fill_lanes, block.data(), block.size());
                        sink = block[c % rng::block];
                      }
                    }});
    auto gen = std::make_shared<rng>(2);
    gen->use_kernel(k);
    rows.push_back({"bounded", name, "value", 500.0 * calls, [&, gen] {
                      for (int c = 0; c < calls; ++c) {
                        uint32_t acc = 0;
                        for (int i = 0; i < 500; ++i)
                          acc += gen->bounded(1000);
                        sink = acc;
                      }
                    }});
    rows.push_back({"bounded_fill", name, "value", 1000.0 * calls, [&, gen] {
                      for (int c = 0; c < calls; ++c) {
                        gen->bounded_fill(out.data(), 500, 500);
                        gen->bounded_fill(out.data() + 500, 499, 500);
                        sink = out[c % 1000];
                      }
                    }});
    rows.push_back({"bounded_descending", name, "value", 500.0 * calls, [&, gen] {
                      for (int c = 0; c < calls; ++c) {
                        gen->bounded_descending(out.data(), 1000, 500);
                        sink = out[c % 500];
                      }
                    }});
  }
  for (int r = 0; r < rounds; ++r) {
    for (row& w : rows) {
      const bench::stopwatch clock;
      w.body();
      w.best = std::min(w.best, clock.elapsed().cpu);
    }
  }
  for (const row& w : rows)
    std::printf("{\"what\": \"%s\", \"kernel\": \"%s\", \"unit\": \"%s\", \"ns_per_unit\": %.4g}\n",
                w.what.c_str(), w.kernel.c_str(), w.unit.c_str(), w.best * 1e9 / w.units);
  return 0;
}
