// sim_cli_test.cc: `plumbline-sim` driven as a user drives it.
//
// Bad scenario files must fail with exit code 2, nothing on stdout, and
// "FILE:LINE:COLUMN: message" lines on stderr (the daemon's format, the
// format of GNU-style compiler diagnostics); `write` must be reproducible
// from the seed; `send` must stop with a clear error when the daemon closes
// the connection; `score` must read saved alarm histories.
#include <arpa/inet.h>
#include <netinet/in.h>
#include <sys/socket.h>
#include <unistd.h>

#include <catch2/catch.hpp>
#include <filesystem>
#include <nlohmann/json.hpp>
#include <string>
#include <thread>
#include <vector>

#include "support/cli.h"

namespace {

using namespace plumbline::testing;
using Catch::Matchers::Contains;
using Catch::Matchers::StartsWith;

run_result sim(const temp_dir& dir, const std::vector<std::string>& args) {
  return run_program(dir, PLUMBLINE_SIM_BINARY, args);
}

const std::string sensor = "[[sensor]]\nline = \"l1\"\nstation = \"filler\"\nname = \"volume\"\n";

std::string all_files(const std::filesystem::path& dir) {
  std::string out;
  std::vector<std::filesystem::path> files;
  for (const auto& e : std::filesystem::directory_iterator(dir))
    files.push_back(e.path());
  std::sort(files.begin(), files.end());
  for (const auto& f : files)
    out += f.filename().string() + "\n" + slurp(f.string());
  return out;
}

}  // namespace

TEST_CASE("bad scenario files give FILE:LINE:COLUMN messages and exit code 2", "[cli][sim]") {
  struct bad {
    std::string name, text, expected;
  };
  const bad b = GENERATE(
      bad{"unknown key", sensor + "nomnal = 1.0\n", ":5:1: unknown key 'nomnal' in [[sensor]]"},
      bad{"out of range", sensor + "ar1 = 1.5\n",
          ":5:7: 'ar1' must be greater than -1.0 and below 1.0, got a float (1.5)"},
      bad{"wrong type", sensor + "rate_hz = \"fast\"\n",
          ":5:11: 'rate_hz' must be a number (from 0.001 to 10000.0), got a string (\"fast\")"},
      bad{"fault end before start",
          sensor + "[[fault]]\nsensor = \"l1.filler.volume\"\nkind = \"step\"\n"
                   "start_seconds = 50.0\nend_seconds = 40.0\n",
          ":9:15: 'end_seconds' must be after 'start_seconds' (50.0), got 40.0"},
      bad{"unknown distribution", sensor + "distribution = \"gamma\"\n",
          ":5:16: 'distribution' must be one of normal, lognormal, student-t, uniform, mixture, "
          "got \"gamma\""},
      bad{"fault on an unknown stream",
          sensor + "[[fault]]\nsensor = \"l1.filler.volumes\"\nkind = \"step\"\n"
                   "start_seconds = 5.0\nend_seconds = 40.0\n",
          ":6:10: 'sensor' names no stream of this scenario: \"l1.filler.volumes\""},
      bad{"invalid TOML", sensor + "spread = = 2\n", ":5:"});
  temp_dir dir;
  const std::string path = dir.write("bad.toml", b.text);
  for (const std::string mode : {"write", "send"}) {
    std::vector<std::string> args = {mode, "--scenario", path};
    if (mode == "write") args.insert(args.end(), {"--out", dir.file("out")});
    if (mode == "send") args.insert(args.end(), {"--to", "127.0.0.1:9"});
    const run_result r = sim(dir, args);
    INFO(b.name << " (" << mode << "): " << r.err);
    CHECK(r.exit_code == 2);
    CHECK(r.out.empty());
    CHECK_THAT(r.err, StartsWith(path + b.expected));
  }
}

