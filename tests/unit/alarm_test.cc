// alarm_test.cc: the run rule of core/alarm.h on scripted evaluations.
//
// The alarm rule is the project's own definition (the header comment of
// core/alarm.h): no outside source fixes it, so these cases check it against
// that statement directly, on hand-written sequences of p-values and
// intervals whose outcome follows from the rule by inspection. Where an
// outcome rests on arithmetic, the arithmetic is written beside it. The
// band edges use values exactly representable in binary64 (multiples of
// 1/8), so "touching the band" is an exact equality, not a rounding accident.
#include "core/alarm.h"

#include <catch2/catch.hpp>
#include <cmath>
#include <cstdint>
#include <limits>
#include <optional>
#include <vector>

#include "core/monitor_settings.h"

namespace {

using plumbline::alarm_cause;
using plumbline::alarm_event;
using plumbline::alarm_event_kind;
using plumbline::alarm_rule;
using plumbline::alarm_state;
using plumbline::drift_interval;

constexpr double hit = 0.001;  // below the default alpha 0.005: a signal
constexpr double miss = 0.2;   // quiet

alarm_rule rule_with(uint32_t raise_after, uint32_t clear_after) {
  alarm_rule r;
  r.alpha = 0.005;
  r.raise_after = raise_after;
  r.clear_after = clear_after;
  return r;
}

// Feeds p-values at times 1, 2, ...; returns the 1-based positions that
// produced an event, with its kind.
struct step_log {
  std::vector<int> positions;
  std::vector<alarm_event_kind> kinds;
};

step_log feed(alarm_state& a, const std::vector<double>& ps, double t0 = 0) {
  step_log out;
  for (std::size_t i = 0; i < ps.size(); ++i) {
    const auto e = a.update(t0 + static_cast<double>(i + 1), ps[i]);
    if (e) {
      out.positions.push_back(static_cast<int>(i + 1));
      out.kinds.push_back(e->kind);
    }
  }
  return out;
}

drift_interval interval(double lower, double estimate, double upper, double null_value = 0) {
  return drift_interval{lower, estimate, upper, null_value};
}

}  // namespace

TEST_CASE("An alarm signal needs p strictly below alpha", "[core][alarm]") {
  const alarm_rule r = rule_with(1, 1);
  CHECK(alarm_state::is_signal(r, 0.004, std::nullopt));
  CHECK_FALSE(alarm_state::is_signal(r, 0.005, std::nullopt));  // p = alpha: not below
  CHECK_FALSE(alarm_state::is_signal(r, 0.5, std::nullopt));
  CHECK_FALSE(alarm_state::is_signal(r, std::numeric_limits<double>::quiet_NaN(), std::nullopt));
  // Without a tolerance the interval plays no part, even one centred on 0.
  CHECK(alarm_state::is_signal(r, 0.001, interval(-1, 0, 1)));
}

TEST_CASE("The alarm is raised exactly at the r-th consecutive signal", "[core][alarm]") {
  alarm_state a(rule_with(3, 2));
  const step_log log = feed(a, {hit, hit, hit, hit, hit});
  REQUIRE(log.positions == std::vector<int>{3});
  CHECK(log.kinds.front() == alarm_event_kind::raised);
  CHECK(a.active());
  CHECK(a.active_since() == std::optional<double>(3.0));
  CHECK(a.consecutive_signals() == 5);  // signals while active only count
  CHECK(a.consecutive_quiet() == 0);
  CHECK(a.raised_total() == 1);
  CHECK(a.signals_total() == 5);
  CHECK(a.evaluations_total() == 5);
}

TEST_CASE("A quiet evaluation between signals restarts the alarm run", "[core][alarm]") {
  alarm_state a(rule_with(3, 2));
  // S S Q S S: no run of 3; the 6th (S) completes S S S at positions 4..6.
  const step_log log = feed(a, {hit, hit, miss, hit, hit, hit});
  CHECK(log.positions == std::vector<int>{6});
  CHECK(a.active());
  CHECK(a.signals_total() == 5);
}

