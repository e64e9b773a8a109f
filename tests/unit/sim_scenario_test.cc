// sim_scenario_test.cc: the scenario loader: names, copies, defaults, errors
// with their positions, and the README's key tables against the key table.
#include <catch2/catch.hpp>
#include <string>

#include "simulator/scenario.h"
#include "support/cli.h"

namespace {

using namespace plumbline::sim;

scenario_result load(const std::string& text) {
  return load_scenario_string(text, "s.toml");
}

std::string errors_of(const scenario_result& r) {
  std::string all;
  for (const auto& e : r.errors)
    all += e.str() + "\n";
  return all;
}

}  // namespace

TEST_CASE("stream names join plant, line, station and sensor, copies are numbered", "[unit][sim]") {
  const scenario_result r = load(R"(
[scenario]
plant = "wren"
[[sensor]]
line = "line-1"
station = "filler"
name = "fill_volume"
[[sensor]]
line = "line2"
station = "capper"
name = "torque"
count = 12
)");
  INFO(errors_of(r));
  REQUIRE(r.value);
  const scenario& s = *r.value;
  REQUIRE(s.sensors.size() == 13);
  CHECK(s.sensors[0].stream == "wren.line-1.filler.fill_volume");
  CHECK(s.sensors[1].stream == "wren.line2.capper.torque_01");
  CHECK(s.sensors[12].stream == "wren.line2.capper.torque_12");
  // Defaults of the key table.
  CHECK(s.epoch == default_epoch);
  CHECK(s.duration == 600);
  CHECK(s.grace == 60);
  CHECK(s.sensors[0].rate_hz == 1);
  CHECK(s.sensors[0].spread == 1);
  CHECK(s.sensors[0].distribution == distribution_kind::normal);
}

TEST_CASE("scenario errors carry the value's line and column", "[unit][sim]") {
  const scenario_result r = load(R"([scenario]
duration_seconds = -5.0
[[sensor]]
line = "a.b"
station = "s"
name = "n"
resolution = 0.3333333333
[[fault]]
kind = "melt"
)");
  REQUIRE_FALSE(r.value);
  const std::string all = errors_of(r);
  INFO(all);
  CHECK_THAT(
      all, Catch::Matchers::Contains(
               "s.toml:2:20: 'duration_seconds' must be greater than 0.0 and at most 31622400.0"));
  CHECK_THAT(all, Catch::Matchers::Contains(
                      "s.toml:4:8: 'line' must be 1 to 64 letters, digits, '_' or '-'"));
  CHECK_THAT(all, Catch::Matchers::Contains("s.toml:7:14: 'resolution' must be a decimal step"));
  CHECK_THAT(all, Catch::Matchers::Contains("s.toml:9:8: 'kind' must be one of step, ramp"));
  CHECK_THAT(all, Catch::Matchers::Contains("[[fault]] needs 'sensor'"));
}

TEST_CASE("simulator/README.md documents every scenario key", "[unit][sim]") {
  const std::string readme =
      plumbline::testing::slurp(std::string(PLUMBLINE_SOURCE_DIR) + "/simulator/README.md");
  REQUIRE(!readme.empty());
  for (const scenario_key& k : scenario_keys()) {
    INFO(k.section << "." << k.key);
    const std::string row = "| `" + std::string(k.key) + "` | " + std::string(k.type) + " | ";
    CHECK(readme.find(row) != std::string::npos);
  }
}

TEST_CASE("scenario files that cannot be read or are too large give one error each",
          "[unit][sim]") {
  // The same reader as the daemon's configuration (config::read_config_text).
  plumbline::testing::temp_dir dir;
  const scenario_result missing = load_scenario_file(dir.file("none.toml"));
  REQUIRE(missing.errors.size() == 1);
  CHECK(missing.errors[0].str() == dir.file("none.toml") +
                                       ": cannot read: No such file or directory");
  const scenario_result directory = load_scenario_file(dir.path().string());
  REQUIRE(directory.errors.size() == 1);
  CHECK(directory.errors[0].str() == dir.path().string() + ": cannot read: it is a directory");
  const std::string big =
      dir.write("big.toml", std::string(plumbline::config::max_config_bytes + 1, '#'));
  const scenario_result large = load_scenario_file(big);
  REQUIRE(large.errors.size() == 1);
  CHECK(large.errors[0].str() == big + ": too large (more than 1048576 bytes)");
  CHECK_FALSE(large.value.has_value());
}
