// state_codec.cc: see state_codec.h.
//
// Design note. Decoding runs in two phases: parse into plain staging structs
// (every count checked against the bytes left before anything is reserved,
// every value checked against the invariants of window.h and alarm.h), then
// commit into the monitor. Only the commit touches the monitor, and it cannot
// fail, so a bad input leaves the monitor as it was.
//
// A window restored at its saved capacity gets its running sums, eviction
// count and push count back exactly (stored oldest first, so head = 0), which
// makes its statistics bit-identical to the saved window's. At another
// capacity it is refilled with the newest values that fit, which rebuilds the
// sums as pushes do.
#include "core/state_codec.h"

#include <bit>
#include <cmath>
#include <cstring>
#include <utility>
#include <vector>

namespace plumbline {

namespace {

constexpr std::size_t moment_doubles = 6;  // anchor, s1.sum, s1.comp, s2.sum, s2.comp, mass
constexpr std::size_t event_bytes = 4 + 5 * 8;
constexpr uint32_t max_state_dimension = 4096;

struct window_stage {
  uint64_t capacity = 0, size = 0, pushes = 0, evictions = 0;
  std::vector<window_detail::running_moments> moments;  // one per column
  std::vector<double> values;                           // size x dim, oldest first
};

struct alarm_stage {
  bool active = false;
  double active_since = 0;
  uint64_t signals_run = 0, quiet_run = 0, raised = 0, cleared = 0, evaluations = 0, signals = 0;
  uint64_t dropped = 0;
  std::vector<alarm_event> events;
};

void put_moments(state_codec::writer& w, const window_detail::running_moments& m) {
  w.f64(m.anchor);
  w.f64(m.s1.sum);
  w.f64(m.s1.comp);
  w.f64(m.s2.sum);
  w.f64(m.s2.comp);
  w.f64(m.mass);
}

bool get_moments(state_codec::reader& r, window_detail::running_moments& m) {
  double v[moment_doubles];
  for (double& x : v)
    if (!r.f64(x)) return false;
  // The sums may be infinite or NaN: finite values whose squares overflow
  // make them so in a running daemon too (window.h), and such a state must
  // survive a restart like any other.
  m.anchor = v[0];
  m.s1.sum = v[1];
  m.s1.comp = v[2];
  m.s2.sum = v[3];
  m.s2.comp = v[4];
  m.mass = v[5];
  return true;
}

bool get_window(state_codec::reader& r, std::size_t dim, window_stage& s) {
  if (!r.u64(s.capacity) || !r.u64(s.size) || !r.u64(s.pushes) || !r.u64(s.evictions))
    return false;
  if (s.capacity < 1) return r.fail("a window has capacity 0");
  if (s.size > s.capacity) return r.fail("a window holds more samples than its capacity");
  if (s.pushes < s.size) return r.fail("a window holds more samples than were pushed");
  if (s.evictions >= s.capacity) return r.fail("a window's eviction count is out of range");
  if (r.left() / (moment_doubles * 8) < dim) return r.fail("truncated window sums");
  s.moments.resize(dim);
  for (auto& m : s.moments)
    if (!get_moments(r, m)) return false;
  if (s.size > r.left() / 8 / dim) return r.fail("truncated window values");
  const std::size_t n = static_cast<std::size_t>(s.size) * dim;
  s.values.resize(n);
  for (double& x : s.values) {
    if (!r.f64(x)) return false;
    if (!std::isfinite(x)) return r.fail("a window holds a value that is NaN or infinite");
  }
  return true;
}

bool get_alarm(state_codec::reader& r, alarm_stage& a) {
  uint8_t active = 0;
  uint32_t count = 0;
  if (!r.u8(active) || !r.f64(a.active_since) || !r.u64(a.signals_run) || !r.u64(a.quiet_run) ||
      !r.u64(a.raised) || !r.u64(a.cleared) || !r.u64(a.evaluations) || !r.u64(a.signals) ||
      !r.u64(a.dropped) || !r.u32(count))
    return false;
  if (active > 1) return r.fail("the alarm's active flag is neither 0 nor 1");
  a.active = active == 1;
  if (a.signals_run != 0 && a.quiet_run != 0)
    return r.fail("the alarm has a run of signals and a run of quiet evaluations at once");
  if (count > r.left() / event_bytes) return r.fail("truncated alarm history");
  a.events.resize(count);
  for (alarm_event& e : a.events) {
    uint8_t kind = 0, cause = 0, has_p = 0, has_interval = 0;
    if (!r.u8(kind) || !r.u8(cause) || !r.u8(has_p) || !r.u8(has_interval) || !r.f64(e.time) ||
        !r.f64(e.p_value) || !r.f64(e.lower) || !r.f64(e.estimate) || !r.f64(e.upper))
      return false;
    if (kind > 1 || cause > 1 || has_p > 1 || has_interval > 1)
      return r.fail("an alarm event has an unknown kind, cause or flag");
    e.kind = static_cast<alarm_event_kind>(kind);
    e.cause = static_cast<alarm_cause>(cause);
    e.has_p_value = has_p == 1;
    e.has_interval = has_interval == 1;
  }
  return true;
}

struct monitor_stage {
  uint8_t policy = 0;
  uint32_t dim = 0;
  uint64_t counters[8] = {};
  window_stage ref, rec;
  alarm_stage alarm;
};

bool parse(state_codec::reader& r, monitor_stage& st) {
  if (!r.u8(st.policy) || !r.u32(st.dim)) return false;
  if (st.policy > 2) return r.fail("unknown reference policy " + std::to_string(st.policy));
  if (st.dim < 1 || st.dim > max_state_dimension)
    return r.fail("dimension " + std::to_string(st.dim) + " is out of range");
  for (uint64_t& x : st.counters)
    if (!r.u64(x)) return false;
  if (!get_window(r, st.dim, st.ref) || !get_window(r, st.dim, st.rec) || !get_alarm(r, st.alarm))
    return false;
  if (st.counters[1] > st.counters[0])
    return r.fail("more samples since the last evaluation than in total");
  return true;
}

}  // namespace

// Private access for the codec (declared a friend by the classes it saves).
struct state_codec_access {
  static void put(state_codec::writer& w, const sample_window& s) {
    w.u64(s.capacity());
    w.u64(s.size());
    w.u64(s.pushes_);
    w.u64(s.evictions_);
    put_moments(w, s.moments_);
    for (std::size_t i = 0; i < s.size(); ++i)
      w.f64(s[i]);
  }
  static void put(state_codec::writer& w, const row_window& s) {
    w.u64(s.capacity());
    w.u64(s.size());
    w.u64(s.pushes_);
    w.u64(s.evictions_);
    for (const auto& m : s.moments_)
      put_moments(w, m);
    for (std::size_t i = 0; i < s.size(); ++i) {
      const auto row = s.row(i);
      for (Eigen::Index j = 0; j < row.size(); ++j)
        w.f64(row[j]);
    }
  }

