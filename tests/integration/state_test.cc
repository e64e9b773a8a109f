// state_test.cc: snapshots, restarts and reloads of the real `plumbline serve`.
//
// The daemon runs as a separate process with a data directory in the case's
// temporary directory; it is stopped with SIGTERM (graceful) or SIGKILL (a
// crash), restarted on the same directory, and inspected through the JSON
// API, /metrics, its log and the snapshot files themselves (read back with
// daemon/snapshot_format.h). Every wait is bounded; the crash test runs a
// seeded number of rounds within a fixed time budget.
#include <catch2/catch.hpp>
#include <atomic>
#include <filesystem>
#include <nlohmann/json.hpp>
#include <sstream>
#include <thread>

#include "config/load.h"
#include "core/rng.h"
#include "daemon/snapshot.h"
#include "daemon/snapshot_format.h"
#include "daemon/stream_table.h"
#include "support/cli.h"
#include "support/daemon.h"
#include "support/generate.h"

namespace {

using namespace plumbline::testing;
using nlohmann::json;
namespace fs = std::filesystem;

const char* base_config = R"(
[evaluation]
threads = 1
seed = 7

[[group]]
name = "line_b"
match = "larkspur/*"
reference = "baseline"
reference_size = 200
recent_size = 50
every_samples = 25
tests = ["ad"]
resamples = 199
interval = "none"
)";

std::string records(const std::string& stream, uint64_t first, uint64_t n) {
  std::string out;
  for (uint64_t i = first; i < first + n; ++i)
    out += stream + ",," + std::to_string(i) + "\n";
  return out;
}

json stream_json(const daemon_process& d, const std::string& stream) {
  const http_reply r = d.get("/api/streams/" + stream);
  REQUIRE(r.status == 200);
  return json::parse(r.body);
}

// samples_total of the stream, 0 when the daemon does not know it.
uint64_t samples_of(const daemon_process& d, const std::string& stream) {
  const http_reply r = d.get("/api/streams/" + stream);
  if (r.status == 404) return 0;
  REQUIRE(r.status == 200);
  return json::parse(r.body)["samples_total"].get<uint64_t>();
}

bool idle(const daemon_process& d, const std::string& stream) {
  const http_reply r = d.get("/api/streams/" + stream);
  return r.status == 200 && json::parse(r.body)["evaluation_state"] == "idle";
}

std::vector<std::string> files_in(const std::string& dir) {
  std::vector<std::string> out;
  std::error_code ec;
  for (const auto& e : fs::directory_iterator(dir, ec))
    out.push_back(e.path().filename().string());
  std::sort(out.begin(), out.end());
  return out;
}

std::string read_bytes(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  return std::string(std::istreambuf_iterator<char>(in), {});
}

}  // namespace

TEST_CASE("a restarted daemon carries on from its snapshot; a graceful stop loses nothing",
          "[integration][state]") {
  temp_dir dir;
  const std::string cfg = dir.write("plumbline.toml", base_config);
  const std::string data = dir.file("data");
  const std::string s = "larkspur/line_b/fill_1";
  json before;
  {
    daemon_process d(dir, {"--config", cfg, "--data-dir", data});
    for (uint64_t at = 0; at < 300; at += 25) {
      d.send_tcp(records(s, at, 25));
      REQUIRE(wait_until([&] { return idle(d, s); }));
    }
    before = stream_json(d, s);
    CHECK(before["samples_total"] == 300);
    // POST /api/snapshot writes one on request.
    const http_reply r = d.post("/api/snapshot");
    REQUIRE(r.status == 200);
    const std::string path = json::parse(r.body)["snapshot"].get<std::string>();
    CHECK(fs::exists(path));
    CHECK(d.metric("plumbline_snapshot_age_seconds") >= 0);
    CHECK(d.metric("plumbline_snapshot_failures_total") == 0);
    // 7 more samples after it: only the final snapshot at the stop holds them.
    d.send_tcp(records(s, 300, 7));
    REQUIRE(wait_until([&] { return samples_of(d, s) == 307; }));
    before = stream_json(d, s);
    CHECK(d.stop() == 0);
    CHECK(d.stderr_text().find("final snapshot written") != std::string::npos);
  }
  daemon_process d(dir, {"--config", cfg, "--data-dir", data});
  const json after = stream_json(d, s);
  CHECK(after["samples_total"] == 307);
  CHECK(after["reference_samples"] == 200);
  CHECK(after["recent_samples"] == 50);
  CHECK(after["evaluations"] == before["evaluations"]);
  CHECK(after["alarm"]["raised_total"] == before["alarm"]["raised_total"]);
  CHECK(after["alarm"]["history"] == before["alarm"]["history"]);
  CHECK(d.stderr_text().find("restored 1 of 1 stream(s) from snapshot " + data) !=
        std::string::npos);
  // Two generations are kept, and nothing else is left in the directory.
  const auto names = files_in(data);
  REQUIRE(names.size() == 2);
  CHECK(plumbline::snapshot::generation_of(names[0]).has_value());
  CHECK(plumbline::snapshot::generation_of(names[1]).has_value());
  CHECK(d.stop() == 0);
}

