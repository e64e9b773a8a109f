// rng_test.cc: the generator of core/rng.h against its own definition.
//
// These checks hold the pieces of `rng` to the stream that core/rng.h defines
// (four splitmix64-seeded xoshiro256++ lanes, interleaved), and to each other
// (each vector kernel's fill against the scalar fill, bulk bounded draws of
// each kernel against successive bounded() calls, snapshots against
// uninterrupted runs).
// Comparisons with an independent implementation, published test vectors and
// the statistical uniformity checks are in tests/reference/rng_reference_test.cc.
#include "core/rng.h"

#include <algorithm>
#include <array>
#include <catch2/catch.hpp>
#include <cmath>
#include <cstdint>
#include <vector>

namespace {

using plumbline::rng;
using plumbline::splitmix64;
using plumbline::xoshiro256pp;
using lane_states = std::array<std::array<uint64_t, 4>, rng::lanes>;

// The four lanes of rng(seed) as core/rng.h defines them: lane j holds
// splitmix64 outputs 4j..4j+3 of the seed.
std::array<xoshiro256pp, rng::lanes> documented_lanes(uint64_t seed) {
  splitmix64 sm(seed);
  auto next_words = [&sm] {
    std::array<uint64_t, 4> w{};
    for (auto& x : w)
      x = sm.next();
    return w;
  };
  const auto l0 = next_words();
  const auto l1 = next_words();
  const auto l2 = next_words();
  const auto l3 = next_words();
  return {xoshiro256pp(l0), xoshiro256pp(l1), xoshiro256pp(l2), xoshiro256pp(l3)};
}

// A mixed sequence of draws, so that comparisons cover every entry point and
// every combination of block position and pending half.
std::vector<uint64_t> mixed_draws(rng& g, int rounds) {
  std::vector<uint64_t> out;
  for (int i = 0; i < rounds; ++i) {
    switch (i % 5) {
      case 0:
        out.push_back(g.next_u64());
        break;
      case 1:
        out.push_back(g.next_u32());
        break;
      case 2:
        out.push_back(g.bounded(1000003u));
        break;
      case 3:
        out.push_back(static_cast<uint64_t>(std::ldexp(g.next_double(), 53)));
        break;
      default:
        out.push_back(g.next_u32());
        out.push_back(g.next_u32());
        out.push_back(g.next_u32());
        break;
    }
  }
  return out;
}

constexpr uint64_t seeds[] = {0, 1, 7, 20261201, 0x9e3779b97f4a7c15ULL, ~0ULL};

// The kernels this CPU can run (core/rng.h, "Kernels"): generic always, AVX2
// when the CPU has it.
std::vector<rng::kernel> runnable_kernels() {
  std::vector<rng::kernel> k = {rng::kernel::generic};
  if (rng::vector_path_is_avx2()) k.push_back(rng::kernel::avx2);
  return k;
}

const char* kernel_name(rng::kernel k) {
  return k == rng::kernel::avx2 ? "avx2" : k == rng::kernel::generic ? "generic" : "automatic";
}

// A generator whose bulk draws run on kernel k.
rng on_kernel(uint64_t seed, rng::kernel k) {
  rng g(seed);
  g.use_kernel(k);
  return g;
}

}  // namespace

