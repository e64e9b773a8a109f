// check_config_cli_test.cc: `plumbline check-config` driven as a user drives it.
//
// Each case runs the built binary (PLUMBLINE_BINARY) through the shell with
// stdout and stderr captured apart: the bundled example must pass with exit
// code 0 and a summary; a broken file must fail with exit code 2, nothing on
// stdout, and one "FILE:LINE:COLUMN: message" line per error on stderr (the
// format of GNU-style compiler diagnostics, common practice for tools that
// report positions in files), then a count. Reference CSV files are read with
// the project's CSV reader and their errors reported at the reference_file
// value. --defaults prints every key of the option table.
#include <catch2/catch.hpp>
#include <sstream>
#include <string>
#include <vector>

#include "config/option_table.h"
#include "support/cli.h"

namespace {

using Catch::Matchers::Contains;
using Catch::Matchers::StartsWith;
using namespace plumbline::testing;

const std::string example = std::string(PLUMBLINE_SOURCE_DIR) + "/config/plumbline.example.toml";

std::vector<std::string> lines_of(const std::string& s) {
  std::vector<std::string> out;
  std::istringstream in(s);
  std::string line;
  while (std::getline(in, line))
    out.push_back(line);
  return out;
}

}  // namespace

TEST_CASE("check-config accepts the example configuration and summarises it", "[cli][config]") {
  temp_dir dir;
  const run_result r = run_plumbline(dir, {"check-config", example});
  INFO("stdout: " << r.out << "\nstderr: " << r.err);
  CHECK(r.exit_code == 0);
  CHECK(r.err.empty());
  const std::vector<std::string> out = lines_of(r.out);
  REQUIRE(!out.empty());
  CHECK(out[0] == example + ": ok");
  CHECK_THAT(r.out, Contains("tcp 0.0.0.0:7301, udp off"));
  CHECK_THAT(r.out, Contains("groups      5, tried in this order"));
  // The example leaves [state] data_dir at its default (config/plumbline.example.toml).
  CHECK_THAT(r.out, Contains("state       no data directory: snapshots off"));
  CHECK_THAT(r.out, Contains("line_b_fill  \"larkspur/line_b/fill_*\""));
  CHECK_THAT(r.out, Contains("tests ad, welch"));
  CHECK_THAT(r.out, Contains("tolerance 0.5"));
  CHECK_THAT(r.out, Contains("line_d_torque  \"larkspur/line_d/torque_*\""));
  CHECK_THAT(r.out, Contains("lagged reference of 400"));
  CHECK_THAT(r.out, Contains("dimension 4"));
  CHECK_THAT(r.out, Contains("tests energy"));
  // The reference file was read: its 200 rows are counted.
  CHECK_THAT(r.out, Contains("larkspur_hold_temp_reference.csv (200 rows)"));
}

TEST_CASE("check-config reports every error as FILE:LINE:COLUMN and exits with 2",
          "[cli][config]") {
  temp_dir dir;
  const std::string file = dir.write("larkspur.toml",
                                     "[ingest]\n"
                                     "max_streams = 0\n"
                                     "[[group]]\n"
                                     "name = \"fill\"\n"
                                     "match = \"larkspur/line_b/fill_*\"\n"
                                     "reference_sise = 400\n"
                                     "interval = \"cpk\"\n");
  const run_result r = run_plumbline(dir, {"check-config", file});
  INFO("stdout: " << r.out << "\nstderr: " << r.err);
  CHECK(r.exit_code == 2);
  CHECK(r.out.empty());
  CHECK(lines_of(r.err) ==
        std::vector<std::string>{
            file + ":2:15: [ingest] max_streams must be between 1 and 10000000, got 0",
            file + ":6:1: unknown key 'reference_sise' in [[group]] \"fill\" (did you mean "
                   "'reference_size'?)",
            file + ":7:12: [[group]] \"fill\" interval = \"cpk\" needs spec_lower, spec_upper or "
                   "both",
            file + ": 3 errors; the daemon would not start"});
}

