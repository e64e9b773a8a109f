// stream_table_test.cc: the daemon's stream table and evaluation scheduler.
//
// No outside reference applies here: these are the daemon's own contracts
// (lookup finds what was created, limits hold, coalescing counts merged
// requests, nothing runs twice at once), checked under concurrency so that
// the ThreadSanitizer build in CI sees the real access patterns.
#include "daemon/stream_table.h"

#include <catch2/catch.hpp>
#include <set>
#include <thread>

#include "config/options.h"
#include "daemon/evaluator.h"

namespace {

using namespace plumbline;

config::daemon_config two_groups() {
  config::daemon_config c = config::default_config();
  c.groups.clear();
  config::stream_group pairs;
  pairs.name = "pairs";
  pairs.match = "pair/*";
  pairs.settings.dimension = 2;
  pairs.settings.tests = {test_kind::energy};
  pairs.settings.interval.reset();
  c.groups.push_back(pairs);
  config::stream_group line;
  line.name = "line";
  line.match = "line/*";
  line.settings.reference_size = 20;
  line.settings.recent_size = 10;
  line.settings.every_samples = 5;
  line.settings.permutation.resamples = 99;
  line.settings.interval->resamples = 99;
  c.groups.push_back(line);
  return c;
}

}  // namespace

TEST_CASE("the stream table creates a stream once and finds it again", "[daemon][streams]") {
  const config::daemon_config c = two_groups();
  stream_table t(c, 10);
  auto a = t.find_or_create("line/a", stream_name_hash("line/a"), 1);
  REQUIRE(a.entry != nullptr);
  CHECK(a.entry->group->name == "line");
  CHECK(a.entry->dimension == 1);
  auto again = t.find_or_create("line/a", stream_name_hash("line/a"), 3);
  CHECK(again.entry == a.entry);
  CHECK(t.find("line/a") == a.entry);
  CHECK(t.find("line/b") == nullptr);
  CHECK(t.size() == 1);
  // The group fixes the dimension of pair streams; otherwise the first record does.
  auto p = t.find_or_create("pair/x", stream_name_hash("pair/x"), 5);
  REQUIRE(p.entry != nullptr);
  CHECK(p.entry->dimension == 2);
  auto l3 = t.find_or_create("line/three", stream_name_hash("line/three"), 3);
  REQUIRE(l3.entry != nullptr);
  CHECK(l3.entry->dimension == 3);
}

TEST_CASE("the stream table refuses unmatched names and streams beyond its limit",
          "[daemon][streams]") {
  const config::daemon_config c = two_groups();
  stream_table t(c, 3);
  CHECK(t.find_or_create("other/a", stream_name_hash("other/a"), 1).reason ==
        wire::reject_reason::unmatched_stream);
  for (int i = 0; i < 3; ++i) {
    const std::string n = "line/" + std::to_string(i);
    REQUIRE(t.find_or_create(n, stream_name_hash(n), 1).entry != nullptr);
  }
  auto over = t.find_or_create("line/x", stream_name_hash("line/x"), 1);
  CHECK(over.entry == nullptr);
  CHECK(over.reason == wire::reject_reason::too_many_streams);
  CHECK(t.size() == 3);
  // Existing streams are still found at the limit.
  CHECK(t.find_or_create("line/1", stream_name_hash("line/1"), 1).entry != nullptr);
}

TEST_CASE("concurrent creation in the stream table gives every name exactly one entry",
          "[daemon][streams]") {
  const config::daemon_config c = two_groups();
  constexpr int names = 2000;
  stream_table t(c, names);
  std::vector<std::thread> threads;
  std::vector<std::vector<stream_entry*>> seen(4, std::vector<stream_entry*>(names));
  for (int k = 0; k < 4; ++k) {
    threads.emplace_back([&, k] {
      for (int i = 0; i < names; ++i) {
        const int j = (i * 7 + k * 13) % names;
        const std::string n = "line/s" + std::to_string(j);
        seen[k][j] = t.find_or_create(n, stream_name_hash(n), 1).entry;
      }
    });
  }
  for (auto& th : threads)
    th.join();
  CHECK(t.size() == names);
  std::set<stream_entry*> distinct;
  for (int j = 0; j < names; ++j) {
    for (int k = 1; k < 4; ++k)
      CHECK(seen[k][j] == seen[0][j]);
    distinct.insert(seen[0][j]);
  }
  CHECK(distinct.size() == names);
  std::size_t visited = 0;
  t.for_each([&](stream_entry&) { ++visited; });
  CHECK(visited == names);
}

TEST_CASE("the evaluator coalesces requests for a stream and runs it one at a time",
          "[daemon][evaluator]") {
  const config::daemon_config c = two_groups();
  stream_table t(c, 10);
  stream_entry& e = *t.find_or_create("line/a", stream_name_hash("line/a"), 1).entry;
  for (int i = 0; i < 30; ++i) {
    std::lock_guard lock(e.mu);
    REQUIRE(e.monitor.push(std::vector<double>{static_cast<double>(i % 7)}).ok());
  }
  std::atomic<int> done{0};
  evaluator ev(2, [&](stream_entry&, double, double latency, const std::optional<alarm_event>&) {
    CHECK(latency >= 0);
    done.fetch_add(1);
  });
  // Many requests from several threads while pushes continue.
  std::vector<std::thread> threads;
  for (int k = 0; k < 3; ++k) {
    threads.emplace_back([&, k] {
      for (int i = 0; i < 200; ++i) {
        {
          std::lock_guard lock(e.mu);
          (void)e.monitor.push(std::vector<double>{static_cast<double>((i + k) % 5)});
        }
        ev.schedule(e);
      }
    });
  }
  for (auto& th : threads)
    th.join();
  ev.stop(true);
  // Every request either ran or was merged into one that ran.
  CHECK(static_cast<uint64_t>(done.load()) + ev.coalesced() + ev.dropped_at_stop() == 600);
  CHECK(ev.completed() == static_cast<uint64_t>(done.load()));
  CHECK(done.load() >= 1);
  CHECK(e.state.load() == eval_state::idle);
  CHECK(e.evaluations == static_cast<uint64_t>(done.load()));
}

TEST_CASE("stopping the evaluator without draining drops what is queued", "[daemon][evaluator]") {
  const config::daemon_config c = two_groups();
  stream_table t(c, 100);
  std::vector<stream_entry*> entries;
  for (int s = 0; s < 50; ++s) {
    const std::string n = "line/" + std::to_string(s);
    stream_entry* e = t.find_or_create(n, stream_name_hash(n), 1).entry;
    for (int i = 0; i < 30; ++i)
      (void)e->monitor.push(std::vector<double>{double(i % 3)});
    entries.push_back(e);
  }
  evaluator ev(1, {});
  for (stream_entry* e : entries)
    ev.schedule(*e);
  ev.stop(false);
  CHECK(ev.completed() + ev.dropped_at_stop() == 50);
  for (stream_entry* e : entries)
    CHECK(e->state.load() == eval_state::idle);
}