TEST_CASE("each vector fill writes exactly the numbers of fill_scalar for any lane state and size",
          "[core][rng]") {
  INFO("fill_vector runs the AVX2 path on this CPU: " << rng::vector_path_is_avx2());
  // On a CPU without AVX2 only the generic kernel can run; say so rather
  // than pass silently.
  if (!rng::vector_path_is_avx2()) WARN("no AVX2 on this CPU: the AVX2 fill is not checked");
  // Lane states: random words from splitmix64, plus hand-made extremes (all
  // bits set, single bits at the ends of the words) where carries and
  // rotations are easiest to get wrong.
  std::vector<lane_states> states;
  splitmix64 words(0x5eed5eed5eedULL);
  for (int trial = 0; trial < 200; ++trial) {
    lane_states s{};
    for (auto& lane : s)
      for (auto& w : lane)
        w = words.next();
    states.push_back(s);
  }
  lane_states extremes{};
  extremes[0] = {~0ULL, ~0ULL, ~0ULL, ~0ULL};
  extremes[1] = {1ULL, 0, 0, 0};
  extremes[2] = {0, 0, 0, 1ULL << 63};
  extremes[3] = {0x8000000000000001ULL, 0x7fffffffffffffffULL, 1ULL << 41, 1ULL << 22};
  states.push_back(extremes);

  const std::size_t sizes[] = {0, 4, 8, 12, 60, 64, 68, 100, 1000, 4096};
  for (std::size_t t = 0; t < states.size(); ++t) {
    for (const std::size_t n : sizes) {
      INFO("lane state " << t << ", n = " << n);
      lane_states a = states[t];
      lane_states b = states[t];
      // One spare slot past n on each side shows a fill that writes too far.
      std::vector<uint64_t> out_scalar(n + 1, 0xdeadbeefULL);
      std::vector<uint64_t> out_vector(n + 1, 0xdeadbeefULL);
      rng::fill_scalar(a, out_scalar.data(), n);
      rng::fill_vector(b, out_vector.data(), n);
      REQUIRE(out_vector == out_scalar);
      REQUIRE(out_vector[n] == 0xdeadbeefULL);
      REQUIRE(b == a);  // both leave the lanes n / 4 steps on
      for (const rng::kernel k : runnable_kernels()) {
        INFO("fill_with, kernel " << kernel_name(k));
        lane_states c = states[t];
        std::vector<uint64_t> out_kernel(n + 1, 0xdeadbeefULL);
        rng::fill_with(k, c, out_kernel.data(), n);
        REQUIRE(out_kernel == out_scalar);
        REQUIRE(c == a);
      }
    }
  }
}

TEST_CASE("fill_scalar steps each lane as a reference xoshiro256++ and interleaves them",
          "[core][rng]") {
  splitmix64 words(42);
  lane_states s{};
  for (auto& lane : s)
    for (auto& w : lane)
      w = words.next();
  std::array<xoshiro256pp, rng::lanes> g = {xoshiro256pp(s[0]), xoshiro256pp(s[1]),
                                            xoshiro256pp(s[2]), xoshiro256pp(s[3])};
  std::vector<uint64_t> out(400);
  rng::fill_scalar(s, out.data(), out.size());
  for (std::size_t i = 0; i < out.size(); ++i)
    REQUIRE(out[i] == g[i % 4].next());
  for (std::size_t j = 0; j < rng::lanes; ++j)
    REQUIRE(s[j] == g[j].state());
}

TEST_CASE("rng's stream is the interleaving of four splitmix64-seeded xoshiro256++ lanes",
          "[core][rng]") {
  for (const uint64_t seed : seeds) {
    INFO("seed " << seed);
    auto lanes = documented_lanes(seed);
    rng g(seed);
    // Ten blocks and a bit, so that refills are crossed many times.
    for (std::size_t k = 0; k < 10 * rng::block + 3; ++k) {
      INFO("output " << k);
      REQUIRE(g.next_u64() == lanes[k % rng::lanes].next());
    }
  }
}

TEST_CASE("rng's seeding puts splitmix64 outputs 4j..4j+3 into lane j", "[core][rng]") {
  for (const uint64_t seed : seeds) {
    INFO("seed " << seed);
    splitmix64 sm(seed);
    const rng::state_type s = rng(seed).state();
    for (std::size_t j = 0; j < rng::lanes; ++j)
      for (std::size_t w = 0; w < 4; ++w)
        REQUIRE(s.lane[j][w] == sm.next());
    REQUIRE(s.pos == rng::block);  // nothing drawn yet: the first draw refills
    REQUIRE(s.half == 0);
  }
}

TEST_CASE("next_u32 gives the low half of a 64-bit output, then its high half", "[core][rng]") {
  for (const uint64_t seed : seeds) {
    INFO("seed " << seed);
    rng wide(seed);
    rng narrow(seed);
    for (std::size_t k = 0; k < 3 * rng::block + 5; ++k) {
      INFO("output " << k);
      const uint64_t x = wide.next_u64();
      REQUIRE(narrow.next_u32() == static_cast<uint32_t>(x));
      REQUIRE(narrow.next_u32() == static_cast<uint32_t>(x >> 32));
    }
  }
}

