// rng_reference_test.cc: the generator of core/rng.h against the outside world.
//
//   1. Published test vectors for splitmix64 and xoshiro256++ (sources named
//      beside each vector).
//   2. An independent Python implementation written from the published
//      algorithms (tests/reference/rng_reference.py): the first 1000 outputs of
//      every kind of draw, compared bit for bit.
//   3. Uniformity of bounded() and next_double() by chi-square tests, with
//      critical values from SciPy (scipy.stats.chi2.isf) computed live.
#include <algorithm>
#include <array>
#include <catch2/catch.hpp>
#include <cmath>
#include <cstdint>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "core/rng.h"
#include "support/python.h"

namespace {

using nlohmann::json;
using plumbline::rng;
using plumbline::splitmix64;
using plumbline::xoshiro256pp;
using plumbline::testing::run_python;

constexpr const char* script = "tests/reference/rng_reference.py";

// splitmix64 seeded with 1234567, first five outputs. Source: the task
// statement of Rosetta Code, "Pseudo-random numbers/Splitmix64"
// (rosettacode.org/wiki/Pseudo-random_numbers/Splitmix64), which gives them in
// decimal; the same numbers appear in the tests of several public code bases.
constexpr std::array<uint64_t, 5> splitmix64_1234567 = {
    6457827717110365317ULL, 3203168211198807973ULL, 9817491932198370423ULL, 4593380528125082431ULL,
    16408922859458223821ULL};

// xoshiro256++ from the state {1, 2, 3, 4}, first ten outputs. Source: the
// `reference` test of rand_xoshiro (github.com/rust-random/rngs,
// rand_xoshiro/src/xoshiro256plusplus.rs), whose comment says they were
// produced with Vigna's reference xoshiro256plusplus.c.
constexpr std::array<uint64_t, 4> xoshiro_state_1234 = {1, 2, 3, 4};
constexpr std::array<uint64_t, 10> xoshiro256pp_1234 = {41943041ULL,
                                                        58720359ULL,
                                                        3588806011781223ULL,
                                                        3591011842654386ULL,
                                                        9228616714210784205ULL,
                                                        9973669472204895162ULL,
                                                        14011001112246962877ULL,
                                                        12406186145184390807ULL,
                                                        15849039046786891736ULL,
                                                        10450023813501588000ULL};

// The draws of the Python protocol (see rng_reference.py), run on rng. With
// `batched`, runs of bounded() go through bounded_fill and bounded_descending
// instead of one call per draw, on the generator kernel `k` (core/rng.h,
// "Kernels").
std::vector<std::vector<uint64_t>> run_ops(uint64_t seed, const json& ops, bool batched,
                                           rng::kernel k = rng::kernel::automatic) {
  rng g(seed);
  g.use_kernel(k);
  std::vector<std::vector<uint64_t>> out;
  for (const json& op : ops) {
    const std::string kind = op[0].get<std::string>();
    std::vector<uint64_t> values;
    if (kind == "bounded" || kind == "descending") {
      const uint32_t r = op[1].get<uint32_t>();
      const uint32_t n = op[2].get<uint32_t>();
      const uint32_t step = kind == "descending" ? 1 : 0;
      if (batched) {
        std::vector<uint32_t> draws(n);
        if (step == 0) {
          g.bounded_fill(draws.data(), r, n);
        } else {
          g.bounded_descending(draws.data(), r, n);
        }
        values.assign(draws.begin(), draws.end());
      } else {
        for (uint32_t i = 0; i < n; ++i)
          values.push_back(g.bounded(r - step * i));
      }
    } else {
      const int n = op[1].get<int>();
      for (int i = 0; i < n; ++i) {
        if (kind == "u64") {
          values.push_back(g.next_u64());
        } else if (kind == "u32") {
          values.push_back(g.next_u32());
        } else if (kind == "double") {
          const double d = g.next_double();
          const double k = std::ldexp(d, 53);  // exact: d is k / 2^53
          REQUIRE(k == std::floor(k));
          values.push_back(static_cast<uint64_t>(k));
        } else {
          FAIL("unknown op " << kind);
        }
      }
    }
    out.push_back(std::move(values));
  }
  return out;
}

double chi_square(const std::vector<double>& observed, const std::vector<double>& expected) {
  double x2 = 0.0;
  for (std::size_t i = 0; i < observed.size(); ++i) {
    const double d = observed[i] - expected[i];
    x2 += d * d / expected[i];
  }
  return x2;
}

// Upper-tail critical value of the chi-square distribution with `df` degrees
// of freedom at level `alpha`, from scipy.stats.chi2.isf.
double chi2_critical(double alpha, int df) {
  const json answer = run_python(script, {{"chi2_isf", {{{"alpha", alpha}, {"df", df}}}}});
  return answer.at("chi2_isf").at(0).get<double>();
}

// Level of every uniformity test below. The generators are seeded, so each
// test has one fixed outcome; a correct generator fails a given test with
// probability 1e-6 (common practice for seeded statistical checks: a level so
// small that a failure means a defect, not bad luck; no source).
constexpr double alpha = 1e-6;

}  // namespace