TEST_CASE("without a data directory POST /api/snapshot says snapshots are off",
          "[integration][state]") {
  temp_dir dir;
  daemon_process d(dir, {});
  const http_reply r = d.post("/api/snapshot");
  CHECK(r.status == 409);
  CHECK(r.body.find("no data directory") != std::string::npos);
  CHECK(std::isnan(d.metric("plumbline_snapshot_age_seconds")));
  CHECK(d.get("/api/snapshot").status == 405);
  CHECK(d.stop() == 0);
}

TEST_CASE("an unusable data directory is reported and the daemon still serves",
          "[integration][state]") {
  temp_dir dir;
  // Below a regular file no directory can be created, even by root.
  const std::string blocker = dir.write("plain-file", "x");
  const std::string cfg = dir.write("plumbline.toml", base_config);
  daemon_process d(dir, {"--config", cfg, "--data-dir", blocker + "/data"});
  CHECK(d.get("/healthz").status == 200);
  const std::string s = "larkspur/line_b/fill_2";
  d.send_tcp(records(s, 0, 10));
  REQUIRE(wait_until([&] { return samples_of(d, s) == 10; }));
  const http_reply r = d.post("/api/snapshot");
  CHECK(r.status == 500);
  CHECK(r.body.find("cannot create the data directory") != std::string::npos);
  CHECK(d.metric("plumbline_snapshot_failures_total") >= 1);
  CHECK(d.stop() == 0);
  const std::string err = d.stderr_text();
  CHECK(err.find("data directory " + blocker + "/data cannot be used") != std::string::npos);
  CHECK(err.find("snapshot to " + blocker + "/data failed") != std::string::npos);
}

TEST_CASE("a corrupt newest snapshot is set aside and the previous one restored",
          "[integration][state]") {
  temp_dir dir;
  const std::string cfg = dir.write("plumbline.toml", base_config);
  const std::string data = dir.file("data");
  const std::string s = "larkspur/line_b/fill_3";
  {
    daemon_process d(dir, {"--config", cfg, "--data-dir", data});
    d.send_tcp(records(s, 0, 40));
    REQUIRE(wait_until([&] { return samples_of(d, s) == 40; }));
    CHECK(d.stop() == 0);
  }
  // Bytes of no format at all, as the newest generation.
  const std::string bad = data + "/" + plumbline::snapshot::file_name(999);
  {
    plumbline::rng g(5);
    std::string junk(3000, '\0');
    for (char& c : junk)
      c = static_cast<char>(g.bounded(256));
    std::ofstream(bad, std::ios::binary) << junk;
  }
  daemon_process d(dir, {"--config", cfg, "--data-dir", data});
  CHECK(samples_of(d, s) == 40);
  CHECK(fs::exists(bad + ".bad"));
  CHECK_FALSE(fs::exists(bad));
  CHECK(d.stderr_text().find(bad + " is unusable (not a plumbline snapshot (foreign magic))") !=
        std::string::npos);
  CHECK(d.stop() == 0);
}