  static void commit(sample_window& w, const window_stage& s) {
    if (s.capacity == w.capacity()) {
      std::fill(w.buf_.begin(), w.buf_.end(), 0.0);
      std::copy(s.values.begin(), s.values.end(), w.buf_.begin());
      w.head_ = 0;
      w.size_ = static_cast<std::size_t>(s.size);
      w.pushes_ = s.pushes;
      w.evictions_ = static_cast<std::size_t>(s.evictions);
      w.moments_ = s.moments.front();
      if (w.moments_.needs_rebuild(w.size_)) w.rebuild();
      return;
    }
    w.clear();
    const std::size_t keep = std::min<std::size_t>(s.values.size(), w.capacity());
    for (std::size_t i = s.values.size() - keep; i < s.values.size(); ++i)
      w.push(s.values[i]);
    w.pushes_ = s.pushes;
  }
  static void commit(row_window& w, const window_stage& s) {
    const std::size_t dim = w.dim();
    if (s.capacity == w.capacity()) {
      std::fill(w.buf_.begin(), w.buf_.end(), 0.0);
      std::copy(s.values.begin(), s.values.end(), w.buf_.begin());
      w.head_ = 0;
      w.size_ = static_cast<std::size_t>(s.size);
      w.pushes_ = s.pushes;
      w.evictions_ = static_cast<std::size_t>(s.evictions);
      w.moments_ = s.moments;
      bool pending = false;
      for (const auto& m : w.moments_)
        pending = pending || m.needs_rebuild(w.size_);
      if (pending) w.rebuild();
      return;
    }
    w.clear();
    const std::size_t rows = s.values.size() / dim;
    const std::size_t keep = std::min(rows, w.capacity());
    for (std::size_t i = rows - keep; i < rows; ++i)
      w.push(std::span<const double>(s.values.data() + i * dim, dim));
    w.pushes_ = s.pushes;
  }

