// monitor_settings.h: what one stream's monitor is told to do.
//
// Purpose. A stream group in the daemon's configuration (config/) resolves to
// one `monitor_settings`; `stream_monitor` (monitor.h) follows it. The struct
// is plain data with the daemon's built-in defaults as member initialisers;
// validation (bounds, combinations) is config/'s job, and the monitor
// REQUIRES settings that passed it.
//
// Thread-safety: plain value type.
#pragma once

#include <cstddef>
#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "core/bootstrap.h"
#include "core/permutation.h"
#include "core/statistic.h"

namespace plumbline {

// Where the reference window comes from.
//   baseline  the first `reference_size` samples after start or after a
//             rebaseline, then frozen.
//   lagged    the `reference_size` samples just before the recent window,
//             sliding with it (a sample leaving the recent window enters the
//             reference window).
//   file      loaded from a CSV file at start, frozen; every sample goes to
//             the recent window.
enum class reference_policy { baseline, lagged, file };

// "baseline", "lagged", "file" (the configuration's words).
std::string_view policy_name(reference_policy p);

// The alarm rule (alarm.h). A "signal" is an evaluation with p < alpha and,
// when a practical tolerance d is set, a drift interval wholly outside
// [null - d, null + d], null being 0 for differences and 1 for sd-ratio.
struct alarm_rule {
  double alpha = 0.005;
  uint32_t raise_after = 2;   // r consecutive signals raise the alarm
  uint32_t clear_after = 3;   // c consecutive quiet evaluations clear it
  std::optional<double> tolerance;
  std::size_t history_limit = 50;  // raise/clear events kept per stream
};

struct monitor_settings {
  reference_policy policy = reference_policy::baseline;
  std::size_t reference_size = 500;
  std::size_t recent_size = 100;
  // Values per sample; 0 lets the stream's first record decide.
  uint32_t dimension = 0;
  // Evaluate after this many new samples (0 = never by count).
  uint64_t every_samples = 50;
  // Evaluate at most this often by time as well, in seconds (0 = never by time).
  double every_seconds = 0;
  // Tests run at each evaluation; the first one drives the alarm. For a
  // stream of dimension >= 2 only multivariate tests apply (energy is used
  // when none is listed).
  std::vector<test_kind> tests = {test_kind::ad};
  // Resampling budget of the tests: resamples, exact, stop_after and
  // block_length are used; `test` is overwritten per test.
  permutation_options permutation = [] {
    permutation_options o;
    o.resamples = 999;
    o.stop_after = 20;
    return o;
  }();
  // The drift interval, univariate streams only; absent = none.
  std::optional<interval_options> interval = [] {
    interval_options o;
    o.resamples = 999;
    return o;
  }();
  alarm_rule alarm;
};

}  // namespace plumbline
