// evaluator.h: runs stream evaluations on a pool of worker threads.
//
// Purpose. Ingest must never wait for statistics. The ingest path only asks
// for an evaluation (schedule()); workers copy the stream's windows under its
// lock, run the tests and the interval outside it, and record the result (and
// any alarm event) under the lock again.
//
// Coalescing. Each stream is in at most one place in the queue. A request for
// a stream that is already queued, or already running with a re-run pending,
// is merged into that pending evaluation (counted in coalesced()); a pending
// evaluation always runs on the newest data, because it copies the windows
// when it starts. So the queue never holds more entries than there are
// streams, and when evaluation falls behind, streams are evaluated less often
// rather than on stale data. No sample is ever dropped by this.
//
// Per-stream state machine (stream_entry::state):
//   idle --schedule--> queued --worker--> running --done--> idle
//   running --schedule--> running_again --done--> queued
//   queued | running_again --schedule--> (same; coalesced += 1)
//
// Thread-safety. schedule() from any thread. stop() from one thread; after it
// returns no worker touches any stream.
#pragma once

#include <atomic>
#include <condition_variable>
#include <cstdint>
#include <deque>
#include <functional>
#include <mutex>
#include <optional>
#include <thread>
#include <vector>

#include "core/alarm.h"
#include "daemon/stream_table.h"

namespace plumbline {

class evaluator {
 public:
  // Called on a worker thread after each evaluation, without any lock held:
  // the stream, the wall time the evaluation took, its latency (from the
  // request it answers to its result, queueing included), and the alarm
  // event it caused, if any.
  using on_done = std::function<void(stream_entry&, double seconds, double latency,
                                     const std::optional<alarm_event>& event)>;

  // REQUIRES: threads >= 1.
  evaluator(unsigned threads, on_done done);
  ~evaluator();  // stop(false)
  evaluator(const evaluator&) = delete;
  evaluator& operator=(const evaluator&) = delete;

  void schedule(stream_entry& e);

  // Stops the workers. With drain, evaluations already queued run first;
  // without, they are dropped (counted in dropped_at_stop()). Running ones
  // always finish. Idempotent.
  void stop(bool drain);

  uint64_t coalesced() const { return coalesced_.load(std::memory_order_relaxed); }
  uint64_t completed() const { return completed_.load(std::memory_order_relaxed); }
  uint64_t dropped_at_stop() const { return dropped_.load(std::memory_order_relaxed); }
  std::size_t queued() const;
  unsigned threads() const { return static_cast<unsigned>(workers_.size()); }

 private:
  void work();
  void run_one(stream_entry& e, evaluation_input& input, evaluation_scratch& scratch);

  on_done done_;
  mutable std::mutex mu_;
  std::condition_variable cv_;
  std::deque<stream_entry*> queue_;  // guarded by mu_
  bool stopping_ = false;            // guarded by mu_
  bool drain_ = false;               // guarded by mu_
  std::vector<std::thread> workers_;
  std::atomic<uint64_t> coalesced_{0};
  std::atomic<uint64_t> completed_{0};
  std::atomic<uint64_t> dropped_{0};
};

// Wall-clock Unix seconds, the daemon's receipt clock.
double unix_now();
// Steady-clock seconds (for durations only).
double steady_now();

}  // namespace plumbline