TEST_CASE("a 64-bit draw after a single next_u32 discards the pending high half", "[core][rng]") {
  // core/rng.h: a next_u64() or next_double() after an odd number of
  // next_u32() calls discards the pending high half.
  rng a(11);
  rng b(11);
  const uint64_t x0 = a.next_u64();
  const uint64_t x1 = a.next_u64();
  const uint64_t x2 = a.next_u64();
  REQUIRE(b.next_u32() == static_cast<uint32_t>(x0));
  REQUIRE(b.next_u64() == x1);
  REQUIRE(b.next_u32() == static_cast<uint32_t>(x2));
  REQUIRE(b.next_double() == static_cast<double>(a.next_u64() >> 11) * 0x1.0p-53);
}

TEST_CASE("state() and restore() continue the stream exactly", "[core][rng]") {
  // Snapshot points: fresh, mid-block, mid-block with a pending high half, at
  // the end of a block, at the end of a block with the high half of its last
  // value pending, and after a refill.
  struct point {
    const char* what;
    int u64_before;
    bool pending_half;
  };
  const point points[] = {
      {"fresh", 0, false},
      {"mid-block", 17, false},
      {"mid-block, high half pending", 17, true},
      {"end of block", static_cast<int>(rng::block), false},
      {"end of block, high half pending", static_cast<int>(rng::block) - 1, true},
      {"second block", static_cast<int>(rng::block) + 3, false},
  };
  for (const uint64_t seed : seeds) {
    for (const point& p : points) {
      INFO("seed " << seed << ", " << p.what);
      rng original(seed);
      for (int i = 0; i < p.u64_before; ++i)
        original.next_u64();
      if (p.pending_half) original.next_u32();
      const rng::state_type snap = original.state();
      if (p.pending_half) REQUIRE(snap.half == 1);

      rng restored(seed ^ 0xabcdefULL);  // a different stream, overwritten
      restored.restore(snap);
      REQUIRE(restored.state() == snap);
      REQUIRE(mixed_draws(restored, 400) == mixed_draws(original, 400));
    }
  }
}

TEST_CASE("restoring a snapshot with an out-of-range position reads nothing past the block",
          "[core][rng]") {
  rng source(3);
  source.next_u64();
  rng::state_type snap = source.state();
  snap.pos = 1000;  // past the block: the next draw must refill from the lanes
  snap.half = 1;
  rng g(4);
  g.restore(snap);
  lane_states lanes = snap.lane;
  std::array<uint64_t, rng::block> expected{};
  rng::fill_scalar(lanes, expected.data(), expected.size());
  REQUIRE(g.next_u64() == expected[0]);
  REQUIRE(g.next_u32() == static_cast<uint32_t>(expected[1]));

  rng other(5);
  other.next_u64();
  snap = other.state();
  snap.pos = 0;
  snap.half = 1;  // no value before position 0 can have a pending half
  g.restore(snap);
  REQUIRE(snap.buffer[0] != 0);
  REQUIRE(g.next_u32() == static_cast<uint32_t>(snap.buffer[0]));
  REQUIRE(g.next_u32() == static_cast<uint32_t>(snap.buffer[0] >> 32));
}

TEST_CASE("bounded(r) is always below r", "[core][rng]") {
  const uint32_t ranges[] = {1u, 2u, 3u, 7u, (1u << 31) + 1u, 0xffffffffu};
  for (const uint32_t r : ranges) {
    INFO("r = " << r);
    rng g(r);
    uint32_t largest = 0;
    for (int i = 0; i < 200000; ++i) {
      const uint32_t v = g.bounded(r);
      REQUIRE(v < r);
      largest = std::max(largest, v);
    }
    // Not a bound check: a sanity check that the top of the range is reached
    // (for r = 2^31 + 1 and 2^32 - 1, the largest of 200000 uniform draws is
    // within r / 1000 of r - 1 except with probability e^-200).
    if (r <= 7) {
      REQUIRE(largest == r - 1);
    } else {
      REQUIRE(largest > r - r / 1000);
    }
  }
}