TEST_CASE("splitmix64 reproduces the published outputs for seed 1234567", "[reference][rng]") {
  splitmix64 sm(1234567);
  for (const uint64_t expected : splitmix64_1234567)
    REQUIRE(sm.next() == expected);

  // rng(1234567) puts the first four into lane 0 and starts lane 1 with the
  // fifth (core/rng.h: lane j gets splitmix64 outputs 4j..4j+3).
  const rng::state_type s = rng(1234567).state();
  for (std::size_t w = 0; w < 4; ++w)
    REQUIRE(s.lane[0][w] == splitmix64_1234567[w]);
  REQUIRE(s.lane[1][0] == splitmix64_1234567[4]);
}

TEST_CASE("xoshiro256++ reproduces the published outputs from the state {1, 2, 3, 4}",
          "[reference][rng]") {
  xoshiro256pp g(xoshiro_state_1234);
  for (const uint64_t expected : xoshiro256pp_1234)
    REQUIRE(g.next() == expected);

  // Every block fill (scalar, the automatic vector kernel and the generic
  // one), with every lane in that state, gives each published output four
  // times in a row.
  std::array<std::array<uint64_t, 4>, rng::lanes> scalar_lanes;
  scalar_lanes.fill(xoshiro_state_1234);
  auto vector_lanes = scalar_lanes;
  auto generic_lanes = scalar_lanes;
  std::array<uint64_t, 4 * xoshiro256pp_1234.size()> from_scalar{};
  std::array<uint64_t, 4 * xoshiro256pp_1234.size()> from_vector{};
  std::array<uint64_t, 4 * xoshiro256pp_1234.size()> from_generic{};
  rng::fill_scalar(scalar_lanes, from_scalar.data(), from_scalar.size());
  rng::fill_vector(vector_lanes, from_vector.data(), from_vector.size());
  rng::fill_with(rng::kernel::generic, generic_lanes, from_generic.data(), from_generic.size());
  INFO("fill_vector runs the AVX2 path on this CPU: " << rng::vector_path_is_avx2());
  for (std::size_t i = 0; i < from_scalar.size(); ++i) {
    INFO("output " << i);
    REQUIRE(from_scalar[i] == xoshiro256pp_1234[i / 4]);
    REQUIRE(from_vector[i] == xoshiro256pp_1234[i / 4]);
    REQUIRE(from_generic[i] == xoshiro256pp_1234[i / 4]);
  }
}

TEST_CASE("the independent Python implementation reproduces the published vectors",
          "[reference][rng]") {
  // Validates the model used by the next test case before relying on it.
  const json answer =
      run_python(script, {{"splitmix", {{{"seed", 1234567}, {"count", 5}}}},
                          {"xoshiro", {{{"state", xoshiro_state_1234}, {"count", 10}}}}});
  const auto sm = answer.at("splitmix").at(0).get<std::vector<uint64_t>>();
  const auto xo = answer.at("xoshiro").at(0).get<std::vector<uint64_t>>();
  REQUIRE(sm == std::vector<uint64_t>(splitmix64_1234567.begin(), splitmix64_1234567.end()));
  REQUIRE(xo == std::vector<uint64_t>(xoshiro256pp_1234.begin(), xoshiro256pp_1234.end()));
}

