// ingest_sink_test.cc: the batched ingest path against the one-line path.
//
// No outside reference applies: the contract is the daemon's own. Feeding a
// sequence of lines through ingest_sink::consume_lines, in batches of any
// size, must leave exactly the state that feeding them one at a time leaves:
// the same streams, the same window contents in the same order, the same
// counts by rejection reason, the same evaluation requests. The traffic mixes
// what makes batching delicate: a stream seen for the first time and again
// within the same group of records, comments and rejected lines between
// records of one stream, a wrong dimension, the stream limit reached inside
// a batch, and two groups with different reference policies.
#include <catch2/catch.hpp>
#include <string>
#include <vector>

#include "config/options.h"
#include "core/rng.h"
#include "daemon/evaluator.h"
#include "daemon/ingest.h"
#include "daemon/stream_table.h"

namespace {

using namespace plumbline;

config::daemon_config sink_config() {
  config::daemon_config c = config::default_config();
  c.groups.clear();
  config::stream_group lagged;
  lagged.name = "lagged";
  lagged.match = "lag/*";
  lagged.settings.policy = reference_policy::lagged;
  lagged.settings.reference_size = 7;
  lagged.settings.recent_size = 5;
  lagged.settings.every_samples = 0;
  lagged.settings.every_seconds = 3600;
  c.groups.push_back(lagged);
  config::stream_group base;
  base.name = "base";
  base.match = "base/*";
  base.settings.reference_size = 6;
  base.settings.recent_size = 4;
  base.settings.every_samples = 0;
  base.settings.every_seconds = 3600;
  c.groups.push_back(base);
  return c;
}

// Lines of mixed traffic from a seeded generator.
std::vector<std::string> traffic(uint64_t seed, std::size_t n) {
  rng g(seed);
  std::vector<std::string> out;
  for (std::size_t i = 0; i < n; ++i) {
    const uint32_t kind = g.bounded(20);
    const std::string value = std::to_string(g.bounded(100000)) + "." + std::to_string(g.bounded(10));
    const std::string name = (g.bounded(2) ? "lag/s" : "base/s") + std::to_string(g.bounded(9));
    switch (kind) {
      case 0: out.push_back("# comment"); break;
      case 1: out.push_back(""); break;
      case 2: out.push_back(name + ",,not-a-number"); break;
      case 3: out.push_back(name + ",,1," + value); break;           // wrong dimension
      case 4: out.push_back("other/s1,," + value); break;            // no group matches
      case 5: out.push_back("bad name,," + value); break;
      default: out.push_back(name + ",1700000000." + std::to_string(i) + "," + value); break;
    }
  }
  return out;
}

struct fixture {
  explicit fixture(std::size_t max_streams) : cfg(sink_config()), table(cfg, max_streams) {}
  config::daemon_config cfg;
  ingest_counters counters;
  stream_table table;
  evaluator eval{1, [](stream_entry&, double, double, const std::optional<alarm_event>&) {}};
  ingest_sink sink{table, eval, counters};
  ~fixture() { eval.stop(false); }
};

// Everything the sink changed, as comparable values.
struct snapshot {
  std::vector<std::string> names;
  std::vector<std::vector<double>> reference, recent;
  std::vector<double> last_time;
  std::vector<uint64_t> rejected;
  uint64_t records = 0;
  bool operator==(const snapshot&) const = default;
};

snapshot state_of(fixture& f) {
  snapshot s;
  f.table.for_each([&](stream_entry& e) {
    std::lock_guard lock(e.mu);
    evaluation_input in;
    e.monitor.capture(in);
    s.names.push_back(e.name);
    s.reference.push_back(in.reference);
    s.recent.push_back(in.recent);
    s.last_time.push_back(e.last_sample_time);
  });
  for (const auto& r : f.counters.rejected) s.rejected.push_back(r.load());
  s.records = f.counters.records.load();
  return s;
}

}  // namespace

TEST_CASE("batched ingest leaves the state that one line at a time leaves", "[unit][daemon][ingest]") {
  const auto lines = traffic(20261202, 3000);
  // 12 streams may exist: the limit is reached during the traffic, inside
  // batches, so too_many_streams rejections are part of what must match.
  fixture one(12);
  for (const auto& l : lines) one.sink.consume(l, 5.0);
  const snapshot expected = state_of(one);
  REQUIRE(expected.records > 1000);
  REQUIRE(expected.names.size() == 12);
  REQUIRE(expected.rejected[static_cast<std::size_t>(wire::reject_reason::too_many_streams)] > 0);
  REQUIRE(expected.rejected[static_cast<std::size_t>(wire::reject_reason::wrong_dimension)] > 0);

  for (const std::size_t batch : {std::size_t{1}, std::size_t{2}, std::size_t{15}, std::size_t{16},
                                  std::size_t{17}, std::size_t{1024}, lines.size()}) {
    fixture f(12);
    std::vector<std::string_view> views;
    for (std::size_t i = 0; i < lines.size(); ++i) {
      views.push_back(lines[i]);
      if (views.size() == batch) {
        f.sink.consume_lines(views, 5.0);
        views.clear();
      }
    }
    f.sink.consume_lines(views, 5.0);
    INFO("batch size " << batch);
    CHECK(state_of(f) == expected);
  }
}