TEST_CASE("the bundled scenarios load", "[cli][sim]") {
  temp_dir dir;
  for (const std::string name : {"bottling_demo", "large", "in_control"}) {
    const std::string path =
        std::string(PLUMBLINE_SOURCE_DIR) + "/simulator/scenarios/" + name + ".toml";
    const run_result r =
        sim(dir, {"write", "--scenario", path, "--out", dir.file(name), "--duration", "2"});
    INFO(name << ": " << r.err);
    CHECK(r.exit_code == 0);
    CHECK(std::filesystem::exists(dir.file(name + "/truth.json")));
  }
  CHECK(std::filesystem::exists(dir.file("bottling_demo/wrenfield.line1.filler.fill_volume.csv")));
  CHECK(std::filesystem::exists(dir.file("large/thornbury.press.stamp.force_1500.csv")));
}

TEST_CASE("write is byte-identical for a seed and differs for another", "[cli][sim]") {
  temp_dir dir;
  const std::string demo =
      std::string(PLUMBLINE_SOURCE_DIR) + "/simulator/scenarios/bottling_demo.toml";
  auto run = [&](const std::string& out, const std::string& seed) {
    const run_result r = sim(dir, {"write", "--scenario", demo, "--seed", seed, "--duration", "300",
                                   "--out", dir.file(out), "--wire", dir.file(out + ".wire")});
    INFO(r.err);
    REQUIRE(r.exit_code == 0);
    return all_files(dir.file(out)) + slurp(dir.file(out + ".wire"));
  };
  const std::string a = run("a", "42"), b = run("b", "42"), c = run("c", "43");
  CHECK(a.size() > 100000);
  CHECK(a == b);
  CHECK(a != c);
  // The truth lists the demo's fault, exact to the sample (5 Hz, [150, 300)
  // after --duration 300: samples 750 .. 1499).
  const auto truth = nlohmann::json::parse(slurp(dir.file("a/truth.json")));
  REQUIRE(truth["faults"].size() == 1);
  CHECK(truth["faults"][0]["stream"] == "wrenfield.line1.filler.fill_volume");
  CHECK(truth["faults"][0]["kind"] == "step");
  CHECK(truth["faults"][0]["first_sample"] == 750);
  CHECK(truth["faults"][0]["end_sample"] == 1500);
  CHECK(truth["seed"] == 42);
}

TEST_CASE("send stops with an error when the daemon closes the connection", "[cli][sim]") {
  // A stand-in daemon: accepts one connection, reads a little, closes.
  const int lfd = ::socket(AF_INET, SOCK_STREAM, 0);
  REQUIRE(lfd >= 0);
  sockaddr_in addr{};
  addr.sin_family = AF_INET;
  addr.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  REQUIRE(::bind(lfd, reinterpret_cast<sockaddr*>(&addr), sizeof addr) == 0);
  REQUIRE(::listen(lfd, 4) == 0);
  socklen_t len = sizeof addr;
  ::getsockname(lfd, reinterpret_cast<sockaddr*>(&addr), &len);
  const int port = ntohs(addr.sin_port);
  std::thread closer([lfd] {
    const int c = ::accept(lfd, nullptr, nullptr);
    if (c >= 0) {
      char buf[4096];
      (void)::recv(c, buf, sizeof buf, 0);
      ::close(c);
    }
  });
  temp_dir dir;
  const std::string path = dir.write(
      "s.toml", "[scenario]\nduration_seconds = 100000.0\n" + sensor + "rate_hz = 1000.0\n");
  const run_result r =
      sim(dir, {"send", "--scenario", path, "--to", "127.0.0.1:" + std::to_string(port), "--speed",
                "1000", "--quiet", "--truth", dir.file("truth.json")});
  closer.join();
  ::close(lfd);
  INFO(r.err);
  CHECK(r.exit_code == 1);
  CHECK_THAT(r.err, Contains("closed the connection"));
  // The truth of what was sent is still written.
  CHECK(std::filesystem::exists(dir.file("truth.json")));
}

TEST_CASE("send fails clearly when nothing listens", "[cli][sim]") {
  temp_dir dir;
  const std::string path = dir.write("s.toml", sensor);
  const run_result r = sim(dir, {"send", "--scenario", path, "--to", "127.0.0.1:1", "--quiet"});
  CHECK(r.exit_code == 1);
  CHECK_THAT(r.err, Contains("cannot connect to 127.0.0.1:1"));
}