TEST_CASE("kill -9 at random moments never loses a reference or restores a partial snapshot",
          "[integration][state]") {
  temp_dir dir;
  // Snapshots every 50 ms of four streams with 2000-sample references, so
  // that kills land during writes as well as between them.
  const std::string cfg_text = R"(
[evaluation]
threads = 1
seed = 11

[state]
snapshot_interval_seconds = 0.05

[[group]]
name = "crash"
match = "larkspur/crash/*"
reference = "baseline"
reference_size = 2000
recent_size = 300
every_samples = 1000
tests = ["mean-diff"]
resamples = 99
interval = "none"
)";
  const std::string cfg = dir.write("plumbline.toml", cfg_text);
  const std::string data = dir.file("data");
  const std::vector<std::string> streams = {"larkspur/crash/a", "larkspur/crash/b",
                                            "larkspur/crash/c", "larkspur/crash/d"};
  // The configuration as the daemon reads it, to decode snapshot files here.
  auto loaded = plumbline::config::load_config_string(cfg_text, std::string_view{"crash.toml"});
  REQUIRE(loaded.config.has_value());
  const plumbline::config::daemon_config check_cfg = *loaded.config;

  // Every value sent is the sample's index in its stream, so a window's
  // contents say exactly which samples it holds.
  auto check_window_contents = [&](const std::string& file) {
    const std::string bytes = read_bytes(file);
    auto p = plumbline::snapshot::parse(bytes);
    INFO(file);
    REQUIRE(p.ok());
    plumbline::stream_table t(check_cfg, 16);
    for (const auto& sec : p.value().streams) {
      plumbline::snapshot::stream_head head;
      plumbline::snapshot::stream_fields fields;
      std::size_t at = 0;
      std::string error;
      REQUIRE(plumbline::snapshot::read_stream(sec.payload, head, fields, at, error));
      auto l = t.find_or_create(head.name, plumbline::stream_name_hash(head.name), 1);
      REQUIRE(l.entry != nullptr);
      std::lock_guard lock(l.entry->mu);
      REQUIRE(plumbline::snapshot::restore_stream(sec.payload, *l.entry, 0, error));
      plumbline::evaluation_input in;
      l.entry->monitor.capture(in);
      const uint64_t total = l.entry->monitor.samples_total();
      const uint64_t ref_n = std::min<uint64_t>(total, 2000);
      REQUIRE(in.reference.size() == ref_n);
      for (uint64_t i = 0; i < ref_n; ++i)
        REQUIRE(in.reference[i] == static_cast<double>(i));
      const uint64_t rec_n = std::min<uint64_t>(total - ref_n, 300);
      REQUIRE(in.recent.size() == rec_n);
      for (uint64_t i = 0; i < rec_n; ++i)
        REQUIRE(in.recent[i] == static_cast<double>(total - rec_n + i));
    }
  };

  plumbline::rng g(20261202);
  const auto budget = std::chrono::steady_clock::now() + std::chrono::seconds(40);
  int rounds = 0, kills_with_temp = 0;
  std::vector<uint64_t> high_water(streams.size(), 0);
  while (rounds < 40 && std::chrono::steady_clock::now() < budget) {
    ++rounds;
    INFO("round " << rounds);
    daemon_process d(dir, {"--config", cfg, "--data-dir", data});
    // Restored: never less than any earlier restart saw (a snapshot is never
    // lost), reference and recent windows consistent with the total.
    std::vector<uint64_t> next(streams.size());
    for (std::size_t k = 0; k < streams.size(); ++k) {
      const http_reply r = d.get("/api/streams/" + streams[k]);
      if (r.status == 404) {
        REQUIRE(high_water[k] == 0);
        continue;
      }
      const json j = json::parse(r.body);
      const uint64_t total = j["samples_total"].get<uint64_t>();
      REQUIRE(total >= high_water[k]);
      CHECK(j["reference_samples"] == std::min<uint64_t>(total, 2000));
      CHECK(j["recent_samples"] == std::min<uint64_t>(total - std::min<uint64_t>(total, 2000), 300));
      high_water[k] = total;
      next[k] = total;
    }
    const std::string err = d.stderr_text();
    REQUIRE(err.find("unusable") == std::string::npos);
    // Steady ingest on one connection until the kill breaks it.
    std::atomic<bool> stop{false};
    std::thread sender([&] {
      try {
        const int fd = connect_loopback(d.tcp_port);
        while (!stop.load()) {
          std::string text;
          for (std::size_t k = 0; k < streams.size(); ++k) {
            text += records(streams[k], next[k], 50);
            next[k] += 50;
          }
          write_all(fd, text);
        }
        ::close(fd);
      } catch (const std::exception&) {
        // The daemon was killed mid-send.
      }
    });
    std::this_thread::sleep_for(std::chrono::milliseconds(100 + g.bounded(500)));
    const int code = d.stop(SIGKILL);
    stop.store(true);
    sender.join();
    REQUIRE(code == 128 + SIGKILL);
    // The newest snapshot on disk is complete and exact; a temp file may be
    // left over, and is never one of the names restore reads.
    std::string newest;
    for (const std::string& name : files_in(data)) {
      if (name.ends_with(".tmp")) ++kills_with_temp;
      REQUIRE(name.find(".bad") == std::string::npos);
      if (plumbline::snapshot::generation_of(name)) newest = name;
    }
    if (!newest.empty()) check_window_contents(data + "/" + newest);
  }
  INFO("rounds " << rounds << ", kills during a write " << kills_with_temp);
  CHECK(rounds >= 5);
  // A reference was collected and survived the crashes.
  CHECK(*std::max_element(high_water.begin(), high_water.end()) >= 2000);
  // Finally a graceful stop after the sender is done loses nothing.
  {
    daemon_process d(dir, {"--config", cfg, "--data-dir", data});
    CHECK(d.stderr_text().find("unusable") == std::string::npos);
    const uint64_t from = samples_of(d, streams[0]);
    d.send_tcp(records(streams[0], from, 123));
    REQUIRE(wait_until([&] { return samples_of(d, streams[0]) == from + 123; }));
    CHECK(d.stop() == 0);
    daemon_process again(dir, {"--config", cfg, "--data-dir", data});
    CHECK(samples_of(again, streams[0]) == from + 123);
    CHECK(again.stop() == 0);
  }
}

