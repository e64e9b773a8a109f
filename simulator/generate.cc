// generate.cc: sensor noise, faults and rounding. See generate.h.
//
// Standardised innovations (mean 0, variance 1), with z ~ N(0, 1) and
// u ~ U(0, 1):
//   normal     z
//   lognormal  (exp(s z) - m) / sqrt(v), m = exp(s^2 / 2),
//              v = (exp(s^2) - 1) exp(s^2)        (moments of the lognormal)
//   student-t  T sqrt((df - 2) / df), T by inversion: with p = min(u, 1 - u),
//              x = I^{-1}_{2p}(df / 2, 1 / 2) and |T| = sqrt(df (1 - x) / x),
//              negative when u < 1/2 (P(|T| > t) = I_{df/(df+t^2)}(df/2, 1/2))
//   uniform    sqrt(3) (2u - 1)
//   mixture    y = z with probability 1 - w, offset + ratio z with probability
//              w; then (y - w offset) / sqrt((1 - w) + w ratio^2 + w (1 - w) offset^2)
// The tests check these moments against SciPy (tests/unit/sim_generate_test.cc).
#include "simulator/generate.h"

#include <charconv>
#include <cmath>
#include <cstdio>
#include <cstring>

#include "core/monitor.h"
#include "core/special.h"

