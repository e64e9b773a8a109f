// snapshot_test.cc: snapshots (daemon/snapshot.h, daemon/snapshot_format.h,
// core/state_codec.h) and configuration reloads (daemon/reload.h).
//
// Outside references: the CRC-32C check values of RFC 3720 (iSCSI), section
// B.4, and the check value of the CRC catalogue ("CRC-32/ISCSI": check =
// 0xE3069283 for the ASCII bytes "123456789"). Everything else is the
// daemon's own contract: a restored stream equals the saved one, down to the
// generator, so the next evaluation gives bit-identical results; every
// damaged file is refused with a reason and set aside, never deleted, and
// the previous generation is used.
#include <sys/stat.h>

#include <catch2/catch.hpp>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <atomic>
#include <set>
#include <thread>

#include "config/options.h"
#include "core/state_codec.h"
#include "daemon/evaluator.h"
#include "daemon/reload.h"
#include "daemon/snapshot.h"
#include "daemon/snapshot_format.h"
#include "daemon/stream_table.h"
#include "support/cli.h"
#include "support/generate.h"

namespace {

using namespace plumbline;
using plumbline::testing::temp_dir;
namespace fs = std::filesystem;

config::daemon_config small_config() {
  config::daemon_config c = config::default_config();
  c.groups.clear();
  config::stream_group line;
  line.name = "line";
  line.match = "line/*";
  line.settings.reference_size = 40;
  line.settings.recent_size = 20;
  line.settings.every_samples = 10;
  line.settings.permutation.resamples = 199;
  line.settings.interval->resamples = 199;
  line.settings.alarm.alpha = 0.05;
  line.settings.alarm.raise_after = 1;
  line.settings.alarm.clear_after = 1;
  line.settings.alarm.history_limit = 4;
  c.groups.push_back(line);
  config::stream_group pairs;
  pairs.name = "pairs";
  pairs.match = "pair/*";
  pairs.settings.policy = reference_policy::lagged;
  pairs.settings.dimension = 2;
  pairs.settings.reference_size = 30;
  pairs.settings.recent_size = 15;
  pairs.settings.tests = {test_kind::energy};
  pairs.settings.permutation.resamples = 99;
  pairs.settings.interval.reset();
  c.groups.push_back(pairs);
  return c;
}

// Runs one evaluation of e as the evaluator does and records it.
evaluation_result evaluate_once(stream_entry& e, double time) {
  evaluation_input in;
  evaluation_scratch scratch;
  std::lock_guard lock(e.mu);
  e.monitor.capture(in);
  rng gen(e.next_evaluation_seed());
  evaluation_result r = stream_monitor::evaluate(in, e.group->settings, scratch, gen);
  e.monitor.record(r, time);
  ++e.evaluations;
  e.last_evaluation_time = time;
  return r;
}

// Feeds n samples to a stream: univariate N(mean, 1), or pairs.
void feed(stream_table& t, const std::string& name, std::size_t n, uint64_t seed, double mean) {
  rng g(seed);
  const bool pair = name.rfind("pair/", 0) == 0;
  auto l = t.find_or_create(name, stream_name_hash(name), pair ? 2 : 1);
  REQUIRE(l.entry != nullptr);
  std::lock_guard lock(l.entry->mu);
  for (std::size_t i = 0; i < n; ++i) {
    const double v[2] = {mean + plumbline::testing::normal(g), plumbline::testing::normal(g)};
    REQUIRE(l.entry->monitor.push(std::span<const double>(v, pair ? 2 : 1)).ok());
    l.entry->last_sample_time = 1764633600.0 + static_cast<double>(i);
  }
}

void require_same_results(const evaluation_result& a, const evaluation_result& b) {
  REQUIRE(a.tests.size() == b.tests.size());
  for (std::size_t i = 0; i < a.tests.size(); ++i) {
    REQUIRE(a.tests[i].ok == b.tests[i].ok);
    CHECK(std::memcmp(&a.tests[i].result.p_value, &b.tests[i].result.p_value, 8) == 0);
    CHECK(std::memcmp(&a.tests[i].result.statistic, &b.tests[i].result.statistic, 8) == 0);
    CHECK(a.tests[i].result.resamples == b.tests[i].result.resamples);
  }
  REQUIRE(a.interval.has_value() == b.interval.has_value());
  if (a.interval) {
    CHECK(std::memcmp(&a.interval->lower, &b.interval->lower, 8) == 0);
    CHECK(std::memcmp(&a.interval->estimate, &b.interval->estimate, 8) == 0);
    CHECK(std::memcmp(&a.interval->upper, &b.interval->upper, 8) == 0);
  }
}

// Everything of a stream's state that the codec carries, compared field by field.
void require_same_state(const stream_entry& a, const stream_entry& b) {
  CHECK(a.name == b.name);
  CHECK(a.dimension == b.dimension);
  CHECK(a.next_evaluation_seed() == b.next_evaluation_seed());
  CHECK(a.since_trigger == b.since_trigger);
  CHECK(a.primed == b.primed);
  CHECK(a.last_sample_time == b.last_sample_time);
  CHECK(a.evaluations == b.evaluations);
  const stream_monitor& x = a.monitor;
  const stream_monitor& y = b.monitor;
  CHECK(x.samples_total() == y.samples_total());
  CHECK(x.samples_since_evaluation() == y.samples_since_evaluation());
  CHECK(x.evaluations_total() == y.evaluations_total());
  CHECK(x.generation() == y.generation());
  CHECK(x.reference_capacity() == y.reference_capacity());
  CHECK(x.recent_capacity() == y.recent_capacity());
  evaluation_input ia, ib;
  x.capture(ia);
  y.capture(ib);
  CHECK(ia.reference == ib.reference);
  CHECK(ia.recent == ib.recent);
  CHECK(ia.reference_rows == ib.reference_rows);
  CHECK(ia.recent_rows == ib.recent_rows);
  CHECK(x.alarm().active() == y.alarm().active());
  CHECK(x.alarm().consecutive_signals() == y.alarm().consecutive_signals());
  CHECK(x.alarm().consecutive_quiet() == y.alarm().consecutive_quiet());
  CHECK(x.alarm().raised_total() == y.alarm().raised_total());
  CHECK(x.alarm().cleared_total() == y.alarm().cleared_total());
  CHECK(x.alarm().dropped_events() == y.alarm().dropped_events());
  REQUIRE(x.alarm().history_size() == y.alarm().history_size());
  for (std::size_t i = 0; i < x.alarm().history_size(); ++i) {
    CHECK(x.alarm().history(i).time == y.alarm().history(i).time);
    CHECK(x.alarm().history(i).p_value == y.alarm().history(i).p_value);
    CHECK(x.alarm().history(i).kind == y.alarm().history(i).kind);
  }
}

struct logged {
  std::vector<std::pair<int, std::string>> lines;
  snapshot::log_fn fn() {
    return [this](int s, const std::string& m) { lines.emplace_back(s, m); };
  }
  bool has(const std::string& part) const {
    for (const auto& l : lines)
      if (l.second.find(part) != std::string::npos) return true;
    return false;
  }
  std::string all() const {
    std::string s;
    for (const auto& l : lines)
      s += l.second + "\n";
    return s;
  }
};

// A table with a few streams in every interesting state: a univariate
// stream past several evaluations with alarm events (history over its
// limit), one still filling its reference, and a lagged pair stream.
struct populated {
  config::daemon_config cfg = small_config();
  stream_table table{cfg, 16};
  populated() {
    feed(table, "line/a", 60, 1, 0);
    for (int k = 0; k < 8; ++k) {
      feed(table, "line/a", 20, 100 + k, k % 2 == 0 ? 3 : 0);
      evaluate_once(*table.find("line/a"), 1764633700.0 + k);
    }
    feed(table, "line/b", 17, 2, 5);
    feed(table, "pair/c", 50, 3, 1);
    evaluate_once(*table.find("pair/c"), 1764633800.0);
    feed(table, "pair/c", 7, 4, 1);
  }
};

std::string read_bytes(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  return std::string(std::istreambuf_iterator<char>(in), {});
}

void write_bytes(const std::string& path, std::string_view bytes) {
  std::ofstream out(path, std::ios::binary | std::ios::trunc);
  out.write(bytes.data(), static_cast<std::streamsize>(bytes.size()));
}

std::set<std::string> names_in(const fs::path& dir) {
  std::set<std::string> out;
  for (const auto& e : fs::directory_iterator(dir))
    out.insert(e.path().filename().string());
  return out;
}

}  // namespace

