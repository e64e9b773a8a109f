// evaluator.cc: see evaluator.h.
#include "daemon/evaluator.h"

#include <chrono>

namespace plumbline {

double unix_now() {
  using namespace std::chrono;
  return duration<double>(system_clock::now().time_since_epoch()).count();
}

double steady_now() {
  using namespace std::chrono;
  return duration<double>(steady_clock::now().time_since_epoch()).count();
}

evaluator::evaluator(unsigned threads, on_done done) : done_(std::move(done)) {
  workers_.reserve(threads);
  for (unsigned i = 0; i < threads; ++i)
    workers_.emplace_back([this] { work(); });
}

evaluator::~evaluator() {
  stop(false);
}

void evaluator::schedule(stream_entry& e) {
  eval_state s = e.state.load(std::memory_order_acquire);
  for (;;) {
    switch (s) {
      case eval_state::idle:
        if (e.state.compare_exchange_weak(s, eval_state::queued, std::memory_order_acq_rel)) {
          e.requested_at.store(steady_now(), std::memory_order_relaxed);
          {
            std::lock_guard lock(mu_);
            if (stopping_ && !drain_) {
              // Shutting down: the request is not run. Leave the stream
              // idle so nothing refers to it.
              e.state.store(eval_state::idle, std::memory_order_release);
              dropped_.fetch_add(1, std::memory_order_relaxed);
              return;
            }
            queue_.push_back(&e);
          }
          cv_.notify_one();
          return;
        }
        break;
      case eval_state::running:
        if (e.state.compare_exchange_weak(s, eval_state::running_again,
                                          std::memory_order_acq_rel)) {
          e.requested_at.store(steady_now(), std::memory_order_relaxed);
          return;
        }
        break;
      case eval_state::queued:
      case eval_state::running_again:
        coalesced_.fetch_add(1, std::memory_order_relaxed);
        return;
    }
  }
}

std::size_t evaluator::queued() const {
  std::lock_guard lock(mu_);
  return queue_.size();
}

void evaluator::stop(bool drain) {
  {
    std::lock_guard lock(mu_);
    if (workers_.empty()) return;
    stopping_ = true;
    drain_ = drain;
    if (!drain) {
      for (stream_entry* e : queue_)
        e->state.store(eval_state::idle, std::memory_order_release);
      dropped_.fetch_add(queue_.size(), std::memory_order_relaxed);
      queue_.clear();
    }
  }
  cv_.notify_all();
  for (auto& t : workers_)
    t.join();
  workers_.clear();
}

void evaluator::work() {
  evaluation_input input;
  evaluation_scratch scratch;
  for (;;) {
    stream_entry* e = nullptr;
    {
      std::unique_lock lock(mu_);
      cv_.wait(lock, [&] { return stopping_ || !queue_.empty(); });
      if (queue_.empty()) return;  // stopping, and nothing (more) to drain
      e = queue_.front();
      queue_.pop_front();
    }
    e->state.store(eval_state::running, std::memory_order_release);
    run_one(*e, input, scratch);
    // Finish: idle, or back in the queue when a request came in meanwhile.
    eval_state s = eval_state::running;
    if (!e->state.compare_exchange_strong(s, eval_state::idle, std::memory_order_acq_rel)) {
      // s == running_again
      e->state.store(eval_state::queued, std::memory_order_release);
      bool requeued = false;
      {
        std::lock_guard lock(mu_);
        if (!stopping_ || drain_) {
          queue_.push_back(e);
          requeued = true;
        }
      }
      if (requeued) {
        cv_.notify_one();
      } else {
        e->state.store(eval_state::idle, std::memory_order_release);
        dropped_.fetch_add(1, std::memory_order_relaxed);
      }
    }
  }
}

void evaluator::run_one(stream_entry& e, evaluation_input& input, evaluation_scratch& scratch) {
  const double requested = e.requested_at.load(std::memory_order_relaxed);
  // The settings, the configuration that holds them and the evaluation's
  // seed are taken under the lock with the windows (a reload or a snapshot
  // may come meanwhile).
  std::shared_ptr<const config::daemon_config> config;
  const config::stream_group* group = nullptr;
  uint64_t seed = 0;
  {
    std::lock_guard lock(e.mu);
    e.monitor.capture(input);
    config = e.config;
    group = e.group;
    seed = e.next_evaluation_seed();
  }
  const auto t0 = std::chrono::steady_clock::now();
  rng gen(seed);
  evaluation_result result = stream_monitor::evaluate(input, group->settings, scratch, gen);
  const double seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  std::optional<alarm_event> event;
  {
    std::lock_guard lock(e.mu);
    const double now = unix_now();
    event = e.monitor.record(std::move(result), now);
    ++e.evaluations;
    e.last_evaluation_time = now;
    e.last_evaluation_seconds = seconds;
  }
  completed_.fetch_add(1, std::memory_order_relaxed);
  if (done_) done_(e, seconds, steady_now() - requested, event);
}

}  // namespace plumbline
