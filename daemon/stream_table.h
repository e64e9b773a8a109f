// stream_table.h: the daemon's streams, found by name from the ingest path.
//
// Purpose. Every record names its stream. The ingest threads look the name up
// here millions of times a second, so lookup is a lock-free probe of an
// open-addressing table of fixed size (a power of two at least twice the
// stream limit, so it never fills past one half and never rehashes). A new
// stream is created under one mutex the first time its name is seen: it takes
// the settings of the first configured group whose pattern matches, and its
// dimension from the group or, when the group leaves it open, from that first
// record. Streams are never removed while the daemon runs.
//
// Reload. A configuration reload (daemon/reload.h) gives the table a new
// configuration for streams created from then on (set_config) and moves each
// existing entry to its new group under the entry's lock. An entry holds a
// shared_ptr to the configuration its `group` points into, so a replaced
// configuration lives as long as any entry still uses it. The ingest path is
// unchanged by this: it reads `group` under the entry's lock, which it takes
// for the push anyway.
//
// Thread-safety. find(), find_or_create(), size(), for_each(), config() and
// set_config() may be called from any thread. A stream_entry's `name`,
// `hash`, `dimension` and `seed` are constant after creation; everything else
// in it (`config` and `group` included) is guarded by its `mu`, except the
// atomics, which say how they are used.
//
// Invariants. size() <= max_streams(); an entry, once published, stays at the
// same address until the table is destroyed.
#pragma once

#include <atomic>
#include <cstdint>
#include <functional>
#include <memory>
#include <mutex>
#include <optional>
#include <string>
#include <string_view>

#include "config/options.h"
#include "core/monitor.h"
#include "daemon/wire.h"

namespace plumbline {

// A stable 64-bit hash of a stream name (the same on every platform).
uint64_t stream_name_hash(std::string_view name);

// The evaluation scheduling state of one stream (see evaluator.h).
enum class eval_state : uint8_t { idle, queued, running, running_again };

struct stream_entry {
  // REQUIRES: group_ points into *config_.
  stream_entry(std::string name_, uint64_t hash_,
               std::shared_ptr<const config::daemon_config> config_,
               const config::stream_group& group_, uint32_t dimension_, uint64_t daemon_seed);

  const std::string name;
  const uint64_t hash;
  const uint32_t dimension;
  const uint64_t seed;  // stream_seed(daemon seed, name)

  mutable std::mutex mu;
  // Guarded by mu. `group` points into *config, which this keeps alive. The
  // fields every record reads or updates come first, beside mu.
  std::shared_ptr<const config::daemon_config> config;
  const config::stream_group* group;
  uint64_t since_trigger = 0;    // samples since the last count trigger
  bool primed = false;           // the windows were full at some push since start/rebaseline
  double last_sample_time = 0;   // the newest record's time, Unix seconds
  double last_trigger_time = 0;  // receipt clock of the last trigger, Unix seconds
  stream_monitor monitor;
  uint64_t evaluations = 0;
  double last_evaluation_time = 0;  // Unix seconds; 0 = never
  double last_evaluation_seconds = 0;

  // The seed of the stream's next evaluation: evaluation_seed(seed,
  // evaluations) (core/monitor.h). Guarded by mu, like `evaluations`: an
  // evaluation takes it when it captures the windows, and only one runs per
  // stream at a time, so a snapshot (which saves `evaluations`) restores the
  // seeds that would have come next.
  uint64_t next_evaluation_seed() const { return evaluation_seed(seed, evaluations); }

  std::atomic<eval_state> state{eval_state::idle};
  // Steady-clock seconds of the request that the pending evaluation answers
  // (written by the scheduler on idle->queued and running->running_again,
  // read by the worker when it starts).
  std::atomic<double> requested_at{0};
};

class stream_table {
 public:
  // Called for each new entry under the creation lock, before any other
  // thread can see it (the daemon loads file references here).
  using on_create = std::function<void(stream_entry&)>;

  // REQUIRES: 1 <= max_streams <= max_stream_limit. The evaluation seed of
  // `config` seeds every stream, also after set_config().
  stream_table(std::shared_ptr<const config::daemon_config> config, std::size_t max_streams,
               on_create hook = {});
  // The same with a configuration that the caller keeps alive (it must
  // outlive the table).
  stream_table(const config::daemon_config& config, std::size_t max_streams, on_create hook = {});
  ~stream_table();
  stream_table(const stream_table&) = delete;
  stream_table& operator=(const stream_table&) = delete;

  static constexpr std::size_t max_stream_limit = 10'000'000;

  // The entry named `name`, or nullptr. Lock-free.
  stream_entry* find(std::string_view name, uint64_t hash) const;

  struct lookup {
    stream_entry* entry = nullptr;
    wire::reject_reason reason{};  // when entry is null
  };
  // The entry, created on first sight with `dimension` (the record's number
  // of values) unless its group fixes one. Fails with too_many_streams at the
  // limit, and unmatched_stream when no group's pattern matches.
  lookup find_or_create(std::string_view name, uint64_t hash, uint32_t dimension);

  // The configuration new streams take their group from.
  std::shared_ptr<const config::daemon_config> config() const;
  // Replaces it (a reload). Existing entries are not touched here.
  void set_config(std::shared_ptr<const config::daemon_config> config);

  std::size_t size() const { return count_.load(std::memory_order_acquire); }
  std::size_t max_streams() const { return max_streams_; }

  // Calls f(stream_entry&) for every entry, in creation order.
  template <typename F>
  void for_each(F&& f) const {
    const std::size_t n = size();
    for (std::size_t i = 0; i < n; ++i)
      f(*entries_[i].load(std::memory_order_acquire));
  }

  // Prefetch hints for the ingest path, which looks up a few records ahead
  // (ingest.cc): the first slot a lookup of `hash` reads, and the entry in
  // it (possibly another stream's, or none), without reading the entry.
  void prefetch_slot(uint64_t hash) const { __builtin_prefetch(&slots_[hash & mask_]); }
  const stream_entry* first_probe(uint64_t hash) const {
    return slots_[hash & mask_].load(std::memory_order_relaxed);
  }

  // The entry by name, hashing it first.
  stream_entry* find(std::string_view name) const { return find(name, stream_name_hash(name)); }

 private:
  std::shared_ptr<const config::daemon_config> config_;  // guarded by create_mu_
  const uint64_t seed_;
  const std::size_t max_streams_;
  const std::size_t mask_;
  std::unique_ptr<std::atomic<stream_entry*>[]> slots_;
  std::unique_ptr<std::atomic<stream_entry*>[]> entries_;  // creation order, owning
  std::atomic<std::size_t> count_{0};
  mutable std::mutex create_mu_;
  on_create hook_;
};

}  // namespace plumbline