TEST_CASE("CRC-32C matches the published check values", "[unit][snapshot][reference]") {
  // CRC catalogue, CRC-32/ISCSI: check = 0xE3069283 for "123456789"; the
  // same value is the usual check of RFC 3720's CRC32C.
  CHECK(snapshot::crc32c("123456789", 9) == 0xE3069283u);
  // RFC 3720, appendix B.4: 32 bytes of zeros give the CRC bytes aa 36 91 8a
  // (sent least significant byte first), 32 bytes of 0xFF give 43 ab a8 62,
  // and the bytes 0x00 .. 0x1F give 4e 79 dd 46 (from memory of that table).
  unsigned char zeros[32] = {}, ones[32], up[32];
  std::memset(ones, 0xFF, sizeof ones);
  for (int i = 0; i < 32; ++i)
    up[i] = static_cast<unsigned char>(i);
  CHECK(snapshot::crc32c(zeros, 32) == 0x8A9136AAu);
  CHECK(snapshot::crc32c(ones, 32) == 0x62A8AB43u);
  CHECK(snapshot::crc32c(up, 32) == 0x46DD794Eu);
  // Continuing a CRC over a split input equals the CRC of the whole.
  CHECK(snapshot::crc32c("6789", 4, snapshot::crc32c("12345", 5)) == 0xE3069283u);
  CHECK(snapshot::crc32c("", 0) == 0u);
}