TEST_CASE("The alarm clears exactly after c consecutive quiet evaluations", "[core][alarm]") {
  alarm_state a(rule_with(2, 3));
  // Raise at 2; Q Q then S breaks the quiet run; Q Q Q clears at position 8.
  const step_log log = feed(a, {hit, hit, miss, miss, hit, miss, miss, miss, miss});
  REQUIRE(log.positions == std::vector<int>{2, 8});
  CHECK(log.kinds[0] == alarm_event_kind::raised);
  CHECK(log.kinds[1] == alarm_event_kind::cleared);
  CHECK_FALSE(a.active());
  CHECK_FALSE(a.active_since().has_value());
  CHECK(a.consecutive_quiet() == 4);  // quiet while inactive only counts
  CHECK(a.cleared_total() == 1);
}

TEST_CASE("After clearing, a new alarm needs a new run of r signals", "[core][alarm]") {
  alarm_state a(rule_with(2, 1));
  // Raise at 2, clear at 3, S at 4 alone is not enough, raise again at 5.
  const step_log log = feed(a, {hit, hit, miss, hit, hit});
  CHECK(log.positions == std::vector<int>{2, 3, 5});
  CHECK(a.raised_total() == 2);
  CHECK(a.cleared_total() == 1);
}

TEST_CASE("Raise and clear counts of 0 act as 1 in the alarm rule", "[core][alarm]") {
  alarm_state a(rule_with(0, 0));
  CHECK(a.rule().raise_after == 1);
  CHECK(a.rule().clear_after == 1);
  const step_log log = feed(a, {hit, miss});
  CHECK(log.positions == std::vector<int>{1, 2});
}

TEST_CASE("Each alarm event carries the time, the p-value and the interval that caused it",
          "[core][alarm]") {
  alarm_state a(rule_with(1, 1));
  const auto raised = a.update(1767225600.5, 0.002, interval(0.25, 0.5, 0.75));
  REQUIRE(raised);
  CHECK(raised->kind == alarm_event_kind::raised);
  CHECK(raised->cause == alarm_cause::rule);
  CHECK(raised->time == 1767225600.5);
  CHECK(raised->has_p_value);
  CHECK(raised->p_value == 0.002);
  CHECK(raised->has_interval);
  CHECK(raised->lower == 0.25);
  CHECK(raised->estimate == 0.5);
  CHECK(raised->upper == 0.75);
  const auto cleared = a.update(1767225660.5, 0.3);
  REQUIRE(cleared);
  CHECK(cleared->kind == alarm_event_kind::cleared);
  CHECK_FALSE(cleared->has_interval);
  CHECK(cleared->p_value == 0.3);
  CHECK(plumbline::event_kind_name(alarm_event_kind::raised) == "raised");
  CHECK(plumbline::event_kind_name(alarm_event_kind::cleared) == "cleared");
  CHECK(plumbline::cause_name(alarm_cause::rule) == "rule");
  CHECK(plumbline::cause_name(alarm_cause::rebaseline) == "rebaseline");
}

