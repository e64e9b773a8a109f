// sim_generate_test.cc: the simulator's samples: reproducible from the seed,
// with the configured moments, faults exact to the sample, values exact
// multiples of the resolution.
//
// Tolerances. Moments are checked within 4 standard errors (common practice,
// no source: with the seeds fixed the checks are deterministic, and a 4 SE
// band is wide enough that a correct generator passes for essentially any
// seed while a wrong scale, shift or coefficient of a few per cent fails).
// Standard errors for an AR(1) series with coefficient phi and n samples
// (large-sample formulas, Box, Jenkins & Reinsel, "Time Series Analysis",
// ch. 2 and 7; from memory):
//   mean   sd/sqrt(n) * sqrt((1 + phi) / (1 - phi))
//   sd     sd/sqrt(2n) * sqrt((1 + phi^2) / (1 - phi^2))   (normal data)
//   r1     sqrt((1 - phi^2) / n)                           (Bartlett's formula)
#include <catch2/catch.hpp>
#include <cmath>
#include <string>
#include <vector>

#include "simulator/generate.h"
#include "simulator/scenario.h"

namespace {

using namespace plumbline::sim;

scenario parse(const std::string& text) {
  scenario_result r = load_scenario_string(text, "test.toml");
  std::string all;
  for (const auto& e : r.errors)
    all += e.str() + "\n";
  INFO(all);
  REQUIRE(r.value);
  return *r.value;
}

std::string wire_text(const scenario& s, uint64_t seed) {
  std::string out;
  timeline tl(s, seed, s.duration);
  std::size_t sensor;
  sample smp;
  while (tl.next(sensor, smp))
    if (smp.present) append_record(out, s.sensors[sensor], s.epoch, smp);
  return out;
}

std::vector<double> values(const scenario& s, std::size_t sensor, uint64_t seed, std::size_t n) {
  sensor_stream st(s, sensor, seed);
  std::vector<double> v(n);
  for (auto& x : v)
    x = st.next().value;
  return v;
}

struct moments {
  double mean, sd, r1;
};

moments moments_of(const std::vector<double>& v) {
  const double n = static_cast<double>(v.size());
  double m = 0;
  for (double x : v)
    m += x;
  m /= n;
  double ss = 0, cross = 0;
  for (std::size_t i = 0; i < v.size(); ++i) {
    ss += (v[i] - m) * (v[i] - m);
    if (i > 0) cross += (v[i] - m) * (v[i - 1] - m);
  }
  return {m, std::sqrt(ss / (n - 1)), cross / ss};
}

const char* mixed_plant = R"(
[scenario]
plant = "p"
duration_seconds = 120.0
[[sensor]]
line = "l1"
station = "s1"
name = "a"
nominal = 10.0
spread = 2.0
rate_hz = 7.0
resolution = 0.01
[[sensor]]
line = "l1"
station = "s2"
name = "b"
distribution = "lognormal"
rate_hz = 3.0
[[sensor]]
line = "l2"
station = "s1"
name = "c"
count = 3
distribution = "mixture"
ar1 = 0.4
rate_hz = 2.5
resolution = 0.5
[[fault]]
sensor = "p.l2.s1.c_2"
kind = "spikes"
start_seconds = 30.0
end_seconds = 60.0
size = 5.0
probability = 0.2
)";

}  // namespace

TEST_CASE("the same scenario and seed give byte-identical records, another seed others",
          "[unit][sim]") {
  const scenario s = parse(mixed_plant);
  const std::string a = wire_text(s, 11), b = wire_text(s, 11), c = wire_text(s, 12);
  REQUIRE(!a.empty());
  CHECK(a == b);
  CHECK(a != c);
  // Records are in time order, with every sensor present: 120 s at 7, 3 and
  // 3 x 2.5 Hz.
  std::size_t lines = 0;
  for (char ch : a)
    lines += ch == '\n';
  CHECK(lines == 120 * 7 + 120 * 3 + 3 * 300);
  CHECK(a.rfind("p.l1.s1.a,1767225600.000000,", 0) == 0);
}