TEST_CASE("snapshot file names carry the generation and nothing else matches",
          "[unit][snapshot]") {
  CHECK(snapshot::file_name(42) == "snapshot-000000000000002a.plbs");
  CHECK(snapshot::generation_of("snapshot-000000000000002a.plbs") == 42u);
  CHECK(snapshot::generation_of(snapshot::file_name(~uint64_t{0})) == ~uint64_t{0});
  CHECK_FALSE(snapshot::generation_of(".snapshot-000000000000002a.tmp"));
  CHECK_FALSE(snapshot::generation_of("snapshot-000000000000002a.plbs.bad"));
  CHECK_FALSE(snapshot::generation_of("snapshot-000000000000002A.plbs"));
  CHECK_FALSE(snapshot::generation_of("snapshot-2a.plbs"));
}

TEST_CASE("a saved and restored table equals the original, next evaluation seed included",
          "[unit][snapshot]") {
  temp_dir dir;
  populated p;
  snapshot::status st;
  logged log;
  snapshot::snapshotter writer(dir.file("data"), p.table, p.cfg.evaluation.seed, st, log.fn());
  CHECK(writer.restore(1764634000.0) == 0);  // an empty directory: nothing to restore
  CHECK(log.has("no snapshot in"));
  auto written = writer.write_now();
  REQUIRE(written.ok());
  CHECK(fs::path(written.value()).filename() == "snapshot-0000000000000001.plbs");
  CHECK(st.failures.load() == 0);
  CHECK(st.last_good_time.load() > 0);

  stream_table restored(p.cfg, 16);
  snapshot::status st2;
  logged log2;
  snapshot::snapshotter reader(dir.file("data"), restored, p.cfg.evaluation.seed, st2, log2.fn());
  REQUIRE(reader.restore(1764634000.0) == 3);
  INFO(log2.all());
  CHECK(log2.has("restored 3 of 3 stream(s)"));
  REQUIRE(restored.size() == 3);
  const stream_entry& a0 = *p.table.find("line/a");
  // The history limit is 4 and the stream raised and cleared more often, so
  // the saved ring had wrapped: restoring must keep its order.
  REQUIRE(a0.monitor.alarm().dropped_events() > 0);
  for (const char* name : {"line/a", "line/b", "pair/c"}) {
    INFO(name);
    REQUIRE(restored.find(name) != nullptr);
    require_same_state(*p.table.find(name), *restored.find(name));
  }
  // The next evaluation is bit-identical on both sides, for the univariate
  // stream (AD test and BCa interval) and the pair stream (energy test).
  for (const char* name : {"line/a", "pair/c"}) {
    INFO(name);
    feed(p.table, name, 10, 900, 1.5);
    feed(restored, name, 10, 900, 1.5);
    const evaluation_result x = evaluate_once(*p.table.find(name), 1764635000.0);
    const evaluation_result y = evaluate_once(*restored.find(name), 1764635000.0);
    REQUIRE(x.driving_ok());
    require_same_results(x, y);
    require_same_state(*p.table.find(name), *restored.find(name));
  }
}