TEST_CASE("SIGHUP and POST /api/reload apply a good configuration and refuse a bad one whole",
          "[integration][state][reload]") {
  temp_dir dir;
  const std::string cfg = dir.write("plumbline.toml", base_config);
  daemon_process d(dir, {"--config", cfg});
  const std::string s = "larkspur/line_b/fill_4";
  for (uint64_t at = 0; at < 300; at += 25) {
    d.send_tcp(records(s, at, 25));
    REQUIRE(wait_until([&] { return idle(d, s); }));
  }
  CHECK(d.metric("plumbline_config_reload_success") == 1);
  auto count = [&](const std::string& text) {
    const std::string err = d.stderr_text();
    std::size_t n = 0;
    for (std::size_t at = err.find(text); at != std::string::npos; at = err.find(text, at + 1))
      ++n;
    return n;
  };

  // Good: another test, a smaller recent window, and a new seed (which needs
  // a restart, and is said so).
  std::string good = base_config;
  good.replace(good.find("tests = [\"ad\"]"), 14, "tests = [\"ks\"]");
  good.replace(good.find("recent_size = 50"), 16, "recent_size = 30");
  good.replace(good.find("seed = 7"), 8, "seed = 8");
  dir.write("plumbline.toml", good);
  ::kill(d.pid(), SIGHUP);
  REQUIRE(wait_until([&] { return count("reload done") == 1; }, 10));
  json j = stream_json(d, s);
  CHECK(j["samples_total"] == 300);
  CHECK(j["reference_samples"] == 200);
  CHECK(j["recent_samples"] == 30);
  CHECK(j["settings"]["tests"] == json::array({"ks"}));
  CHECK(j["settings"]["recent_size"] == 30);
  CHECK(count("evaluation.seed is 8 in the new configuration but stays 7 until a restart") == 1);
  // The new test runs at the next evaluation.
  d.send_tcp(records(s, 300, 25));
  REQUIRE(wait_until([&] {
    const json k = stream_json(d, s);
    return k["evaluation_state"] == "idle" && k["last_result"].is_object() &&
           k["last_result"]["tests"][0]["name"] == "ks";
  }));

  // Bad: refused whole, every error with its position, the metric 0.
  std::string bad = good;
  bad.replace(bad.find("recent_size = 30"), 16, "recent_size = 60\nalpha = 7\nwindow = 3");
  dir.write("plumbline.toml", bad);
  ::kill(d.pid(), SIGHUP);
  REQUIRE(wait_until([&] { return count("reload refused") == 1; }, 10));
  CHECK(d.metric("plumbline_config_reload_success") == 0);
  CHECK(count(cfg + ":12:9: ") == 1);  // alpha = 7
  CHECK(count(cfg + ":13:1: ") == 1);  // the unknown key
  j = stream_json(d, s);
  CHECK(j["recent_samples"] == 30);
  CHECK(j["settings"]["recent_size"] == 30);
  const http_reply refused = d.post("/api/reload");
  CHECK(refused.status == 422);
  const json rj = json::parse(refused.body);
  CHECK(rj["reloaded"] == false);
  CHECK(rj["errors"].size() == 2);
  CHECK(d.metric("plumbline_config_reload_success") == 0);

  // Fixed again: POST /api/reload applies it and the metric is back to 1.
  dir.write("plumbline.toml", good);
  const http_reply ok = d.post("/api/reload");
  CHECK(ok.status == 200);
  CHECK(json::parse(ok.body)["reloaded"] == true);
  CHECK(d.metric("plumbline_config_reload_success") == 1);
  CHECK(stream_json(d, s)["samples_total"] == 325);
  CHECK(d.stop() == 0);
}
