// truth.h: the ground truth of a simulated run (DIR/truth.json).
//
// Purpose. `write` and `send --truth FILE` record what was simulated: every
// stream with its rate, and every fault with its stream, kind, start, end and
// size. `score` reads it back and compares it with the daemon's alarm
// history. simulator/README.md describes the JSON members.
//
// Clock. The daemon stamps alarm events with its wall clock at the end of the
// evaluation, not with sample times. So `send` adds `clock`: pairs
// [wall Unix seconds, simulated offset of the newest record sent], about four
// a second (at most max_clock_points; older points are thinned, every other
// one dropped, when the limit is reached). score maps an event's wall time
// to simulated time by linear interpolation between them. Without a clock
// (`write`, hand-made histories), event times are simulated Unix times.
//
// Thread-safety: plain values and pure functions (read_truth reads a file).
#pragma once

#include <cstdint>
#include <nlohmann/json.hpp>
#include <string>
#include <utility>
#include <vector>

#include "core/status.h"
#include "simulator/scenario.h"

namespace plumbline::sim {

inline constexpr std::size_t max_clock_points = 100'000;
inline constexpr std::size_t max_truth_bytes = std::size_t{256} << 20;

struct truth_stream {
  sensor_spec spec;  // stream, unit, rate_hz (the rest is not stored)
};

struct truth_fault {
  std::string stream;
  fault_kind kind = fault_kind::step;
  double start = 0, end = 0;  // offsets: seconds after the epoch
  double size = 0;
  uint64_t first_sample = 0;  // first sample index with offset >= start
  uint64_t end_sample = 0;    // first sample index with offset >= end (clipped to the run)
};

struct truth {
  std::string scenario_name;
  std::string source;
  uint64_t seed = 0;
  double epoch = 0;
  double duration = 0;
  double grace = 0;
  std::vector<truth_stream> streams;
  std::vector<truth_fault> faults;
  std::vector<std::pair<double, double>> clock;  // (wall Unix s, simulated offset)

  // The simulated offset of a daemon event stamped `time` (see Clock above).
  double offset_of(double time) const;
};

truth make_truth(const scenario& s, uint64_t seed, double duration);
// The truth of a run that stopped early, after `sent` simulated seconds (the
// offset of the newest record sent): the duration becomes `sent` (when
// shorter), faults that had not begun by then are left out, and the others'
// end samples are clipped to it, so that score counts only what was sent.
// The clock is kept. REQUIRES: t = make_truth(s, ...) (plus clock points).
void clip_truth(truth& t, const scenario& s, double sent);
nlohmann::json truth_json(const truth& t);
expected<truth> parse_truth(const nlohmann::json& j, const std::string& source);
// `path` is a truth file, or a directory holding truth.json.
expected<truth> read_truth(const std::string& path);
// Writes atomically enough for scripts: to PATH.tmp, then renames.
expected<bool> write_truth(const truth& t, const std::string& path);

// Appends a clock point, thinning when max_clock_points is reached.
void add_clock_point(truth& t, double wall, double offset);

}  // namespace plumbline::sim
