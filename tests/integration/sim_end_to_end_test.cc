// sim_end_to_end_test.cc: plumbline-sim drives a real `plumbline serve`.
//
// The daemon runs on its built-in defaults (baseline reference of 500, recent
// window of 100, an evaluation every 50 samples) on loopback with port 0.
// plumbline-sim sends four 50 Hz streams for 40 simulated seconds at 4x
// speed (10 s of wall time): the reference is full at 10 s, the first
// evaluation runs at 12 s, and at 15 s one stream steps up by 2 standard
// deviations. `score` then reads the daemon's alarm history: the fault must
// be detected within 10 simulated seconds (the defaults need about 75 to 145
// samples for a 1 sd step, README "Built-in defaults"; a 2 sd step takes
// fewer), and the three in-control streams must have no false alarm.
#include <catch2/catch.hpp>
#include <nlohmann/json.hpp>
#include <string>

#include "support/cli.h"
#include "support/daemon.h"

namespace {

using namespace plumbline::testing;
using nlohmann::json;

const char* scenario_text = R"(
[scenario]
plant = "e2e"
seed = 3
duration_seconds = 40.0
grace_seconds = 10.0

[[sensor]]
line = "line1"
station = "filler"
name = "volume"
count = 4
nominal = 10.0
spread = 1.0
rate_hz = 50.0
resolution = 0.001

[[fault]]
sensor = "e2e.line1.filler.volume_2"
kind = "step"
start_seconds = 15.0
end_seconds = 40.0
size = 2.0
)";

}  // namespace

TEST_CASE("plumbline-sim drives plumbline serve and score finds the step and no false alarm",
          "[integration][sim]") {
  temp_dir dir;
  daemon_process d(dir, {});
  const std::string scenario = dir.write("e2e.toml", scenario_text);
  const std::string truth = dir.file("truth.json");
  const run_result sent =
      run_program(dir, PLUMBLINE_SIM_BINARY,
                  {"send", "--scenario", scenario, "--to",
                   "127.0.0.1:" + std::to_string(d.tcp_port), "--speed", "4", "--truth", truth});
  INFO("send: " << sent.err);
  REQUIRE(sent.exit_code == 0);
  CHECK_THAT(sent.err, Catch::Matchers::Contains("send: done: 8000 records"));
  // Every record read and every evaluation finished.
  const bool settled = wait_until(
      [&] {
        const json page = json::parse(d.get("/api/streams").body);
        if (page["total"] != 4) return false;
        for (const json& s : page["streams"])
          if (s["samples_total"] != 2000 || s["evaluation_state"] != "idle") return false;
        return true;
      },
      20);
  REQUIRE(settled);
  const run_result scored = run_program(
      dir, PLUMBLINE_SIM_BINARY,
      {"score", "--truth", truth, "--daemon", "127.0.0.1:" + std::to_string(d.http_port), "--json",
       "--save-alarms", dir.file("alarms.json")});
  INFO("score: " << scored.out << scored.err << "\ndaemon: " << d.stderr_text());
  REQUIRE(scored.exit_code == 0);
  const json r = json::parse(scored.out);
  REQUIRE(r["faults"].size() == 1);
  CHECK(r["faults"][0]["result"] == "detected");
  CHECK(r["faults"][0]["delay_seconds"].get<double>() > 0);
  CHECK(r["faults"][0]["delay_seconds"].get<double>() < 10);
  CHECK(r["false_alarms"] == 0);
  CHECK(r["warnings"].empty());
  // The saved answers score the same.
  const run_result again =
      run_program(dir, PLUMBLINE_SIM_BINARY,
                  {"score", "--truth", truth, "--alarms", dir.file("alarms.json"), "--json"});
  REQUIRE(again.exit_code == 0);
  CHECK(json::parse(again.out) == r);
  CHECK(d.stop() == 0);
}