TEST_CASE("check-config reports a TOML syntax error with its position", "[cli][config]") {
  temp_dir dir;
  const std::string file = dir.write("broken.toml", "[log]\nlevel = \"info\n");
  const run_result r = run_plumbline(dir, {"check-config", file});
  CHECK(r.exit_code == 2);
  CHECK(r.out.empty());
  const std::vector<std::string> err = lines_of(r.err);
  REQUIRE(err.size() == 2);
  CHECK_THAT(err[0], StartsWith(file + ":2:") && Contains("invalid TOML"));
  CHECK(err[1] == file + ": 1 error; the daemon would not start");
}

TEST_CASE("check-config says when the file cannot be read", "[cli][config]") {
  temp_dir dir;
  const std::string file = dir.file("missing.toml");
  const run_result r = run_plumbline(dir, {"check-config", file});
  CHECK(r.exit_code == 2);
  CHECK(lines_of(r.err) ==
        std::vector<std::string>{file + ": cannot read: No such file or directory",
                                 file + ": 1 error; the daemon would not start"});
}

TEST_CASE("check-config reads reference files and reports their errors at reference_file",
          "[cli][config]") {
  temp_dir dir;
  // An invented reference run of Larkspur's pasteuriser hold temperature, with a bad cell.
  dir.write("hold.csv", "hold_temp_c\n72.61\n72.5x\n72.58\n");
  dir.write("caps.csv", "h1,h2\n2.31,2.29\n2.30,2.33\n2.32,2.30\n");
  const std::string file = dir.write("larkspur.toml",
                                     "[[group]]\n"
                                     "name = \"hold\"\n"
                                     "match = \"larkspur/pasteuriser/hold_temp\"\n"
                                     "reference = \"file\"\n"
                                     "reference_file = \"hold.csv\"\n"
                                     "[[group]]\n"
                                     "name = \"caps\"\n"
                                     "match = \"larkspur/line_d/capper_heads\"\n"
                                     "reference = \"file\"\n"
                                     "dimension = 3\n"
                                     "tests = [\"energy\"]\n"
                                     "interval = \"none\"\n"
                                     "reference_file = \"caps.csv\"\n");
  const run_result r = run_plumbline(dir, {"check-config", file});
  INFO("stdout: " << r.out << "\nstderr: " << r.err);
  CHECK(r.exit_code == 2);
  const std::vector<std::string> err = lines_of(r.err);
  REQUIRE(err.size() == 3);
  // The CSV reader's own message names the CSV file and its line.
  CHECK_THAT(err[0], StartsWith(file + ":5:18: [[group]] \"hold\" reference_file cannot be used: " +
                                dir.file("hold.csv") + ":3: "));
  CHECK(err[1] == file + ":13:18: [[group]] \"caps\" reference_file \"" + dir.file("caps.csv") +
                      "\" has rows of 2 values, but dimension = 3");
  CHECK(err[2] == file + ": 2 errors; the daemon would not start");
}

TEST_CASE("check-config defaults lists every key with its default", "[cli][config]") {
  temp_dir dir;
  const run_result r = run_plumbline(dir, {"check-config", "--defaults"});
  CHECK(r.exit_code == 0);
  CHECK(r.err.empty());
  for (const plumbline::config::option_info& o : plumbline::config::option_table()) {
    INFO(o.key);
    const std::string shown = o.default_value.empty() ? std::string(o.no_default) : o.default_value;
    CHECK_THAT(r.out, Contains("  " + std::string(o.key) + " = " + shown + "\n"));
  }
  CHECK_THAT(r.out, Contains("[[group]]\n"));
}

TEST_CASE("check-config without a file or --defaults is a usage error", "[cli][config]") {
  temp_dir dir;
  const run_result r = run_plumbline(dir, {"check-config"});
  CHECK(r.exit_code == 2);
  CHECK(r.out.empty());
  CHECK_THAT(r.err, Contains("name a configuration file"));
}