TEST_CASE("bounded(r) takes one 32-bit draw when the first is accepted", "[core][rng]") {
  // Lemire (ACM TOMACS 2019): with m = x * r, x is accepted at once when
  // (m mod 2^32) >= r, and then the result is m >> 32 without a second draw.
  // Here the test replays the first draw of a twin generator.
  rng g(99);
  rng twin(99);
  int accepted_at_once = 0;
  for (int i = 0; i < 10000; ++i) {
    const uint32_t r = 1000u + static_cast<uint32_t>(i);
    const uint32_t x = twin.next_u32();
    const uint64_t m = static_cast<uint64_t>(x) * r;
    const uint32_t v = g.bounded(r);
    if (static_cast<uint32_t>(m) >= r) {
      ++accepted_at_once;
      REQUIRE(v == static_cast<uint32_t>(m >> 32));
    } else {
      // Rejection was possible: resynchronise the twin with g.
      twin.restore(g.state());
    }
    REQUIRE(twin.state() == g.state());
  }
  // With r <= 11000 the first draw is rejected with probability below 3e-6.
  REQUIRE(accepted_at_once >= 9990);
}

namespace {

// Where a batch starts: fresh (first draw refills), mid-block, mid-block with
// a high half pending, and one value before the end of a block.
void advance_to_start(rng& g, int start) {
  switch (start) {
    case 0:
      break;
    case 1:
      for (int i = 0; i < 5; ++i)
        g.next_u64();
      break;
    case 2:
      for (int i = 0; i < 5; ++i)
        g.next_u64();
      g.next_u32();
      break;
    default:
      for (std::size_t i = 0; i + 1 < rng::block; ++i)
        g.next_u64();
      break;
  }
}

}  // namespace

TEST_CASE("bounded_fill returns exactly what successive bounded() calls return", "[core][rng]") {
  // Ranges where the first draw is almost never rejected (small r) and where
  // it often is (near 2^32), so that both the batched multiply and its
  // one-at-a-time fallback are taken.
  const uint32_t ranges[] = {1u,       2u,         3u, 10u, 1000u, 1000003u, (1u << 31) + 1u,
                             3u << 30, 0xffffffffu};
  // Counts below, at and above one block's 128 32-bit values, and several
  // blocks (the whole-block path of the kernels).
  const uint32_t counts[] = {0u, 1u, 2u, 3u, 127u, 128u, 129u, 255u, 256u, 257u, 1000u};
  for (const rng::kernel k : runnable_kernels()) {
    for (const uint64_t seed : {uint64_t{5}, uint64_t{20261201}}) {
      for (const uint32_t r : ranges) {
        for (const uint32_t count : counts) {
          for (int start = 0; start < 4; ++start) {
            INFO("kernel " << kernel_name(k) << ", seed " << seed << ", r = " << r << ", count "
                           << count << ", start " << start);
            rng batched = on_kernel(seed, k);
            rng single(seed);
            advance_to_start(batched, start);
            advance_to_start(single, start);
            std::vector<uint32_t> got(count + 1, 0xabababab);
            batched.bounded_fill(got.data(), r, count);
            std::vector<uint32_t> want(count + 1, 0xabababab);
            for (uint32_t i = 0; i < count; ++i)
              want[i] = single.bounded(r);
            REQUIRE(got == want);  // the spare last slot stays untouched
            REQUIRE(batched.state() == single.state());
            REQUIRE(mixed_draws(batched, 20) == mixed_draws(single, 20));
          }
        }
      }
    }
  }
}

TEST_CASE("bounded_descending returns exactly bounded(n), bounded(n - 1), ... in turn",
          "[core][rng]") {
  struct run {
    uint32_t n;
    uint32_t k;
  };
  const run runs[] = {{1, 0},
                      {1, 1},
                      {2, 2},
                      {10, 10},
                      {1000, 137},
                      {1000, 1000},
                      {1000, 500},
                      {100000, 300},
                      {100000, 2000},
                      {(1u << 31) + 1u, 500},
                      {0xffffffffu, 300}};
  for (const rng::kernel kern : runnable_kernels()) {
    for (const uint64_t seed : {uint64_t{6}, uint64_t{20261201}}) {
      for (const run& rn : runs) {
        for (int start = 0; start < 4; ++start) {
          INFO("kernel " << kernel_name(kern) << ", seed " << seed << ", n = " << rn.n
                         << ", k = " << rn.k << ", start " << start);
          rng batched = on_kernel(seed, kern);
          rng single(seed);
          advance_to_start(batched, start);
          advance_to_start(single, start);
          std::vector<uint32_t> got(rn.k + 1, 0xabababab);
          batched.bounded_descending(got.data(), rn.n, rn.k);
          std::vector<uint32_t> want(rn.k + 1, 0xabababab);
          for (uint32_t i = 0; i < rn.k; ++i)
            want[i] = single.bounded(rn.n - i);
          REQUIRE(got == want);
          REQUIRE(batched.state() == single.state());
          REQUIRE(mixed_draws(batched, 20) == mixed_draws(single, 20));
        }
      }
    }
  }
}

