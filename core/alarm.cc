// alarm.cc: the run rule of alarm.h.
//
// Design note. The rule is a pair of run-length counters: r signals in a
// row raise, c quiet evaluations in a row clear (a runs rule of the kind used
// with control charts; common practice, no single source). Requiring a run
// trades detection delay (at least r - 1 more evaluations) for a false-alarm
// rate far below alpha per evaluation, and the clearing run keeps an alarm
// from flickering while the evidence hovers near alpha; the calibration suite
// measures both effects for the defaults. The tolerance check compares the
// interval's bounds with the band edges directly: an interval that touches
// the band is not wholly outside it, so an interval of one point exactly at
// v + d is quiet.
//
// The history ring is a std::vector that grows by push_back up to
// history_limit and is then overwritten in place at `oldest_`, so memory is
// bounded by the limit and no event is moved when one is dropped.
#include "core/alarm.h"

#include <algorithm>
#include <cassert>
#include <utility>

namespace plumbline {

std::string_view event_kind_name(alarm_event_kind k) {
  switch (k) {
    case alarm_event_kind::raised:
      return "raised";
    case alarm_event_kind::cleared:
      return "cleared";
  }
  return "unknown";
}

std::string_view cause_name(alarm_cause c) {
  switch (c) {
    case alarm_cause::rule:
      return "rule";
    case alarm_cause::rebaseline:
      return "rebaseline";
  }
  return "unknown";
}

alarm_state::alarm_state(const alarm_rule& rule) : rule_(rule) {
  rule_.raise_after = std::max<uint32_t>(rule_.raise_after, 1);
  rule_.clear_after = std::max<uint32_t>(rule_.clear_after, 1);
}

bool alarm_state::is_signal(const alarm_rule& rule, double p_value,
                            const std::optional<drift_interval>& interval) {
  if (!(p_value < rule.alpha)) return false;
  if (!rule.tolerance) return true;
  if (!interval) return false;
  const double d = *rule.tolerance;
  const double v = interval->null_value;
  return interval->lower > v + d || interval->upper < v - d;
}

std::optional<alarm_event> alarm_state::update(double time, double p_value,
                                               const std::optional<drift_interval>& interval) {
  return step(time, is_signal(rule_, p_value, interval), true, p_value,
              interval ? &*interval : nullptr);
}

std::optional<alarm_event> alarm_state::update_quiet(double time) {
  return step(time, false, false, 1, nullptr);
}

std::optional<alarm_event> alarm_state::step(double time, bool signal, bool has_p, double p,
                                             const drift_interval* interval) {
  ++evaluations_total_;
  if (signal) {
    ++signals_total_;
    ++signals_run_;
    quiet_run_ = 0;
  } else {
    ++quiet_run_;
    signals_run_ = 0;
  }
  alarm_event e;
  if (!active_ && signals_run_ >= rule_.raise_after) {
    e.kind = alarm_event_kind::raised;
    active_ = true;
    active_since_ = time;
    ++raised_total_;
  } else if (active_ && quiet_run_ >= rule_.clear_after) {
    e.kind = alarm_event_kind::cleared;
    active_ = false;
    ++cleared_total_;
  } else {
    return std::nullopt;
  }
  e.time = time;
  e.has_p_value = has_p;
  e.p_value = has_p ? p : 1;
  if (interval != nullptr) {
    e.has_interval = true;
    e.lower = interval->lower;
    e.estimate = interval->estimate;
    e.upper = interval->upper;
  }
  e.cause = alarm_cause::rule;
  log(e);
  return e;
}

std::optional<alarm_event> alarm_state::rebaseline(double time) {
  signals_run_ = 0;
  quiet_run_ = 0;
  if (!active_) return std::nullopt;
  active_ = false;
  ++cleared_total_;
  alarm_event e;
  e.kind = alarm_event_kind::cleared;
  e.time = time;
  e.cause = alarm_cause::rebaseline;
  log(e);
  return e;
}

void alarm_state::log(const alarm_event& e) {
  if (rule_.history_limit == 0) {
    ++dropped_;
    return;
  }
  if (history_.size() < rule_.history_limit) {
    history_.push_back(e);
    return;
  }
  history_[oldest_] = e;
  oldest_ = oldest_ + 1 == history_.size() ? 0 : oldest_ + 1;
  ++dropped_;
}

const alarm_event& alarm_state::history(std::size_t i) const {
  assert(i < history_.size());
  const std::size_t j = oldest_ + i;
  return history_[j < history_.size() ? j : j - history_.size()];
}

void alarm_state::copy_history(std::vector<alarm_event>& out) const {
  out.resize(history_.size());
  for (std::size_t i = 0; i < history_.size(); ++i)
    out[i] = history(i);
}

void alarm_state::set_rule(const alarm_rule& rule) {
  std::vector<alarm_event> kept;
  copy_history(kept);
  if (kept.size() > rule.history_limit) {
    const std::size_t cut = kept.size() - rule.history_limit;
    kept.erase(kept.begin(), kept.begin() + static_cast<std::ptrdiff_t>(cut));
    dropped_ += cut;
  }
  rule_ = rule;
  history_ = std::move(kept);
  oldest_ = 0;
}

}  // namespace plumbline
