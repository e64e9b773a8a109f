// generate.h: the samples of a scenario, reproducible bit for bit from a seed.
//
// Purpose. sensor_stream produces one sensor's samples, one per call, in
// order; timeline merges every sensor of a scenario into one time-ordered
// sequence (what `send` sends). Both are pure functions of (scenario, seed).
//
// Model. Sample k of a sensor lies at offset t_k = k / rate_hz seconds after
// the epoch (computed as one double division, so every caller agrees on the
// instants). Its in-control value is nominal + spread * x_k, where
//   x_0 = e_0,  x_k = ar1 * x_{k-1} + sqrt(1 - ar1^2) * e_k,
// and e_k are independent innovations of mean 0 and variance 1 from the
// sensor's distribution (normal; lognormal, Student-t, uniform or a
// two-component normal mixture, each shifted and scaled to mean 0, variance
// 1). So every sensor's in-control values have mean `nominal`, standard
// deviation `spread` and lag-1 autocorrelation `ar1`, whatever the
// distribution. (With ar1 != 0 and non-normal innovations the marginal shape
// is a blend of the innovation's shape; its first two moments are exact.)
// Faults active at t_k (start <= t_k < end) then apply in file order (see
// simulator/README.md), and the value is rounded to the nearest integer
// multiple of the resolution (ties away from zero).
//
// Randomness. Each sensor's noise comes from its own plumbline::rng seeded
// with stream_seed(seed, stream name) (core/monitor.h); each fault that
// draws (shape, spikes) has its own generator seeded with
// stream_seed(seed, stream name + "#fault" + its index in the file). So a
// fault changes nothing outside its own interval, and adding a sensor
// changes no other sensor's values. Normal draws are normal_quantile(u) of
// uniforms u in (0, 1) (core/special.h); Student-t draws invert its CDF
// through beta_quantile. No std:: distribution is used.
//
// Thread-safety: none; one owner per object.
#pragma once

#include <cstdint>
#include <memory>
#include <queue>
#include <string>
#include <vector>

#include "core/rng.h"
#include "simulator/scenario.h"

namespace plumbline::sim {

// t_k = k / rate_hz.
inline double sample_offset(const sensor_spec& s, uint64_t k) {
  return static_cast<double>(k) / s.rate_hz;
}
// The first k with sample_offset(s, k) >= t. REQUIRES: 0 <= t <= 1e12.
uint64_t first_sample_at_or_after(const sensor_spec& s, double t);
// Samples with offsets in [a, b) (0 when b <= a).
uint64_t samples_between(const sensor_spec& s, double a, double b);

struct sample {
  uint64_t index = 0;
  double offset = 0;    // seconds after the epoch
  bool present = true;  // false while a dropout fault is active
  double value = 0;     // after faults and rounding
  int64_t units = 0;    // value / resolution, when the sensor has a resolution
};

class sensor_stream {
 public:
  sensor_stream(const scenario& s, std::size_t sensor, uint64_t seed);
  // The next sample (index 0, 1, 2, ...).
  sample next();
  const sensor_spec& spec() const { return *spec_; }

 private:
  struct active_fault {
    const fault_spec* spec;
    rng gen;
    bool have_stuck = false;
    double stuck = 0;
  };
  double innovation();
  double normal();

  const sensor_spec* spec_;
  rng gen_;
  std::vector<active_fault> faults_;
  uint64_t k_ = 0;
  double x_ = 0;
  // Constants of the standardised innovation.
  double shift_ = 0, scale_ = 1, ar_keep_ = 0;
};

// The value of `smp` as text: exactly units * resolution with the
// resolution's decimals, or the shortest round-trip form when the sensor has
// no resolution. Returns the text length; `buf` needs 32 bytes.
std::size_t format_value(const sensor_spec& s, const sample& smp, char* buf);
// Unix time epoch + offset with 6 decimals. `buf` needs 32 bytes.
std::size_t format_time(double epoch, double offset, char* buf);
// Appends "STREAM,TIME,VALUE\n" (daemon/wire.h) for a present sample.
void append_record(std::string& out, const sensor_spec& s, double epoch, const sample& smp);

// Every sensor's samples with offsets in [0, duration), ordered by offset,
// ties broken by the sensor's position in the scenario.
class timeline {
 public:
  timeline(const scenario& s, uint64_t seed, double duration);
  // The next sample and its sensor; false when all are done. Dropped samples
  // (dropout) are returned too, with present == false.
  bool next(std::size_t& sensor, sample& out);

 private:
  using entry = std::pair<double, std::size_t>;
  std::vector<std::unique_ptr<sensor_stream>> streams_;
  std::vector<sample> pending_;
  std::priority_queue<entry, std::vector<entry>, std::greater<entry>> queue_;
  double duration_;
};

}  // namespace plumbline::sim
