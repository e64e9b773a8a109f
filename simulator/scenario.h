// scenario.h: an invented production line, read from a TOML scenario file.
//
// Purpose. A scenario lists sensors (each a measurement stream: nominal
// value, spread, distribution, AR(1) autocorrelation, sampling rate,
// instrument resolution) and faults on a schedule (step, ramp, spread,
// shape, stuck, spikes, dropout). generate.h turns it into samples;
// simulator/README.md documents every key with its default and bounds, and
// the key table below is the one place those are declared.
//
// Errors. load_scenario_file() collects every problem as
// config::config_error ("FILE:LINE:COLUMN: message", the daemon's format,
// config/load.h), sorted by position; a TOML syntax error is reported alone.
// When there are errors, `scenario` is empty.
//
// Limits. At most max_sensors sensors (after `count` copies) and max_faults
// faults; files larger than config::max_config_bytes are refused.
//
// Thread-safety: pure functions, except that load_scenario_file reads a file.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "config/load.h"

namespace plumbline::sim {

inline constexpr std::size_t max_sensors = 100'000;
inline constexpr std::size_t max_faults = 10'000;
inline constexpr uint64_t max_count = 100'000;
// 2026-01-01T00:00:00Z: the default first sample time.
inline constexpr double default_epoch = 1767225600.0;

enum class distribution_kind { normal, lognormal, student_t, uniform, mixture };
enum class fault_kind { step, ramp, spread, shape, stuck, spikes, dropout };

std::string_view distribution_name(distribution_kind d);
std::string_view fault_name(fault_kind k);

struct sensor_spec {
  std::string stream;  // [plant.]line.station.name: the name sent to the daemon
  std::string unit;
  double nominal = 0;
  double spread = 1;  // standard deviation of the in-control values
  distribution_kind distribution = distribution_kind::normal;
  double sigma_log = 0.5;            // lognormal: sd of log(X)
  double df = 5;                     // student-t: degrees of freedom (> 2)
  double mixture_weight = 0.1;       // mixture: weight of the second component
  double mixture_offset = 3;         // mixture: its mean, in sds of the first
  double mixture_ratio = 1;          // mixture: its sd over the first's
  double ar1 = 0;                    // lag-1 AR coefficient, (-1, 1)
  double rate_hz = 1;                // samples per second
  double resolution = 0;             // instrument step; 0 = unrounded
  uint32_t resolution_decimals = 0;  // decimals of `resolution` (exact printing)
  int64_t resolution_units = 0;      // resolution * 10^decimals, an integer
};

struct fault_spec {
  std::size_t sensor = 0;  // index into scenario::sensors
  fault_kind kind = fault_kind::step;
  double start = 0;  // seconds after the epoch; active on [start, end)
  double end = 0;
  double size = 0;              // per kind, see README
  double probability = 0.01;    // shape and spikes: per-sample probability
  std::optional<double> value;  // stuck: the constant (else the first reading)
};

struct scenario {
  std::string source;  // the file, for messages
  std::string name;
  std::string plant;
  uint64_t seed = 1;
  double epoch = default_epoch;
  double duration = 600;  // seconds
  double grace = 60;      // seconds after a fault's end in which a raise still detects it
  std::vector<sensor_spec> sensors;
  std::vector<fault_spec> faults;
};

struct scenario_result {
  std::optional<scenario> value;  // set exactly when errors is empty
  std::vector<config::config_error> errors;
};

scenario_result load_scenario_file(const std::string& path);
scenario_result load_scenario_string(std::string_view text, std::string_view source_name);

// One row of the key table, for documentation and `plumbline-sim keys`.
struct scenario_key {
  std::string_view section;  // "scenario", "sensor", "fault"
  std::string_view key;
  std::string_view type;
  std::string_view default_value;  // TOML text, or "(required)"
  std::string_view bounds;
  std::string_view help;
};
const std::vector<scenario_key>& scenario_keys();

}  // namespace plumbline::sim
