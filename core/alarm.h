// alarm.h: the alarm of one stream, raised and cleared by a run rule.
//
// Purpose. A single small p-value is weak evidence in a stream that is tested
// every few dozen samples: at alpha = 0.005 and one evaluation a minute, an
// in-control stream still gives a signal about every three hours. The alarm
// therefore asks for a run of signals before it is raised and a run of quiet
// evaluations before it is cleared, and it keeps a bounded log of what it did.
// The alarm is advisory: it tells an engineer to look, nothing more.
//
// The rule (alarm_rule in monitor_settings.h, alpha, r = raise_after,
// c = clear_after, d = tolerance). Each evaluation brings a time, the driving
// test's p-value p and optionally a drift interval (lower, estimate, upper)
// with the null value v of its quantity (0 for differences, 1 for sd-ratio).
//   signal   p < alpha, and, when a tolerance d is set, an interval is given
//            and lies wholly outside the closed band [v - d, v + d]:
//            lower > v + d or upper < v - d. With a tolerance but no interval
//            the evaluation is not a signal. A NaN p or bound is never a
//            signal (the comparisons are false).
//   quiet    every evaluation that is not a signal, including an evaluation
//            that produced no p-value at all (update_quiet: an engine error).
//   counters consecutive_signals() is the length of the current run of
//            signals, consecutive_quiet() that of the current run of quiet
//            evaluations; one of them is 0 after every evaluation.
//   raise    when the alarm is not active and consecutive_signals() reaches
//            r: active, a `raised` event with cause `rule`, raised_total + 1.
//   clear    when the alarm is active and consecutive_quiet() reaches c:
//            inactive, a `cleared` event with cause `rule`.
//   rebaseline(time)  the reference is being replaced, so the runs so far
//            compare against a reference that is gone: when active, the alarm
//            clears with cause `rebaseline`; both counters become 0.
// Signals while active and quiet evaluations while inactive change only the
// counters. r and c of 0 act as 1.
//
// History. The events are kept in a ring of at most rule.history_limit
// entries (0 keeps none); when full, the oldest is dropped first and
// dropped_events() counts it. The ring grows to its limit as events come and
// never beyond it.
//
// Thread-safety: none; one owner (the stream's monitor, under its lock).
#pragma once

#include <cstddef>
#include <cstdint>
#include <optional>
#include <string_view>
#include <vector>

#include "core/monitor_settings.h"

namespace plumbline {

struct state_codec_access;

enum class alarm_event_kind { raised, cleared };
enum class alarm_cause { rule, rebaseline };

// "raised", "cleared".
std::string_view event_kind_name(alarm_event_kind k);
// "rule", "rebaseline".
std::string_view cause_name(alarm_cause c);

// A drift interval as the alarm sees it, with the null value of its quantity
// (the value that means "no drift").
struct drift_interval {
  double lower = 0;
  double estimate = 0;
  double upper = 0;
  double null_value = 0;
};

struct alarm_event {
  alarm_event_kind kind = alarm_event_kind::raised;
  double time = 0;           // Unix seconds, as passed in
  bool has_p_value = false;  // false for rebaseline and errored evaluations
  double p_value = 1;        // the driving test's p (1 when !has_p_value)
  bool has_interval = false;
  double lower = 0, estimate = 0, upper = 0;  // the interval, when has_interval
  alarm_cause cause = alarm_cause::rule;
};

class alarm_state {
 public:
  // REQUIRES: rule validated (0 < alpha <= 1, tolerance finite and >= 0).
  explicit alarm_state(const alarm_rule& rule = {});

  // The signal test of the header comment, for one evaluation.
  static bool is_signal(const alarm_rule& rule, double p_value,
                        const std::optional<drift_interval>& interval);

  // One evaluation with a p-value. Returns the event it caused, if any.
  std::optional<alarm_event> update(double time, double p_value,
                                    const std::optional<drift_interval>& interval = std::nullopt);
  // One evaluation that produced no p-value (its test failed): quiet.
  std::optional<alarm_event> update_quiet(double time);
  // The reference is replaced: clears an active alarm (cause rebaseline) and
  // resets both counters. Returns the `cleared` event when there was one.
  std::optional<alarm_event> rebaseline(double time);

  bool active() const { return active_; }
  // Time of the raise of the current alarm; nullopt when inactive.
  std::optional<double> active_since() const {
    return active_ ? std::optional<double>(active_since_) : std::nullopt;
  }
  uint64_t consecutive_signals() const { return signals_run_; }
  uint64_t consecutive_quiet() const { return quiet_run_; }
  uint64_t raised_total() const { return raised_total_; }
  uint64_t cleared_total() const { return cleared_total_; }
  uint64_t evaluations_total() const { return evaluations_total_; }
  uint64_t signals_total() const { return signals_total_; }

  // Events kept, oldest first. REQUIRES: i < history_size().
  std::size_t history_size() const { return history_.size(); }
  const alarm_event& history(std::size_t i) const;
  // Events dropped from the ring since construction.
  uint64_t dropped_events() const { return dropped_; }
  // The kept events, oldest first; out's capacity is reused.
  void copy_history(std::vector<alarm_event>& out) const;

  const alarm_rule& rule() const { return rule_; }
  // Replaces the rule (a configuration reload). The alarm's state, counters
  // and runs are kept; the history keeps its newest rule.history_limit
  // events (the rest count as dropped). REQUIRES: rule validated.
  void set_rule(const alarm_rule& rule);

 private:
  // interval: the evaluation's interval, or nullptr.
  std::optional<alarm_event> step(double time, bool signal, bool has_p, double p,
                                  const drift_interval* interval);
  void log(const alarm_event& e);
  friend struct state_codec_access;  // core/state_codec.cc: snapshots

  alarm_rule rule_;
  bool active_ = false;
  double active_since_ = 0;
  uint64_t signals_run_ = 0;
  uint64_t quiet_run_ = 0;
  uint64_t raised_total_ = 0;
  uint64_t cleared_total_ = 0;
  uint64_t evaluations_total_ = 0;
  uint64_t signals_total_ = 0;
  std::vector<alarm_event> history_;  // ring once it holds history_limit events
  std::size_t oldest_ = 0;            // slot of the oldest event when full
  uint64_t dropped_ = 0;
};

}  // namespace plumbline