TEST_CASE("a version 1 snapshot, which held a generator per stream, still restores",
          "[unit][snapshot]") {
  // Version 1 (DEVELOPERS.md, "Snapshot format") placed each stream's
  // generator state between the scheduling fields and the monitor. Build such
  // a file from today's sections, as a build of that version wrote it.
  populated p;
  std::vector<std::pair<snapshot::section_kind, std::string>> v1(1);
  v1[0].first = snapshot::section_kind::daemon;
  state_codec::writer dw(v1[0].second);
  dw.u64(p.cfg.evaluation.seed);
  dw.u64(p.table.size());
  rng g(99);
  g.next_u32();  // mid-block, a half-word pending
  std::string generator;
  state_codec::writer gw(generator);
  state_codec::encode(gw, g.state());
  REQUIRE(generator.size() == 4 * 4 * 8 + 64 * 8 + 4 + 4);
  p.table.for_each([&](const stream_entry& e) {
    std::lock_guard lock(e.mu);
    std::string payload = snapshot::encode_stream(e);
    snapshot::stream_head head;
    snapshot::stream_fields fields;
    std::size_t monitor_at = 0;
    std::string error;
    REQUIRE(snapshot::read_stream(payload, head, fields, monitor_at, error));
    payload.insert(monitor_at, generator);
    v1.emplace_back(snapshot::section_kind::stream, std::move(payload));
  });
  const std::string image = snapshot::frame(3, 1764633600.0, v1, 1);
  auto parsed = snapshot::parse(image);
  REQUIRE(parsed.ok());
  CHECK(parsed.value().version == 1);
  // Read as version 2, the same bytes are refused: the layouts differ.
  std::string as_v2 = snapshot::frame(3, 1764633600.0, v1, 2);
  CHECK_FALSE(snapshot::parse(as_v2).ok());

  temp_dir dir;
  fs::create_directories(dir.file("data"));
  write_bytes(dir.file("data") + "/" + snapshot::file_name(3), image);
  stream_table restored(p.cfg, 16);
  snapshot::status st;
  logged log;
  snapshot::snapshotter reader(dir.file("data"), restored, p.cfg.evaluation.seed, st, log.fn());
  INFO(log.all());
  REQUIRE(reader.restore(1764634000.0) == 3);
  for (const char* name : {"line/a", "line/b", "pair/c"}) {
    INFO(name);
    REQUIRE(restored.find(name) != nullptr);
    require_same_state(*p.table.find(name), *restored.find(name));
  }
  // A version 1 generator that no generator can be in is refused, as then.
  std::string bad_generator = generator;
  bad_generator[bad_generator.size() - 8] = 65;  // read position beyond the block
  std::vector<std::pair<snapshot::section_kind, std::string>> bad = v1;
  bad[1].second.replace(bad[1].second.find(generator), generator.size(), bad_generator);
  auto refused = snapshot::parse(snapshot::frame(3, 1764633600.0, bad, 1));
  REQUIRE_FALSE(refused.ok());
  CHECK(refused.err().message.find("position") != std::string::npos);
}

TEST_CASE("a window whose running sums overflowed still saves and restores",
          "[unit][snapshot]") {
  // Finite values whose squares overflow make the sums infinite (window.h);
  // the daemon accepts such samples, so their state must survive a restart.
  config::daemon_config cfg = small_config();
  stream_table t(cfg, 4);
  auto l = t.find_or_create("line/huge", stream_name_hash("line/huge"), 1);
  REQUIRE(l.entry != nullptr);
  std::string payload;
  {
    std::lock_guard lock(l.entry->mu);
    for (double v : {1e300, -1e300, 3.0, 1e300})
      REQUIRE(l.entry->monitor.push(std::span<const double>(&v, 1)).ok());
    payload = snapshot::encode_stream(*l.entry);
  }
  stream_table t2(cfg, 4);
  auto l2 = t2.find_or_create("line/huge", stream_name_hash("line/huge"), 1);
  std::string error;
  std::lock_guard lock(l2.entry->mu);
  REQUIRE(snapshot::restore_stream(payload, *l2.entry, 0, error));
  CHECK(l2.entry->monitor.reference_fill() == 4);
  CHECK(l2.entry->monitor.samples_total() == 4);
}

TEST_CASE("the codec round-trips a generator mid-block and refuses impossible states",
          "[unit][snapshot]") {
  rng g(12345);
  for (int i = 0; i < 37; ++i)
    g.next_u64();
  g.next_u32();  // a high half pending
  std::string bytes;
  state_codec::writer w(bytes);
  state_codec::encode(w, g.state());
  state_codec::reader r(bytes);
  rng::state_type s;
  REQUIRE(state_codec::decode(r, s));
  CHECK(r.left() == 0);
  rng h(1);
  h.restore(s);
  for (int i = 0; i < 200; ++i)
    REQUIRE(h.next_u32() == g.next_u32());
  // pos beyond the block.
  std::string bad = bytes;
  bad[bad.size() - 8] = 65;
  state_codec::reader r2(bad);
  CHECK_FALSE(state_codec::decode(r2, s));
  CHECK(r2.error().find("position") != std::string::npos);
  // Every truncation fails cleanly.
  for (std::size_t k = 0; k < bytes.size(); ++k) {
    state_codec::reader rk(std::string_view(bytes).substr(0, k));
    REQUIRE_FALSE(state_codec::decode(rk, s));
    REQUIRE(rk.error().find("truncated") != std::string::npos);
  }
}