TEST_CASE("With a tolerance only intervals wholly outside the band are alarm signals",
          "[core][alarm]") {
  alarm_rule r = rule_with(1, 1);
  r.tolerance = 0.5;  // band [-0.5, 0.5] about the null 0
  SECTION("an interval above the band signals") {
    CHECK(alarm_state::is_signal(r, 0.001, interval(0.625, 0.75, 1.0)));
  }
  SECTION("an interval below the band signals") {
    CHECK(alarm_state::is_signal(r, 0.001, interval(-1.25, -0.875, -0.625)));
  }
  SECTION("an interval straddling an edge does not") {
    CHECK_FALSE(alarm_state::is_signal(r, 0.001, interval(0.375, 0.75, 1.0)));
    CHECK_FALSE(alarm_state::is_signal(r, 0.001, interval(-1.0, -0.75, -0.375)));
  }
  SECTION("an interval inside the band does not") {
    CHECK_FALSE(alarm_state::is_signal(r, 0.001, interval(-0.25, 0.0, 0.25)));
  }
  SECTION("an interval touching an edge is not wholly outside") {
    CHECK_FALSE(alarm_state::is_signal(r, 0.001, interval(0.5, 0.75, 1.0)));
    CHECK_FALSE(alarm_state::is_signal(r, 0.001, interval(-1.0, -0.75, -0.5)));
    CHECK_FALSE(alarm_state::is_signal(r, 0.001, interval(0.5, 0.5, 0.5)));
  }
  SECTION("an interval wider than the band on both sides does not") {
    CHECK_FALSE(alarm_state::is_signal(r, 0.001, interval(-2.0, 0.0, 2.0)));
  }
  SECTION("an interval outside does not signal without a small p") {
    CHECK_FALSE(alarm_state::is_signal(r, 0.01, interval(0.625, 0.75, 1.0)));
  }
  SECTION("no interval is no signal") {
    CHECK_FALSE(alarm_state::is_signal(r, 0.001, std::nullopt));
  }
  SECTION("a NaN bound is no signal") {
    const double nan = std::numeric_limits<double>::quiet_NaN();
    CHECK_FALSE(alarm_state::is_signal(r, 0.001, interval(nan, 0.75, 1.0)));
  }
  SECTION("a tolerance of 0 makes the band the null point") {
    r.tolerance = 0.0;
    CHECK(alarm_state::is_signal(r, 0.001, interval(0.125, 0.25, 0.375)));
    CHECK_FALSE(alarm_state::is_signal(r, 0.001, interval(0.0, 0.25, 0.375)));
  }
}

TEST_CASE("An alarm band for sd-ratio is centred on the null value 1", "[core][alarm]") {
  alarm_rule r = rule_with(1, 1);
  r.tolerance = 0.25;                                                          // band [0.75, 1.25]
  CHECK(alarm_state::is_signal(r, 0.001, interval(1.375, 1.5, 1.75, 1.0)));    // wider spread
  CHECK(alarm_state::is_signal(r, 0.001, interval(0.5, 0.625, 0.6875, 1.0)));  // narrower
  CHECK_FALSE(alarm_state::is_signal(r, 0.001, interval(0.875, 1.125, 1.5, 1.0)));
  CHECK_FALSE(alarm_state::is_signal(r, 0.001, interval(0.8125, 1.0, 1.1875, 1.0)));
  // The same interval about the null 0 (band [-0.25, 0.25]) lies outside:
  // the null value, not the interval, decides.
  CHECK(alarm_state::is_signal(r, 0.001, interval(0.8125, 1.0, 1.1875, 0.0)));
}

TEST_CASE("A tolerance rule raises the alarm only on intervals outside the band", "[core][alarm]") {
  alarm_rule r = rule_with(2, 1);
  r.tolerance = 0.5;
  alarm_state a(r);
  CHECK_FALSE(a.update(1, 0.001, interval(0.75, 1.0, 1.25)));
  CHECK_FALSE(a.update(2, 0.001, interval(0.25, 1.0, 1.25)));  // straddles: quiet
  CHECK(a.consecutive_quiet() == 1);
  CHECK_FALSE(a.update(3, 0.001, std::nullopt));  // no interval: quiet
  CHECK_FALSE(a.update(4, 0.001, interval(0.75, 1.0, 1.25)));
  const auto e = a.update(5, 0.001, interval(0.625, 1.0, 1.25));
  REQUIRE(e);
  CHECK(e->kind == alarm_event_kind::raised);
  CHECK(e->lower == 0.625);
}

TEST_CASE("An evaluation without a p-value counts as quiet for the alarm", "[core][alarm]") {
  alarm_state a(rule_with(2, 2));
  CHECK_FALSE(a.update(1, hit));
  CHECK_FALSE(a.update_quiet(2));  // breaks the run
  CHECK(a.consecutive_signals() == 0);
  CHECK_FALSE(a.update(3, hit));
  REQUIRE(a.update(4, hit));
  CHECK_FALSE(a.update_quiet(5));
  const auto e = a.update_quiet(6);
  REQUIRE(e);
  CHECK(e->kind == alarm_event_kind::cleared);
  CHECK(e->cause == alarm_cause::rule);
  CHECK_FALSE(e->has_p_value);
  CHECK(e->p_value == 1);
  CHECK_FALSE(e->has_interval);
}