TEST_CASE("a fault changes nothing outside its interval and no other sensor", "[unit][sim]") {
  scenario with = parse(mixed_plant);
  scenario without = with;
  without.faults.clear();
  for (std::size_t i = 0; i < with.sensors.size(); ++i) {
    const auto a = values(with, i, 5, 400), b = values(without, i, 5, 400);
    for (std::size_t k = 0; k < a.size(); ++k) {
      const double t = sample_offset(with.sensors[i], k);
      const bool inside = with.sensors[i].stream == "p.l2.s1.c_2" && t >= 30 && t < 60;
      if (!inside) CHECK(a[k] == b[k]);
    }
  }
}

TEST_CASE("normal AR(1) samples have the configured mean, sd and lag-1 autocorrelation",
          "[unit][sim]") {
  const double phi = GENERATE(0.0, 0.6, -0.3);
  const scenario s = parse(
      "[[sensor]]\nline='l'\nstation='s'\nname='x'\nnominal=50.0\n"
      "spread=3.0\nar1=" +
      std::to_string(phi) + "\n");
  const std::size_t n = 200'000;
  const moments m = moments_of(values(s, 0, 99, n));
  const double rn = std::sqrt(static_cast<double>(n));
  const double se_mean = 3.0 / rn * std::sqrt((1 + phi) / (1 - phi));
  const double se_sd = 3.0 / std::sqrt(2.0 * n) * std::sqrt((1 + phi * phi) / (1 - phi * phi));
  const double se_r1 = std::sqrt((1 - phi * phi) / n);
  INFO("phi " << phi << " mean " << m.mean << " sd " << m.sd << " r1 " << m.r1);
  CHECK(std::fabs(m.mean - 50.0) < 4 * se_mean);
  CHECK(std::fabs(m.sd - 3.0) < 4 * se_sd);
  CHECK(std::fabs(m.r1 - phi) < 4 * se_r1);
}

TEST_CASE("non-normal innovations keep the configured mean, sd and AR(1) coefficient",
          "[unit][sim]") {
  // The marginal moments do not depend on the innovation's shape; the sd's
  // standard error is taken at its normal value times 2 (the kurtosis of an
  // AR(1) of non-normal innovations lies between the innovation's and 0).
  const std::string dist =
      GENERATE(as<std::string>{}, "lognormal", "uniform", "mixture", "student-t");
  const scenario s = parse(
      "[[sensor]]\nline='l'\nstation='s'\nname='x'\nnominal=5.0\n"
      "spread=0.5\nar1=0.5\ndf=9.0\ndistribution='" +
      dist + "'\n");
  const std::size_t n = 200'000;
  const double phi = 0.5;
  const moments m = moments_of(values(s, 0, 3, n));
  const double rn = std::sqrt(static_cast<double>(n));
  INFO(dist << " mean " << m.mean << " sd " << m.sd << " r1 " << m.r1);
  CHECK(std::fabs(m.mean - 5.0) < 4 * 0.5 / rn * std::sqrt((1 + phi) / (1 - phi)));
  CHECK(std::fabs(m.sd - 0.5) <
        4 * 2 * 0.5 / std::sqrt(2.0 * n) * std::sqrt((1 + phi * phi) / (1 - phi * phi)));
  CHECK(std::fabs(m.r1 - phi) < 4 * std::sqrt((1 - phi * phi) / n));
}