TEST_CASE("a damaged snapshot is refused at every truncation and every bit flip",
          "[unit][snapshot]") {
  // A small snapshot: one stream with small windows.
  config::daemon_config cfg = small_config();
  cfg.groups[0].settings.reference_size = 3;
  cfg.groups[0].settings.recent_size = 2;
  stream_table t(cfg, 4);
  feed(t, "line/s", 4, 5, 0);
  std::vector<std::pair<snapshot::section_kind, std::string>> sections(2);
  sections[0].first = snapshot::section_kind::daemon;
  {
    state_codec::writer w(sections[0].second);
    w.u64(cfg.evaluation.seed);
    w.u64(1);
  }
  sections[1].first = snapshot::section_kind::stream;
  {
    std::lock_guard lock(t.find("line/s")->mu);
    sections[1].second = snapshot::encode_stream(*t.find("line/s"));
  }
  const std::string good = snapshot::frame(7, 1764633600.0, sections);
  auto ok = snapshot::parse(good);
  REQUIRE(ok.ok());
  CHECK(ok.value().generation == 7);
  CHECK(ok.value().streams.size() == 1);

  for (std::size_t k = 0; k < good.size(); ++k) {
    auto r = snapshot::parse(std::string_view(good).substr(0, k));
    REQUIRE_FALSE(r.ok());
    REQUIRE(!r.err().message.empty());
  }
  CHECK(snapshot::parse("").err().message == "empty file (0 bytes)");
  CHECK(snapshot::parse(good.substr(0, 100)).err().message.find("truncated") == 0);
  for (std::size_t byte = 0; byte < good.size(); ++byte) {
    for (int bit = 0; bit < 8; ++bit) {
      std::string b = good;
      b[byte] = static_cast<char>(b[byte] ^ (1 << bit));
      REQUIRE_FALSE(snapshot::parse(b).ok());
    }
  }
  std::string foreign = good;
  foreign[0] = 'Q';
  CHECK(snapshot::parse(foreign).err().message == "not a plumbline snapshot (foreign magic)");
  std::string future = good;
  future[8] = 3;
  CHECK(snapshot::parse(future).err().message ==
        "format version 3 is newer than this build reads (2)");
  CHECK(snapshot::parse(good + "x").err().message.find("trailing bytes") != std::string::npos);
}

TEST_CASE("restore sets damaged files aside and uses the previous generation",
          "[unit][snapshot]") {
  temp_dir dir;
  populated p;
  const std::string data = dir.file("data");
  snapshot::status st;
  logged log;
  snapshot::snapshotter w(data, p.table, p.cfg.evaluation.seed, st, log.fn());
  w.restore(0);
  REQUIRE(w.write_now().ok());  // generation 1
  const std::string g1 = read_bytes(data + "/" + snapshot::file_name(1));

  struct damage {
    const char* what;
    std::function<void(const std::string& path)> make;
    const char* reason;
  };
  const std::vector<damage> cases = {
      {"truncated", [&](const std::string& f) { write_bytes(f, g1.substr(0, g1.size() / 2)); },
       "truncated"},
      {"zero-length", [&](const std::string& f) { write_bytes(f, ""); }, "empty file"},
      {"bit flip",
       [&](const std::string& f) {
         std::string b = g1;
         b[b.size() - 100] = static_cast<char>(b[b.size() - 100] ^ 0x10);
         write_bytes(f, b);
       },
       "checksum mismatch"},
      {"directory", [&](const std::string& f) { fs::create_directory(f); }, "a directory"},
      {"foreign", [&](const std::string& f) { write_bytes(f, std::string(200, 'z')); },
       "foreign magic"},
      {"future version",
       [&](const std::string& f) {
         std::string b = g1;
         b[8] = 9;
         write_bytes(f, b);
       },
       "newer than this build"},
  };
  uint64_t gen = 1000;
  for (const damage& d : cases) {
    INFO(d.what);
    ++gen;
    const std::string bad = data + "/" + snapshot::file_name(gen);
    d.make(bad);
    stream_table t(p.cfg, 16);
    snapshot::status s2;
    logged l2;
    snapshot::snapshotter r(data, t, p.cfg.evaluation.seed, s2, l2.fn());
    CHECK(r.restore(0) == 3);
    INFO(l2.all());
    // Reported by name and reason, renamed aside, never deleted.
    CHECK(l2.has(snapshot::file_name(gen) + " is unusable (" ));
    CHECK(l2.has(d.reason));
    CHECK(l2.has("restored 3 of 3 stream(s) from snapshot " + data + "/" +
                 snapshot::file_name(1)));
    CHECK_FALSE(fs::exists(bad));
    CHECK(fs::exists(bad + ".bad"));
    require_same_state(*p.table.find("line/a"), *t.find("line/a"));
  }
  // With every candidate bad, the daemon starts empty and says so.
  fs::rename(data + "/" + snapshot::file_name(1), data + "/" + snapshot::file_name(5000));
  write_bytes(data + "/" + snapshot::file_name(5000), "");
  stream_table t(p.cfg, 16);
  snapshot::status s3;
  logged l3;
  snapshot::snapshotter r(data, t, p.cfg.evaluation.seed, s3, l3.fn());
  CHECK(r.restore(0) == 0);
  CHECK(t.size() == 0);
  CHECK(l3.has("no valid snapshot in " + data + "; starting empty"));
  // The next write takes a generation above every name seen, set-aside ones included.
  auto next = r.write_now();
  REQUIRE(next.ok());
  CHECK(fs::path(next.value()).filename() == snapshot::file_name(5001));
}