TEST_CASE("bulk draws stay exact when a rejection is possible in some blocks and not in others",
          "[core][rng]") {
  // r = 2^24: Lemire's threshold 2^32 mod r is 0, so no draw is ever rejected
  // and the stream stays aligned to blocks of 128 32-bit values; but a low
  // word x * r mod 2^32 below r (x mod 2^8 == 0, probability 1/256) makes a
  // rejection look possible, and its block is redone one bounded() at a time.
  // A twin's stream shows that both kinds of block occur among the 64 drawn.
  constexpr uint32_t r = 1u << 24;
  constexpr uint32_t blocks = 64, count = blocks * 2 * rng::block;
  for (const rng::kernel k : runnable_kernels()) {
    INFO("kernel " << kernel_name(k));
    rng twin(41);
    uint32_t slow_blocks = 0;
    for (uint32_t b = 0; b < blocks; ++b) {
      bool slow = false;
      for (std::size_t i = 0; i < 2 * rng::block; ++i)
        slow |= (twin.next_u32() & 0xffu) == 0;
      slow_blocks += slow ? 1 : 0;
    }
    INFO("blocks on the exact path: " << slow_blocks << " of " << blocks);
    REQUIRE(slow_blocks > 0);
    REQUIRE(slow_blocks < blocks);
    rng batched = on_kernel(41, k);
    rng single(41);
    std::vector<uint32_t> got(count), want(count);
    batched.bounded_fill(got.data(), r, count);
    for (uint32_t i = 0; i < count; ++i)
      want[i] = single.bounded(r);
    REQUIRE(got == want);
    REQUIRE(batched.state() == single.state());
    REQUIRE(batched.state() == twin.state());  // no draw was rejected

    // r = 2^24 + 1 rejects for real (threshold 2^24 - 255, so with
    // probability about 1/256 per draw), which shifts every later block;
    // likewise a descending run from there.
    rng batched2 = on_kernel(43, k);
    rng single2(43);
    batched2.bounded_fill(got.data(), r + 1, count);
    for (uint32_t i = 0; i < count; ++i)
      want[i] = single2.bounded(r + 1);
    REQUIRE(got == want);
    batched2.bounded_descending(got.data(), r + 9000, count);
    for (uint32_t i = 0; i < count; ++i)
      want[i] = single2.bounded(r + 9000 - i);
    REQUIRE(got == want);
    REQUIRE(batched2.state() == single2.state());
  }
}

TEST_CASE("every kernel gives the same stream through a long mixed run of bulk and single draws",
          "[core][rng]") {
  // Random operations, sizes and ranges, drawn from a separate generator:
  // bulk draws of 0 to 700 values (less than, about and several blocks),
  // single bounded(), next_u32 and next_u64 between them, so every bulk
  // draw starts at some block position with or without a pending half. The
  // reference replays each bulk draw as successive bounded() calls.
  rng plan(2718);
  struct op {
    uint32_t kind, range, count;
  };
  std::vector<op> ops;
  for (int i = 0; i < 600; ++i) {
    const uint32_t kind = plan.bounded(5);
    const uint32_t range =
        plan.bounded(3) == 0 ? 0xfffffff0u - plan.bounded(1000) : 1 + plan.bounded(100000);
    ops.push_back({kind, range, plan.bounded(701)});
  }
  auto run = [&](rng& g, bool bulk) {
    std::vector<uint64_t> out;
    std::vector<uint32_t> buf(701);
    for (const op& o : ops) {
      switch (o.kind) {
        case 0:
        case 1: {
          const uint32_t n = o.kind == 1 ? std::max(o.range, o.count) : o.range;
          const uint32_t step = o.kind == 1 ? 1 : 0;
          if (bulk) {
            if (step == 0)
              g.bounded_fill(buf.data(), n, o.count);
            else
              g.bounded_descending(buf.data(), n, o.count);
          } else {
            for (uint32_t i = 0; i < o.count; ++i)
              buf[i] = g.bounded(n - step * i);
          }
          out.insert(out.end(), buf.begin(), buf.begin() + o.count);
          break;
        }
        case 2:
          out.push_back(g.bounded(o.range));
          break;
        case 3:
          out.push_back(g.next_u32());
          break;
        default:
          out.push_back(g.next_u64());
          break;
      }
    }
    return out;
  };
  rng reference(99);
  const auto want = run(reference, false);
  for (const rng::kernel k : runnable_kernels()) {
    INFO("kernel " << kernel_name(k));
    rng g = on_kernel(99, k);
    REQUIRE(run(g, true) == want);
    REQUIRE(g.state() == reference.state());
  }
}