TEST_CASE("faults start and end exactly at the samples of their interval", "[unit][sim]") {
  // 3 Hz: sample k lies at k / 3 s; the fault runs on [10.1, 20.0), so its
  // first sample is k = 31 (10.333 s; 30 lies at 10.0) and its last k = 59
  // (19.667 s; 60 lies at 20.0, outside the half-open interval).
  const std::string kind =
      GENERATE(as<std::string>{}, "step", "spread", "shape", "stuck", "spikes", "dropout");
  std::string extra;
  if (kind == "spread") extra = "size = 3.0\n";
  if (kind == "stuck") extra = "value = 1234.5\n";
  if (kind == "shape" || kind == "spikes") extra = "size = 7.0\nprobability = 1.0\n";
  if (kind == "step") extra = "size = 0.25\n";
  const std::string text =
      "[[sensor]]\nline='l'\nstation='s'\nname='x'\nrate_hz=3.0\n"
      "[[fault]]\nsensor='l.s.x'\nstart_seconds=10.1\nend_seconds=20.0\n"
      "kind='" +
      kind + "'\n" + extra;
  const scenario with = parse(text);
  scenario without = with;
  without.faults.clear();
  CHECK(first_sample_at_or_after(with.sensors[0], 10.1) == 31);
  CHECK(first_sample_at_or_after(with.sensors[0], 20.0) == 60);
  sensor_stream a(with, 0, 1), b(without, 0, 1);
  for (uint64_t k = 0; k < 100; ++k) {
    const sample x = a.next(), y = b.next();
    const bool inside = k >= 31 && k < 60;
    INFO(kind << " sample " << k);
    if (kind == "dropout") {
      CHECK(x.present == !inside);
      CHECK(x.value == y.value);
    } else {
      CHECK(x.present);
      CHECK((x.value != y.value) == inside);
    }
    if (kind == "stuck" && inside) CHECK(x.value == 1234.5);
  }
}

TEST_CASE("a ramp rises linearly from zero at its start to its size at its end", "[unit][sim]") {
  const scenario with = parse(
      "[[sensor]]\nline='l'\nstation='s'\nname='x'\nrate_hz=2.0\n"
      "[[fault]]\nsensor='l.s.x'\nkind='ramp'\nstart_seconds=10.0\n"
      "end_seconds=20.0\nsize=4.0\n");
  scenario without = with;
  without.faults.clear();
  sensor_stream a(with, 0, 8), b(without, 0, 8);
  for (uint64_t k = 0; k < 60; ++k) {
    const sample x = a.next(), y = b.next();
    const double t = k / 2.0;
    const double expected = t >= 10 && t < 20 ? 4.0 * (t - 10) / 10 : 0.0;
    CHECK(x.value - y.value == Approx(expected).margin(1e-12));
  }
}

TEST_CASE("rounded values are exact integer multiples of the resolution", "[unit][sim]") {
  const std::string res =
      GENERATE(as<std::string>{}, "0.1", "0.05", "0.25", "2.0", "0.001", "0.000002");
  const scenario s = parse(
      "[[sensor]]\nline='l'\nstation='s'\nname='x'\nnominal=-3.0\n"
      "spread=1.5\nresolution=" +
      res + "\n");
  const sensor_spec& spec = s.sensors[0];
  sensor_stream st(s, 0, 4);
  for (int i = 0; i < 5000; ++i) {
    const sample smp = st.next();
    char buf[32];
    const std::string text(buf, format_value(spec, smp, buf));
    // The text has at most the resolution's decimals, and read as an integer
    // number of 10^-decimals it is divisible by resolution * 10^decimals.
    const std::size_t dot = text.find('.');
    const std::size_t decimals = dot == std::string::npos ? 0 : text.size() - dot - 1;
    INFO(res << ": " << text);
    REQUIRE(decimals == spec.resolution_decimals);
    std::string digits = text;
    if (dot != std::string::npos) digits.erase(dot, 1);
    const long long scaled = std::stoll(digits);
    CHECK(scaled % spec.resolution_units == 0);
    CHECK(scaled / spec.resolution_units == smp.units);
    // And the double sent is the nearest to the printed decimal.
    CHECK(std::stod(text) == Approx(smp.value).epsilon(1e-15));
  }
}