namespace plumbline::sim {

uint64_t first_sample_at_or_after(const sensor_spec& s, double t) {
  if (t <= 0) return 0;
  double guess = std::floor(t * s.rate_hz);
  uint64_t k = guess > 2 ? static_cast<uint64_t>(guess) - 2 : 0;
  while (sample_offset(s, k) < t)
    ++k;
  while (k > 0 && sample_offset(s, k - 1) >= t)
    --k;
  return k;
}

uint64_t samples_between(const sensor_spec& s, double a, double b) {
  if (b <= a) return 0;
  const uint64_t lo = first_sample_at_or_after(s, std::max(a, 0.0));
  const uint64_t hi = first_sample_at_or_after(s, std::max(b, 0.0));
  return hi > lo ? hi - lo : 0;
}

sensor_stream::sensor_stream(const scenario& s, std::size_t sensor, uint64_t seed)
    : spec_(&s.sensors[sensor]), gen_(stream_seed(seed, s.sensors[sensor].stream)) {
  for (std::size_t i = 0; i < s.faults.size(); ++i) {
    if (s.faults[i].sensor != sensor) continue;
    faults_.push_back(
        {&s.faults[i], rng(stream_seed(seed, spec_->stream + "#fault" + std::to_string(i)))});
  }
  ar_keep_ = std::sqrt(1 - spec_->ar1 * spec_->ar1);
  switch (spec_->distribution) {
    case distribution_kind::lognormal: {
      const double s2 = spec_->sigma_log * spec_->sigma_log;
      shift_ = std::exp(s2 / 2);
      scale_ = 1 / std::sqrt(std::expm1(s2) * std::exp(s2));
      break;
    }
    case distribution_kind::student_t:
      scale_ = std::sqrt((spec_->df - 2) / spec_->df);
      break;
    case distribution_kind::mixture: {
      const double w = spec_->mixture_weight, d = spec_->mixture_offset, r = spec_->mixture_ratio;
      shift_ = w * d;
      scale_ = 1 / std::sqrt((1 - w) + w * r * r + w * (1 - w) * d * d);
      break;
    }
    default:
      break;
  }
}

double sensor_stream::normal() {
  double u;
  do
    u = gen_.next_double();
  while (u == 0);
  return normal_quantile(u);
}

double sensor_stream::innovation() {
  switch (spec_->distribution) {
    case distribution_kind::normal:
      return normal();
    case distribution_kind::lognormal:
      return (std::exp(spec_->sigma_log * normal()) - shift_) * scale_;
    case distribution_kind::student_t:
      for (;;) {
        double u;
        do
          u = gen_.next_double();
        while (u == 0);
        const double p = u < 0.5 ? u : 1 - u;
        const double x = beta_quantile(2 * p, spec_->df / 2, 0.5);
        if (!(x > 0)) continue;  // beyond double range: draw again
        const double t = std::sqrt(spec_->df * (1 - x) / x);
        return (u < 0.5 ? -t : t) * scale_;
      }
    case distribution_kind::uniform:
      return std::sqrt(3.0) * (2 * gen_.next_double() - 1);
    case distribution_kind::mixture: {
      const bool second = gen_.next_double() < spec_->mixture_weight;
      const double z = normal();
      const double y = second ? spec_->mixture_offset + spec_->mixture_ratio * z : z;
      return (y - shift_) * scale_;
    }
  }
  return 0;
}

sample sensor_stream::next() {
  sample out;
  out.index = k_;
  out.offset = sample_offset(*spec_, k_);
  const double e = innovation();
  x_ = k_ == 0 ? e : spec_->ar1 * x_ + ar_keep_ * e;
  ++k_;
  const double nominal = spec_->nominal;
  double v = nominal + spec_->spread * x_;
  const double t = out.offset;
  for (active_fault& f : faults_) {
    const fault_spec& fs = *f.spec;
    if (t < fs.start || t >= fs.end) continue;
    switch (fs.kind) {
      case fault_kind::step:
        v += fs.size;
        break;
      case fault_kind::ramp:
        v += fs.size * ((t - fs.start) / (fs.end - fs.start));
        break;
      case fault_kind::spread:
        v = nominal + (v - nominal) * fs.size;
        break;
      case fault_kind::shape:
        if (f.gen.next_double() < fs.probability) v += fs.size;
        break;
      case fault_kind::spikes:
        if (f.gen.next_double() < fs.probability)
          v += f.gen.next_double() < 0.5 ? -fs.size : fs.size;
        break;
      case fault_kind::stuck:
        if (!f.have_stuck) {
          f.stuck = fs.value ? *fs.value : v;
          f.have_stuck = true;
        }
        v = f.stuck;
        break;
      case fault_kind::dropout:
        out.present = false;
        break;
    }
  }
  if (spec_->resolution_units > 0) {
    // units = round(v / resolution), computed as v * 10^d / m for the
    // resolution m / 10^d, so decimal steps divide exactly.
    const double scaled = v * std::pow(10.0, spec_->resolution_decimals) /
                          static_cast<double>(spec_->resolution_units);
    // Far beyond any configured value (the loader keeps nominal and spread
    // within 2^53 steps); the clamp only keeps units * m within int64.
    const double limit = 4611686018427387904.0 / static_cast<double>(spec_->resolution_units);
    const double r = std::round(std::fmax(-limit, std::fmin(limit, scaled)));
    out.units = static_cast<int64_t>(r);
    v = r * spec_->resolution;
  }
  out.value = v;
  return out;
}

std::size_t format_value(const sensor_spec& s, const sample& smp, char* buf) {
  if (s.resolution_units == 0) {
    const auto r = std::to_chars(buf, buf + 32, smp.value);
    return static_cast<std::size_t>(r.ptr - buf);
  }
  // n = units * m is the value times 10^d, exactly (next() keeps |n| below
  // 2^62).
  const int64_t n = smp.units * s.resolution_units;
  const bool negative = n < 0;
  uint64_t a = negative ? static_cast<uint64_t>(-n) : static_cast<uint64_t>(n);
  char digits[48];
  int len = 0;
  do {
    digits[len++] = static_cast<char>('0' + static_cast<int>(a % 10));
    a /= 10;
  } while (a != 0);
  const int d = static_cast<int>(s.resolution_decimals);
  while (len <= d)
    digits[len++] = '0';
  std::size_t p = 0;
  if (negative) buf[p++] = '-';
  for (int i = len - 1; i >= 0; --i) {
    buf[p++] = digits[i];
    if (i == d && d > 0) buf[p++] = '.';
  }
  return p;
}

std::size_t format_time(double epoch, double offset, char* buf) {
  const int n = std::snprintf(buf, 32, "%.6f", epoch + offset);
  return n > 0 ? static_cast<std::size_t>(n) : 0;
}

void append_record(std::string& out, const sensor_spec& s, double epoch, const sample& smp) {
  char buf[32];
  out += s.stream;
  out += ',';
  out.append(buf, format_time(epoch, smp.offset, buf));
  out += ',';
  out.append(buf, format_value(s, smp, buf));
  out += '\n';
}

timeline::timeline(const scenario& s, uint64_t seed, double duration) : duration_(duration) {
  streams_.reserve(s.sensors.size());
  pending_.resize(s.sensors.size());
  for (std::size_t i = 0; i < s.sensors.size(); ++i) {
    streams_.push_back(std::make_unique<sensor_stream>(s, i, seed));
    pending_[i] = streams_[i]->next();
    if (pending_[i].offset < duration_) queue_.push({pending_[i].offset, i});
  }
}

bool timeline::next(std::size_t& sensor, sample& out) {
  if (queue_.empty()) return false;
  sensor = queue_.top().second;
  queue_.pop();
  out = pending_[sensor];
  pending_[sensor] = streams_[sensor]->next();
  if (pending_[sensor].offset < duration_) queue_.push({pending_[sensor].offset, sensor});
  return true;
}

}  // namespace plumbline::sim