  static void put(state_codec::writer& w, const alarm_state& a) {
    w.u8(a.active_ ? 1 : 0);
    w.f64(a.active_since_);
    w.u64(a.signals_run_);
    w.u64(a.quiet_run_);
    w.u64(a.raised_total_);
    w.u64(a.cleared_total_);
    w.u64(a.evaluations_total_);
    w.u64(a.signals_total_);
    w.u64(a.dropped_);
    w.u32(static_cast<uint32_t>(a.history_size()));
    for (std::size_t i = 0; i < a.history_size(); ++i) {
      const alarm_event& e = a.history(i);
      w.u8(static_cast<uint8_t>(e.kind));
      w.u8(static_cast<uint8_t>(e.cause));
      w.u8(e.has_p_value ? 1 : 0);
      w.u8(e.has_interval ? 1 : 0);
      w.f64(e.time);
      w.f64(e.p_value);
      w.f64(e.lower);
      w.f64(e.estimate);
      w.f64(e.upper);
    }
  }
  static void commit(alarm_state& a, const alarm_stage& s) {
    a.active_ = s.active;
    a.active_since_ = s.active_since;
    a.signals_run_ = s.signals_run;
    a.quiet_run_ = s.quiet_run;
    a.raised_total_ = s.raised;
    a.cleared_total_ = s.cleared;
    a.evaluations_total_ = s.evaluations;
    a.signals_total_ = s.signals;
    a.dropped_ = s.dropped;
    a.history_ = s.events;
    a.oldest_ = 0;
    const alarm_rule rule = a.rule_;
    a.set_rule(rule);  // keeps the newest history_limit events
  }

  static void put(state_codec::writer& w, const stream_monitor& m) {
    w.u8(static_cast<uint8_t>(m.settings_->policy));
    w.u32(static_cast<uint32_t>(m.dim_));
    for (uint64_t c : {m.samples_total_, m.since_evaluation_, m.rejected_total_,
                       m.evaluations_total_, m.failed_total_, m.stale_total_,
                       m.rebaselines_total_, m.generation_})
      w.u64(c);
    if (m.dim_ == 1) {
      put(w, m.ref_1());
      put(w, m.rec_1());
    } else {
      put(w, m.ref_n());
      put(w, m.rec_n());
    }
    put(w, m.alarm_);
  }