TEST_CASE("writes keep two generations and a left-over temp file is never read",
          "[unit][snapshot]") {
  temp_dir dir;
  populated p;
  const std::string data = dir.file("data");
  fs::create_directory(data);
  snapshot::status st;
  logged log;
  {
    snapshot::snapshotter w(data, p.table, p.cfg.evaluation.seed, st, log.fn());
    w.restore(0);
    for (int i = 0; i < 4; ++i)
      REQUIRE(w.write_now().ok());
  }
  CHECK(names_in(data) ==
        std::set<std::string>{snapshot::file_name(3), snapshot::file_name(4)});
  // A temp file of a higher generation, complete and valid, as a crash
  // between write and rename would leave it: it is removed, not restored.
  feed(p.table, "line/b", 3, 77, 0);
  {
    snapshot::snapshotter w(data, p.table, p.cfg.evaluation.seed, st, log.fn());
    REQUIRE(w.write_now().ok());
  }
  fs::rename(data + "/" + snapshot::file_name(1), data + "/.snapshot-0000000000000009.tmp");
  stream_table t(p.cfg, 16);
  logged l2;
  snapshot::snapshotter r(data, t, p.cfg.evaluation.seed, st, l2.fn());
  REQUIRE(r.restore(0) == 3);
  INFO(l2.all());
  CHECK(l2.has("an unfinished write (never read)"));
  CHECK(l2.has("from snapshot " + data + "/" + snapshot::file_name(4)));
  CHECK_FALSE(fs::exists(data + "/.snapshot-0000000000000009.tmp"));
  CHECK(t.find("line/b")->monitor.samples_total() == 17);
}

TEST_CASE("an unusable data directory gives a clear error and counts failures",
          "[unit][snapshot]") {
  temp_dir dir;
  populated p;
  // A path below a regular file can never be created, whoever runs the test.
  const std::string blocker = dir.write("not-a-directory", "x");
  snapshot::status st;
  logged log;
  snapshot::snapshotter w(blocker + "/data", p.table, p.cfg.evaluation.seed, st, log.fn());
  CHECK(w.restore(0) == 0);
  CHECK(log.has("data directory " + blocker + "/data cannot be used"));
  auto r = w.write_now();
  REQUIRE_FALSE(r.ok());
  CHECK(r.err().message.find("cannot create the data directory") != std::string::npos);
  CHECK(st.failures.load() == 1);
  CHECK_FALSE(w.write_now().ok());
  CHECK(st.failures.load() == 2);
  CHECK(st.last_good_time.load() == 0);
}