TEST_CASE("The alarm history keeps the newest events up to its limit and counts the dropped",
          "[core][alarm]") {
  alarm_rule r = rule_with(1, 1);
  r.history_limit = 3;
  alarm_state a(r);
  // Five raise/clear cycles: ten events at times 1..10.
  for (int t = 1; t <= 10; ++t)
    REQUIRE(a.update(t, t % 2 == 1 ? hit : miss));
  REQUIRE(a.history_size() == 3);
  CHECK(a.dropped_events() == 7);
  // Oldest first: times 8, 9, 10 (cleared, raised, cleared).
  CHECK(a.history(0).time == 8);
  CHECK(a.history(0).kind == alarm_event_kind::cleared);
  CHECK(a.history(1).time == 9);
  CHECK(a.history(1).kind == alarm_event_kind::raised);
  CHECK(a.history(2).time == 10);
  std::vector<alarm_event> copy;
  a.copy_history(copy);
  REQUIRE(copy.size() == 3);
  CHECK(copy[0].time == 8);
  CHECK(copy[2].time == 10);
  CHECK(a.raised_total() == 5);
  CHECK(a.cleared_total() == 5);
}

TEST_CASE("The alarm history is in order before it is full", "[core][alarm]") {
  alarm_rule r = rule_with(1, 1);
  r.history_limit = 4;
  alarm_state a(r);
  for (int t = 1; t <= 3; ++t)
    REQUIRE(a.update(t, t % 2 == 1 ? hit : miss));
  REQUIRE(a.history_size() == 3);
  CHECK(a.dropped_events() == 0);
  CHECK(a.history(0).time == 1);
  CHECK(a.history(2).time == 3);
}

TEST_CASE("An alarm history limit of 0 keeps no event and counts every one as dropped",
          "[core][alarm]") {
  alarm_rule r = rule_with(1, 1);
  r.history_limit = 0;
  alarm_state a(r);
  REQUIRE(a.update(1, hit));
  REQUIRE(a.update(2, miss));
  CHECK(a.history_size() == 0);
  CHECK(a.dropped_events() == 2);
}

TEST_CASE("Rebaseline clears an active alarm with cause rebaseline and resets the runs",
          "[core][alarm]") {
  alarm_state a(rule_with(2, 3));
  feed(a, {hit, hit, hit});
  REQUIRE(a.active());
  const auto e = a.rebaseline(100);
  REQUIRE(e);
  CHECK(e->kind == alarm_event_kind::cleared);
  CHECK(e->cause == alarm_cause::rebaseline);
  CHECK(e->time == 100);
  CHECK_FALSE(e->has_p_value);
  CHECK_FALSE(e->has_interval);
  CHECK_FALSE(a.active());
  CHECK(a.consecutive_signals() == 0);
  CHECK(a.consecutive_quiet() == 0);
  CHECK(a.cleared_total() == 1);
  REQUIRE(a.history_size() == 2);
  CHECK(a.history(1).cause == alarm_cause::rebaseline);
  // A new run starts from nothing: one signal is not yet an alarm.
  CHECK_FALSE(a.update(101, hit));
  CHECK(a.update(102, hit));
}

TEST_CASE("Rebaseline of an inactive alarm logs nothing but resets the runs", "[core][alarm]") {
  alarm_state a(rule_with(2, 3));
  CHECK_FALSE(a.update(1, hit));
  CHECK(a.consecutive_signals() == 1);
  CHECK_FALSE(a.rebaseline(2));
  CHECK(a.consecutive_signals() == 0);
  CHECK(a.history_size() == 0);
  // Without the reset, this signal would complete a run of 2.
  CHECK_FALSE(a.update(3, hit));
  CHECK_FALSE(a.active());
}