TEST_CASE("rng matches the independent Python implementation for 1000 draws of every kind",
          "[reference][rng]") {
  const std::vector<uint64_t> seeds = {0, 1, 7, 1234567, 20261201, 0x9e3779b97f4a7c15ULL, ~0ULL};
  // Ranges for bounded(): trivial ones, small ones, and ranges near 2^32
  // where Lemire's rejection step runs often (2^31 + 1 rejects a first draw
  // with probability just under 1/2, 3 * 2^30 with probability 1/4).
  const std::vector<uint32_t> ranges = {
      1u, 2u, 3u, 7u, 10u, 1000u, 1000003u, (1u << 31) + 1u, 3u << 30, 0xffffffffu};
  json streams = json::array();
  for (const uint64_t seed : seeds) {
    json ops = json::array({json::array({"u64", 1000})});
    streams.push_back({{"seed", seed}, {"ops", ops}});
    streams.push_back({{"seed", seed}, {"ops", json::array({json::array({"u32", 1000})})}});
    streams.push_back({{"seed", seed}, {"ops", json::array({json::array({"double", 1000})})}});
    for (const uint32_t r : ranges)
      streams.push_back(
          {{"seed", seed}, {"ops", json::array({json::array({"bounded", r, 1000})})}});
    // The draws of partial Fisher-Yates shuffles: of 1000 items in full, and
    // of huge n where the rejection step runs.
    for (const uint32_t n : {1000u, (1u << 31) + 500u, 0xffffffffu})
      streams.push_back(
          {{"seed", seed}, {"ops", json::array({json::array({"descending", n, 1000})})}});
    // Mixed draws: pending high halves taken by next_u32 or discarded by a
    // 64-bit draw, bounded() between them, across several refills.
    json mixed = json::array();
    for (int i = 0; i < 100; ++i) {
      mixed.push_back(json::array({"u32", 1 + i % 3}));
      mixed.push_back(json::array({"u64", i % 2}));
      mixed.push_back(json::array({"bounded", (1u << 31) + 1u, 1 + i % 4}));
      mixed.push_back(json::array({"double", i % 3 == 0 ? 1 : 0}));
      mixed.push_back(json::array({"bounded", 6u, 2}));
      mixed.push_back(json::array({"descending", 3000000000u - 7u * i, 1 + i % 5}));
      mixed.push_back(json::array({"bounded", 1000u, 130}));  // crosses a block
    }
    streams.push_back({{"seed", seed}, {"ops", mixed}});
  }
  const json answer = run_python(script, {{"streams", streams}});
  const json& expected = answer.at("streams");
  REQUIRE(expected.size() == streams.size());
  for (std::size_t i = 0; i < streams.size(); ++i) {
    const uint64_t seed = streams[i].at("seed").get<uint64_t>();
    const json& ops = streams[i].at("ops");
    INFO("seed " << seed << ", ops " << ops.dump().substr(0, 60));
    const auto want = expected.at(i).get<std::vector<std::vector<uint64_t>>>();
    struct variant {
      bool batched;
      rng::kernel kernel;
      const char* what;
    };
    const variant variants[] = {
        {false, rng::kernel::automatic, "one bounded() per draw"},
        {true, rng::kernel::generic, "bounded_fill / bounded_descending, generic kernel"},
        {true, rng::kernel::avx2,
         "bounded_fill / bounded_descending, AVX2 kernel if the CPU has it"}};
    for (const variant& v : variants) {
      INFO(v.what);
      const auto got = run_ops(seed, ops, v.batched, v.kernel);
      REQUIRE(got.size() == want.size());
      for (std::size_t k = 0; k < got.size(); ++k) {
        INFO("op " << k);
        REQUIRE(got[k] == want[k]);
      }
    }
  }
}

TEST_CASE("bounded(r) is uniform below r for r = 3, 10 and 1000 by a chi-square test",
          "[reference][rng]") {
  constexpr int n = 1000000;
  for (const uint32_t r : {3u, 10u, 1000u}) {
    INFO("r = " << r);
    rng g(20261201 + r);
    std::vector<double> observed(r, 0.0);
    for (int i = 0; i < n; ++i)
      observed[g.bounded(r)] += 1.0;
    const std::vector<double> expected(r, static_cast<double>(n) / r);
    const double x2 = chi_square(observed, expected);
    const double critical = chi2_critical(alpha, static_cast<int>(r) - 1);
    INFO("chi-square " << x2 << ", critical value " << critical);
    CHECK(x2 < critical);
  }
}