TEST_CASE("restoring under changed settings follows the reload rules", "[unit][snapshot]") {
  temp_dir dir;
  populated p;
  snapshot::status st;
  logged log;
  snapshot::snapshotter w(dir.file("data"), p.table, p.cfg.evaluation.seed, st, log.fn());
  w.restore(0);
  REQUIRE(w.write_now().ok());
  config::daemon_config changed = small_config();
  changed.groups[0].settings.recent_size = 5;       // smaller: newest 5 kept
  changed.groups[1].settings.policy = reference_policy::baseline;  // policy change: emptied
  stream_table t(changed, 16);
  logged l2;
  snapshot::snapshotter r(dir.file("data"), t, p.cfg.evaluation.seed, st, l2.fn());
  REQUIRE(r.restore(0) == 3);
  evaluation_input before, after;
  p.table.find("line/a")->monitor.capture(before);
  t.find("line/a")->monitor.capture(after);
  CHECK(after.reference == before.reference);
  REQUIRE(after.recent.size() == 5);
  CHECK(std::equal(after.recent.begin(), after.recent.end(), before.recent.end() - 5));
  const stream_monitor& pc = t.find("pair/c")->monitor;
  CHECK(pc.reference_fill() == 0);
  CHECK(pc.recent_fill() == 0);
  CHECK(pc.samples_total() == p.table.find("pair/c")->monitor.samples_total());
}

TEST_CASE("a reload keeps unchanged windows, trims changed ones and keeps unmatched streams",
          "[unit][reload]") {
  populated p;
  auto before = [&](const char* name) {
    evaluation_input in;
    p.table.find(name)->monitor.capture(in);
    return in;
  };
  const evaluation_input a0 = before("line/a"), c0 = before("pair/c");
  const uint64_t a_gen = p.table.find("line/a")->monitor.generation();
  auto next = std::make_shared<config::daemon_config>(small_config());
  // line/* keeps its windows but runs another test at the next evaluation;
  // pair/* shrinks its recent window from 15 to 6.
  next->groups[0].settings.tests = {test_kind::ks};
  next->groups[1].settings.recent_size = 6;
  // A new first group takes line/b over, with the same window sizes.
  config::stream_group b = next->groups[0];
  b.name = "line_b_only";
  b.match = "line/b";
  next->groups.insert(next->groups.begin(), b);
  const reload_outcome out = apply_config(p.table, next, 1764640000.0);
  CHECK(out.streams == 3);
  CHECK(out.regrouped == 1);
  CHECK(out.kept_old == 0);
  const evaluation_input a1 = before("line/a"), c1 = before("pair/c");
  CHECK(a1.reference == a0.reference);
  CHECK(a1.recent == a0.recent);
  CHECK(p.table.find("line/a")->monitor.generation() == a_gen);
  CHECK(p.table.find("line/a")->monitor.settings().tests ==
        std::vector<test_kind>{test_kind::ks});
  CHECK(p.table.find("line/a")->group->settings.tests == std::vector<test_kind>{test_kind::ks});
  CHECK(p.table.find("line/b")->group->name == "line_b_only");
  CHECK(c1.reference_rows == c0.reference_rows);
  REQUIRE(c1.recent_rows.rows() == 6);
  CHECK(c1.recent_rows == c0.recent_rows.bottomRows(6));
  // New streams take the new configuration.
  auto fresh = p.table.find_or_create("line/b2", stream_name_hash("line/b2"), 1);
  REQUIRE(fresh.entry != nullptr);
  CHECK(fresh.entry->group->settings.tests == std::vector<test_kind>{test_kind::ks});

  // A configuration in which nothing matches pair/*: the stream stays, on
  // its old settings, and is named.
  auto narrow = std::make_shared<config::daemon_config>(*next);
  narrow->groups.pop_back();
  const reload_outcome out2 = apply_config(p.table, narrow, 1764640001.0);
  CHECK(out2.kept_old == 1);
  REQUIRE(out2.notes.size() == 1);
  CHECK(out2.notes[0].find("stream pair/c keeps its settings of group 'pairs'") == 0);
  CHECK(p.table.find("pair/c")->group->name == "pairs");
  CHECK(p.table.find("pair/c")->monitor.recent_capacity() == 6);
}

TEST_CASE("a bad configuration is refused whole with its positions", "[unit][reload]") {
  temp_dir dir;
  const std::string path = dir.write("larkspur.toml",
                                     "[evaluation]\nthreads = 2\n\n[[group]]\nname = \"x\"\n"
                                     "match = \"*\"\nalpha = 7\nrecent_size = 1\n");
  const prepared_config p = prepare_config(path, {});
  CHECK(p.config == nullptr);
  REQUIRE(p.errors.size() == 2);
  CHECK(p.errors[0].rfind(path + ":7:9: ", 0) == 0);
  CHECK(p.errors[1].rfind(path + ":8:15: ", 0) == 0);
  // A missing reference file is an error at its key, too.
  const std::string f = dir.write("f.toml",
                                  "[[group]]\nname = \"f\"\nmatch = \"*\"\nreference = \"file\"\n"
                                  "reference_file = \"nowhere.csv\"\nreference_size = 50\n");
  const prepared_config q = prepare_config(f, {});
  CHECK(q.config == nullptr);
  REQUIRE(q.errors.size() == 1);
  CHECK(q.errors[0].rfind(f + ":5:18: group 'f': reference_file: ", 0) == 0);
}

