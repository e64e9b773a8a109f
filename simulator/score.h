// score.h: how quickly and how often the daemon alarmed, against the truth.
//
// Rules (simulator/README.md, "Scoring", says the same in prose). All times
// are simulated offsets (truth::offset_of maps the daemon's event times).
//   - Only `raised` events of the alarm history count; clears are ignored.
//   - A fault on stream S, active on [start, end), is *detected* by the first
//     raise on S at an offset in [start, end + grace]. Its delay is that
//     offset minus start, in seconds, and in samples: the samples of S with
//     offsets in [start, raise). No such raise: a *miss*. Dropout faults send
//     no data, so the daemon cannot alarm on them: they are listed as not
//     scored.
//   - A raise on S at an offset outside every [start, end + grace] of S's
//     faults is a *false alarm*.
//   - In-control time of S: [0, duration) minus the union of its faults'
//     [start, end + grace), clipped to the run. In-control stream-hours sum it
//     over the streams; in-control samples count S's samples in it. False
//     alarms per stream-hour and per 10,000 samples divide by these.
//
// Thread-safety: pure functions.
#pragma once

#include <cstdint>
#include <map>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "core/status.h"
#include "simulator/truth.h"

namespace plumbline::sim {

// Warnings kept in a report; one more line counts the rest.
inline constexpr std::size_t max_warnings = 100;

struct stream_alarms {
  std::vector<double> raises;  // event times, as the daemon stamped them
  uint64_t dropped = 0;        // history_dropped: events the daemon no longer holds
  bool known = true;           // false: the daemon did not know the stream
};
using alarm_histories = std::map<std::string, stream_alarms>;

// From JSON: an object mapping stream names to their GET /api/streams/{stream}
// answers, or an array of such answers (each names itself in "name").
expected<alarm_histories> parse_alarms(const nlohmann::json& j, const std::string& source);
// One stream's answer (its alarm.history).
expected<stream_alarms> parse_stream_alarms(const nlohmann::json& detail);

struct fault_result {
  truth_fault fault;
  bool scored = true;  // false for dropouts
  bool detected = false;
  double raised_offset = 0;
  double delay_seconds = 0;
  uint64_t delay_samples = 0;
};

struct stream_result {
  std::string stream;
  uint64_t raises = 0;
  uint64_t false_alarms = 0;
  double in_control_seconds = 0;
  uint64_t in_control_samples = 0;
};

struct score_report {
  double grace = 0;
  std::vector<fault_result> faults;
  std::vector<stream_result> streams;
  uint64_t false_alarms = 0;
  double in_control_stream_hours = 0;
  uint64_t in_control_samples = 0;
  std::vector<std::string> warnings;

  double false_alarms_per_stream_hour() const {
    return in_control_stream_hours > 0 ? false_alarms / in_control_stream_hours : 0;
  }
  double false_alarms_per_10000_samples() const {
    return in_control_samples > 0 ? 1e4 * static_cast<double>(false_alarms) / in_control_samples
                                  : 0;
  }
};

score_report score(const truth& t, const alarm_histories& alarms, double grace);

nlohmann::json score_json(const score_report& r);
std::string score_table(const score_report& r);

}  // namespace plumbline::sim