TEST_CASE("score reads saved alarm histories and prints a table or JSON", "[cli][sim]") {
  temp_dir dir;
  const std::string path = dir.write(
      "s.toml", "[scenario]\nduration_seconds = 200.0\ngrace_seconds = 10.0\n" + sensor +
                    "rate_hz = 2.0\n[[fault]]\nsensor = \"l1.filler.volume\"\nkind = \"step\"\n"
                    "start_seconds = 100.0\nend_seconds = 150.0\nsize = 3.0\n");
  REQUIRE(sim(dir, {"write", "--scenario", path, "--out", dir.file("out")}).exit_code == 0);
  // A raise 12.25 s after the fault's start (simulated Unix time: no clock).
  const double start = 1767225600.0 + 100;
  const nlohmann::json alarms = {
      {"l1.filler.volume",
       {{"alarm", {{"history", {{{"kind", "raised"}, {"time", start + 12.25}}}}}}}}};
  const std::string file = dir.write("alarms.json", alarms.dump());
  run_result r = sim(dir, {"score", "--truth", dir.file("out"), "--alarms", file, "--json"});
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  const auto j = nlohmann::json::parse(r.out);
  CHECK(j["faults"][0]["result"] == "detected");
  CHECK(j["faults"][0]["delay_seconds"] == Approx(12.25));
  CHECK(j["faults"][0]["delay_samples"] == 25);  // 100.0, 100.5, ..., 112.0
  CHECK(j["false_alarms"] == 0);
  r = sim(dir, {"score", "--truth", dir.file("out/truth.json"), "--alarms", file});
  CHECK(r.exit_code == 0);
  CHECK_THAT(r.out, Contains("detected"));
  CHECK_THAT(r.out, Contains("false alarms: 0"));
  r = sim(dir, {"score", "--truth", dir.file("out")});
  CHECK(r.exit_code == 2);
}

TEST_CASE("send --udp sends whole records in datagrams shorter than 1400 bytes", "[cli][sim]") {
  const int fd = ::socket(AF_INET, SOCK_DGRAM, 0);
  REQUIRE(fd >= 0);
  sockaddr_in addr{};
  addr.sin_family = AF_INET;
  addr.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  REQUIRE(::bind(fd, reinterpret_cast<sockaddr*>(&addr), sizeof addr) == 0);
  socklen_t len = sizeof addr;
  ::getsockname(fd, reinterpret_cast<sockaddr*>(&addr), &len);
  const int buf_size = 4 << 20;
  ::setsockopt(fd, SOL_SOCKET, SO_RCVBUF, &buf_size, sizeof buf_size);
  temp_dir dir;
  const std::string demo =
      std::string(PLUMBLINE_SOURCE_DIR) + "/simulator/scenarios/bottling_demo.toml";
  // 60 simulated s of 6 sensors at 5 Hz: 1800 records, about 80 KB.
  const run_result r =
      sim(dir, {"send", "--scenario", demo, "--duration", "60", "--udp", "--to",
                "127.0.0.1:" + std::to_string(ntohs(addr.sin_port)), "--speed", "1e6", "--quiet"});
  REQUIRE(r.exit_code == 0);
  REQUIRE(sim(dir, {"write", "--scenario", demo, "--duration", "60", "--out", dir.file("w"),
                    "--wire", dir.file("w.wire")})
              .exit_code == 0);
  std::string received;
  std::size_t datagrams = 0;
  char buf[65536];
  for (;;) {
    const ssize_t n = ::recv(fd, buf, sizeof buf, MSG_DONTWAIT);
    if (n <= 0) break;
    ++datagrams;
    CHECK(n < 1400);
    CHECK(buf[n - 1] == '\n');  // whole records only
    received.append(buf, static_cast<std::size_t>(n));
  }
  ::close(fd);
  CHECK(datagrams > 50);
  // Exactly the records `write --wire` gives, in order.
  CHECK(received == slurp(dir.file("w.wire")));
}