TEST_CASE("settings that only a restart applies are named", "[unit][reload]") {
  config::daemon_config a = small_config(), b = small_config();
  CHECK(restart_only_changes(a, b).empty());
  b.http.listen.port = 9999;
  b.evaluation.seed = 3;
  const auto changes = restart_only_changes(a, b);
  REQUIRE(changes.size() == 2);
  CHECK(changes[0].rfind("http.listen is 127.0.0.1:9999 in the new configuration", 0) == 0);
  CHECK(changes[1].rfind("evaluation.seed is 3", 0) == 0);
}

// Named for the ThreadSanitizer run of CI (setup.sh tsan runs the unit cases
// matching "stream table"): the real access pattern of ingest, evaluation
// workers, reloads and snapshots on the same streams at once.
TEST_CASE("stream table: reloads and snapshots run safely beside ingest and evaluation",
          "[unit][snapshot][reload]") {
  temp_dir dir;
  auto first = std::make_shared<config::daemon_config>(small_config());
  auto second = std::make_shared<config::daemon_config>(small_config());
  second->groups[0].settings.recent_size = 12;
  second->groups[0].settings.tests = {test_kind::ks};
  second->groups[0].settings.every_samples = 7;
  stream_table table(first, 64);
  evaluator eval(2, {});
  snapshot::status st;
  logged log;
  snapshot::snapshotter snaps(dir.file("data"), table, first->evaluation.seed, st, log.fn());
  snaps.restore(0);
  // Ingest runs until reloads and snapshots have overlapped it a number of
  // times (bounded by max_per_thread samples per thread).
  constexpr int per_thread = 3000, max_per_thread = 200000;
  std::atomic<int> reloads{0}, snapshots{0};
  std::atomic<uint64_t> pushed{0};
  std::atomic<bool> done{false};
  std::atomic<int> bad{0};  // Catch assertions are not thread-safe: count here
  auto ingest = [&](int id) {
    rng g(static_cast<uint64_t>(id) + 40);
    for (int i = 0; i < max_per_thread; ++i) {
      if (i >= per_thread && reloads.load() >= 20 && snapshots.load() >= 3) break;
      const std::string name = "line/s" + std::to_string(i % 4);
      auto l = table.find_or_create(name, stream_name_hash(name), 1);
      if (l.entry == nullptr) {
        ++bad;
        continue;
      }
      stream_entry& e = *l.entry;
      const double v = plumbline::testing::normal(g);
      bool trigger = false;
      {
        std::lock_guard lock(e.mu);  // as ingest.cc does
        if (!e.monitor.push(std::span<const double>(&v, 1)).ok()) ++bad;
        pushed.fetch_add(1);
        const uint64_t k = e.group->settings.every_samples;
        if (k != 0 && e.monitor.ready() && (!e.primed || ++e.since_trigger >= k)) {
          e.primed = true;
          e.since_trigger = 0;
          trigger = true;
        }
      }
      if (trigger) eval.schedule(e);
    }
  };
  std::thread a(ingest, 1), b(ingest, 2);
  std::thread reloader([&] {
    for (int i = 0; !done.load(); ++i)
    {
      apply_config(table, i % 2 ? first : second, 1764640000.0 + i);
      ++reloads;
    }
  });
  std::thread snapshotter([&] {
    while (!done.load())
    {
      if (!snaps.write_now().ok()) ++bad;
      ++snapshots;
    }
  });
  a.join();
  b.join();
  done.store(true);
  reloader.join();
  snapshotter.join();
  eval.stop(true);
  uint64_t total = 0;
  table.for_each([&](const stream_entry& e) {
    std::lock_guard lock(e.mu);
    total += e.monitor.samples_total();
  });
  CHECK(bad.load() == 0);
  CHECK(total == pushed.load());
  CHECK(reloads.load() >= 20);
  CHECK(snapshots.load() >= 3);
  CHECK(st.failures.load() == 0);
}