TEST_CASE("bounded(2^31 + 1) stays uniform while rejection discards about half the draws",
          "[reference][rng]") {
  // r = 2^31 + 1: threshold t = 2^32 mod r = 2^31 - 1, so a 32-bit draw is
  // rejected with probability t / 2^32, just under 1/2 (Lemire 2019, section 4:
  // the rejection probability is (2^L mod s) / 2^L).
  constexpr uint32_t r = (1u << 31) + 1u;
  constexpr int n = 1000000;
  rng g(31);
  rng twin(31);
  // Halves of the range: [0, 2^30) holds 2^30 values, [2^30, 2^31] 2^30 + 1.
  // Sixteenths: [b * 2^27, (b + 1) * 2^27) for b < 15, the last one also
  // holding 2^31.
  std::vector<double> halves(2, 0.0);
  std::vector<double> sixteenths(16, 0.0);
  for (int i = 0; i < n; ++i) {
    const uint32_t v = g.bounded(r);
    halves[v >> 30 ? 1 : 0] += 1.0;
    sixteenths[std::min<uint32_t>(v >> 27, 15)] += 1.0;
  }
  const double per_value = static_cast<double>(n) / r;
  const std::vector<double> halves_expected = {per_value * (1u << 30),
                                               per_value * ((1u << 30) + 1.0)};
  std::vector<double> sixteenths_expected(16, per_value * (1u << 27));
  sixteenths_expected[15] += per_value;
  const double x2_halves = chi_square(halves, halves_expected);
  const double x2_sixteenths = chi_square(sixteenths, sixteenths_expected);
  const json crit = run_python(
      script, {{"chi2_isf", {{{"alpha", alpha}, {"df", 1}}, {{"alpha", alpha}, {"df", 15}}}},
               {"norm_isf", {alpha / 2}}});
  INFO("halves: chi-square " << x2_halves << ", critical " << crit["chi2_isf"][0]);
  CHECK(x2_halves < crit["chi2_isf"][0].get<double>());
  INFO("sixteenths: chi-square " << x2_sixteenths << ", critical " << crit["chi2_isf"][1]);
  CHECK(x2_sixteenths < crit["chi2_isf"][1].get<double>());

  // The rejection path really runs: count the 32-bit draws consumed by the n
  // calls, by stepping a twin until it reaches the same state. Each result
  // takes a geometric number of draws with success probability q = 1 - p, so
  // the total has mean n / q and standard deviation sqrt(n p) / q.
  const double p = static_cast<double>((1ull << 32) % r) / 4294967296.0;
  const double q = 1.0 - p;
  const rng::state_type target = g.state();
  long draws = 0;
  while (!(twin.state() == target) && draws < 4L * n) {
    twin.next_u32();
    ++draws;
  }
  REQUIRE(twin.state() == target);
  const double z = (draws - n / q) / (std::sqrt(n * p) / q);
  INFO("32-bit draws " << draws << ", expected " << n / q << ", z = " << z);
  CHECK(std::abs(z) < crit["norm_isf"][0].get<double>());
}

TEST_CASE("bounded(3 * 2^30) is uniform over residues mod 3, which needs the rejection step",
          "[reference][rng]") {
  // r = 3 * 2^30, so multiply-and-shift alone gives v = floor(3x / 4): for
  // x = 4k + j, j = 0..3 maps to 3k, 3k, 3k + 1, 3k + 2, and residue 0 mod 3
  // would come out half of the time. Lemire's threshold t = 2^32 mod r = 2^30
  // rejects exactly the x with (3x mod 4) * 2^30 < t, that is j = 0, which
  // leaves one x per v; as 3 divides r, the residues are then uniform.
  constexpr uint32_t r = 3u << 30;
  constexpr int n = 600000;
  rng g(3);
  std::vector<double> observed(3, 0.0);
  for (int i = 0; i < n; ++i)
    observed[g.bounded(r) % 3] += 1.0;
  const std::vector<double> expected(3, n / 3.0);
  const double x2 = chi_square(observed, expected);
  const double critical = chi2_critical(alpha, 2);
  INFO("residue counts " << observed[0] << ", " << observed[1] << ", " << observed[2]
                         << "; chi-square " << x2 << ", critical " << critical);
  CHECK(x2 < critical);
}

TEST_CASE("next_double is uniform on the unit interval by a chi-square test on 100 equal bins",
          "[reference][rng]") {
  constexpr int n = 1000000;
  rng g(53);
  std::vector<double> observed(100, 0.0);
  for (int i = 0; i < n; ++i)
    observed[static_cast<std::size_t>(g.next_double() * 100.0)] += 1.0;
  const std::vector<double> expected(100, n / 100.0);
  const double x2 = chi_square(observed, expected);
  const double critical = chi2_critical(alpha, 99);
  INFO("chi-square " << x2 << ", critical " << critical);
  CHECK(x2 < critical);
}