  static bool get(state_codec::reader& r, stream_monitor& m, double time) {
    monitor_stage st;
    if (!parse(r, st)) return false;
    if (st.dim != m.dim_)
      return r.fail("the saved stream has dimension " + std::to_string(st.dim) +
                    ", the stream now takes " + std::to_string(m.dim_));
    const uint8_t policy = st.policy;
    const uint64_t* c = st.counters;
    const window_stage& ref = st.ref;
    const window_stage& rec = st.rec;
    const alarm_stage& alarm = st.alarm;
    // Commit: nothing below can fail.
    const auto saved_policy = static_cast<reference_policy>(policy);
    const bool same_policy = saved_policy == m.settings_->policy;
    if (same_policy) {
      if (m.dim_ == 1) {
        if (saved_policy != reference_policy::file) commit(m.ref_1(), ref);
        commit(m.rec_1(), rec);
      } else {
        if (saved_policy != reference_policy::file) commit(m.ref_n(), ref);
        commit(m.rec_n(), rec);
      }
    }
    m.samples_total_ = c[0];
    m.since_evaluation_ = c[1];
    m.rejected_total_ = c[2];
    m.evaluations_total_ = c[3];
    m.failed_total_ = c[4];
    m.stale_total_ = c[5];
    m.rebaselines_total_ = c[6];
    m.generation_ = c[7];
    m.last_.reset();
    commit(m.alarm_, alarm);
    if (!same_policy) {
      m.since_evaluation_ = 0;
      ++m.generation_;
      ++m.rebaselines_total_;
      m.alarm_.rebaseline(time);
    }
    return true;
  }
};

namespace state_codec {

void writer::u32(uint32_t v) {
  for (int i = 0; i < 4; ++i)
    out_.push_back(static_cast<char>((v >> (8 * i)) & 0xFF));
}

void writer::u64(uint64_t v) {
  for (int i = 0; i < 8; ++i)
    out_.push_back(static_cast<char>((v >> (8 * i)) & 0xFF));
}

void writer::f64(double v) {
  u64(std::bit_cast<uint64_t>(v));
}

void writer::text(std::string_view s) {
  u32(static_cast<uint32_t>(s.size()));
  out_.append(s);
}

bool reader::fail(std::string message) {
  if (error_.empty()) error_ = std::move(message) + " (at byte " + std::to_string(pos_) + ")";
  pos_ = bytes_.size();
  return false;
}

bool reader::take(std::size_t n, const unsigned char*& p) {
  if (!error_.empty()) return false;
  if (left() < n) return fail("truncated: " + std::to_string(n) + " more bytes needed");
  p = bytes_.data() + pos_;
  pos_ += n;
  return true;
}

bool reader::u8(uint8_t& v) {
  const unsigned char* p = nullptr;
  if (!take(1, p)) return false;
  v = p[0];
  return true;
}

bool reader::u32(uint32_t& v) {
  const unsigned char* p = nullptr;
  if (!take(4, p)) return false;
  v = 0;
  for (int i = 0; i < 4; ++i)
    v |= static_cast<uint32_t>(p[i]) << (8 * i);
  return true;
}

bool reader::u64(uint64_t& v) {
  const unsigned char* p = nullptr;
  if (!take(8, p)) return false;
  v = 0;
  for (int i = 0; i < 8; ++i)
    v |= static_cast<uint64_t>(p[i]) << (8 * i);
  return true;
}

bool reader::f64(double& v) {
  uint64_t bits = 0;
  if (!u64(bits)) return false;
  v = std::bit_cast<double>(bits);
  return true;
}

bool reader::text(std::string& s, std::size_t max_bytes) {
  uint32_t n = 0;
  if (!u32(n)) return false;
  if (n > max_bytes)
    return fail("a text of " + std::to_string(n) + " bytes, more than " +
                std::to_string(max_bytes));
  const unsigned char* p = nullptr;
  if (!take(n, p)) return false;
  s.assign(reinterpret_cast<const char*>(p), n);
  return true;
}

void encode(writer& w, const rng::state_type& s) {
  for (const auto& lane : s.lane)
    for (uint64_t x : lane)
      w.u64(x);
  for (uint64_t x : s.buffer)
    w.u64(x);
  w.u32(s.pos);
  w.u32(s.half);
}

bool decode(reader& r, rng::state_type& s) {
  rng::state_type t;
  for (auto& lane : t.lane)
    for (uint64_t& x : lane)
      if (!r.u64(x)) return false;
  for (uint64_t& x : t.buffer)
    if (!r.u64(x)) return false;
  if (!r.u32(t.pos) || !r.u32(t.half)) return false;
  if (t.pos > rng::block) return r.fail("generator buffer position beyond its block");
  if (t.half > 1 || (t.half == 1 && t.pos == 0))
    return r.fail("generator half-word flag out of range");
  for (const auto& lane : t.lane)
    if ((lane[0] | lane[1] | lane[2] | lane[3]) == 0)
      return r.fail("a generator lane is all zero");
  s = t;
  return true;
}

void encode(writer& w, const stream_monitor& m) {
  state_codec_access::put(w, m);
}

bool decode(reader& r, stream_monitor& m, double time) {
  return state_codec_access::get(r, m, time);
}

bool check_monitor(reader& r, uint32_t& dimension) {
  monitor_stage st;
  if (!parse(r, st)) return false;
  dimension = st.dim;
  return true;
}

}  // namespace state_codec

}  // namespace plumbline
