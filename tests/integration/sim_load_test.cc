// sim_load_test.cc: `plumbline-sim load` against a real `plumbline serve`.
//
// The load sender is the benchmark's instrument, so its count must be the
// daemon's count: every record it reports sent is accepted (nothing cut in
// the middle of a line, nothing rejected), each stream gets its share, and
// --stagger gives stream i exactly floor(K * i / N) records more. The
// daemon's own counters (plumbline_records_total, plumbline_samples_total)
// are the reference; no outside source applies.
#include <catch2/catch.hpp>
#include <cmath>
#include <nlohmann/json.hpp>
#include <string>

#include "support/cli.h"
#include "support/daemon.h"

namespace {

using namespace plumbline::testing;
using nlohmann::json;

const char* config_text = R"(
[ingest]
max_streams = 1000

[[group]]
name = "load"
match = "load.s*"
reference_size = 50
recent_size = 20
every_samples = 0
every_seconds = 3600
)";

double rejected_total(const daemon_process& d) {
  double sum = 0;
  for (const char* r : {"line_too_long", "bad_stream_name", "bad_time", "bad_value",
                        "non_finite_value", "missing_value", "too_many_values",
                        "wrong_dimension", "too_many_streams", "unmatched_stream"}) {
    sum += d.metric(std::string("plumbline_lines_rejected_total{reason=\"") + r + "\"}");
  }
  return sum;
}

}  // namespace

TEST_CASE("plumbline-sim load: every record sent is accepted, split as stated",
          "[integration][sim]") {
  temp_dir dir;
  const std::string cfg = dir.write("load.toml", config_text);
  daemon_process d(dir, {"--config", cfg});
  const std::string to = "127.0.0.1:" + std::to_string(d.tcp_port);

  // 100,003 records over 3 connections and 97 streams: neither divides it.
  const run_result r =
      run_program(dir, PLUMBLINE_SIM_BINARY,
                  {"load", "--to", to, "--streams", "97", "--connections", "3", "--records",
                   "100003", "--duration", "60", "--stagger", "40", "--json", "--quiet"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  const json report = json::parse(r.out);
  CHECK(report["records_sent"] == 100003);
  // sum over i < 97 of floor(40 i / 97)
  uint64_t stagger = 0;
  for (uint64_t i = 0; i < 97; ++i) stagger += 40 * i / 97;
  CHECK(report["stagger_records"] == stagger);
  const double expected = 100003.0 + static_cast<double>(stagger);
  REQUIRE(wait_until([&] { return d.metric("plumbline_records_total") == expected; }));
  CHECK(rejected_total(d) == 0);
  CHECK(d.metric("plumbline_streams") == 97);
  // Connection c feeds streams c, c+3, ...; its records go round them in
  // order, so two streams of one connection differ by at most one record
  // apart from their stagger.
  const double s0 = d.metric("plumbline_samples_total{stream=\"load.s0\"}");
  const double s3 = d.metric("plumbline_samples_total{stream=\"load.s3\"}") - 40 * 3 / 97;
  const double s96 = d.metric("plumbline_samples_total{stream=\"load.s96\"}") - 40 * 96 / 97;
  CHECK(std::abs(s0 - s3) <= 1);
  CHECK(std::abs(s0 - s96) <= 1);
  CHECK(d.stop() == 0);
}

TEST_CASE("plumbline-sim load refuses bad options and an address with nobody listening",
          "[integration][sim]") {
  temp_dir dir;
  // More connections than streams: each stream must have one sender.
  const run_result many =
      run_program(dir, PLUMBLINE_SIM_BINARY,
                  {"load", "--to", "127.0.0.1:9", "--streams", "2", "--connections", "3"});
  CHECK(many.exit_code != 0);
  CHECK(many.err.find("connections") != std::string::npos);
  // Port 1 on loopback: nothing listens there in the test environment.
  const run_result nobody = run_program(
      dir, PLUMBLINE_SIM_BINARY, {"load", "--to", "127.0.0.1:1", "--records", "10", "--quiet"});
  CHECK(nobody.exit_code == 1);
  CHECK(nobody.err.find("cannot connect") != std::string::npos);
}