TEST_CASE("use_kernel selects the generic kernel, and AVX2 exactly when the CPU has it",
          "[core][rng]") {
  rng g(1);
  CHECK(g.kernel_in_use() ==
        (rng::vector_path_is_avx2() ? rng::kernel::avx2 : rng::kernel::generic));
  g.use_kernel(rng::kernel::generic);
  CHECK(g.kernel_in_use() == rng::kernel::generic);
  g.use_kernel(rng::kernel::avx2);
  CHECK(g.kernel_in_use() ==
        (rng::vector_path_is_avx2() ? rng::kernel::avx2 : rng::kernel::generic));
  g.use_kernel(rng::kernel::automatic);
  CHECK(g.kernel_in_use() ==
        (rng::vector_path_is_avx2() ? rng::kernel::avx2 : rng::kernel::generic));
}

TEST_CASE("next_double lies in the unit interval on the grid k / 2^53 from the top 53 bits",
          "[core][rng]") {
  for (const uint64_t seed : seeds) {
    INFO("seed " << seed);
    rng g(seed);
    rng twin(seed);
    for (int i = 0; i < 100000; ++i) {
      const double d = g.next_double();
      REQUIRE(d >= 0.0);
      REQUIRE(d < 1.0);
      const double k = std::ldexp(d, 53);
      REQUIRE(k == std::floor(k));
      REQUIRE(static_cast<uint64_t>(k) == (twin.next_u64() >> 11));
    }
  }
  // The largest value on the grid is below 1: (2^53 - 1) / 2^53 is exact in a
  // double (IEEE 754 binary64 has a 53-bit significand).
  REQUIRE(static_cast<double>(~0ULL >> 11) * 0x1.0p-53 < 1.0);
}

// PINNED outputs. Generated once from the implementation in core/rng.cc and
// kept here so that any change of the stream is visible: every resampling
// result of the engine is a function of (seed, data) through this generator,
// so changing these numbers changes published results. They are pins, not
// external truth (the reference suite checks the stream against an
// independent implementation and published vectors).
TEST_CASE("the first next_u64 outputs for seeds 0, 1 and 20261201 are pinned", "[core][rng]") {
  const std::array<uint64_t, 8> seed_0 = {5987356902031041503ULL,  7910265956995748713ULL,
                                          17800771393647437586ULL, 8204869049763580394ULL,
                                          7051070477665621255ULL,  11593717927555618233ULL,
                                          11852925777569747105ULL, 13097142371489271349ULL};
  const std::array<uint64_t, 8> seed_1 = {14971601782005023387ULL, 7326487388593424192ULL,
                                          16049773278942742430ULL, 5003324768619461262ULL,
                                          13781649495232077965ULL, 13107318563049781906ULL,
                                          4849256105358650509ULL,  15411105416613970987ULL};
  const std::array<uint64_t, 8> seed_20261201 = {16383946857660004530ULL, 14439056337028095981ULL,
                                                 8978148463770996118ULL,  7486512660701697668ULL,
                                                 12028393872966953816ULL, 11683515613109266576ULL,
                                                 17860846521589010875ULL, 14024212732091331388ULL};
  auto first8 = [](uint64_t seed) {
    rng g(seed);
    std::array<uint64_t, 8> out{};
    for (auto& x : out)
      x = g.next_u64();
    return out;
  };
  CHECK(first8(0) == seed_0);
  CHECK(first8(1) == seed_1);
  CHECK(first8(20261201) == seed_20261201);
}

TEST_CASE("the first bounded(1000) draws for seed 7 are pinned", "[core][rng]") {
  const std::array<uint32_t, 8> pinned = {166, 55, 837, 311, 874, 731, 927, 563};
  rng g(7);
  std::array<uint32_t, 8> got{};
  for (auto& x : got)
    x = g.bounded(1000);
  CHECK(got == pinned);
}
