// state_codec.h: one stream's engine state as bytes, and back.
//
// Purpose. A snapshot (daemon/snapshot.h) must carry everything that decides
// what a stream does next: both windows with their running sums, the alarm
// with its runs, totals and history, and the monitor's counters (a stream's
// next random seed follows from its evaluation count; version 1 snapshots
// also held a generator, whose codec is kept to read them). This file turns
// those into a byte string and back. It knows
// nothing of files: the daemon frames, checksums and stores the bytes.
//
// Encoding. Little-endian fixed-width integers (u8, u32, u64) and IEEE
// binary64 doubles stored as their u64 bit patterns, so a value comes back
// bit for bit. The layouts are listed in DEVELOPERS.md ("Snapshot format")
// and in state_codec.cc; in short:
//   generator  4 lanes x 4 u64, 64 u64 of buffered block, u32 pos, u32 half
//   window     u64 capacity, u64 size, u64 pushes, u64 evictions, per column
//              6 doubles of running moments, then size x dim values, oldest
//              first
//   alarm      u8 active, f64 active_since, 6 u64 (runs and totals),
//              u64 dropped, u32 events, then per event u8 kind, u8 cause,
//              u8 has_p, u8 has_interval, f64 time, p, lower, estimate, upper
//   monitor    u8 policy, u32 dimension, 8 u64 counters, the reference and
//              recent windows, the alarm
//
// Reading. Every read is bounds-checked: a short or malformed input makes
// decode() return false with a message in the reader (the first problem
// found), never undefined behaviour and never an allocation larger than the
// input justifies (a count is checked against the bytes left before any
// storage is reserved). decode() into a monitor is all or nothing: on
// failure the monitor is unchanged.
//
// Restoring into a monitor whose settings differ from those of the saved
// state follows the reload rules of monitor.h: a window of another size keeps
// its newest samples that fit, a different reference policy restores no
// window and acts as a rebaseline, a file-policy reference is never taken
// from the bytes (the file is the reference), and the alarm keeps the
// monitor's current rule. A different dimension is an error.
//
// Thread-safety: none; the caller holds the monitor's lock.
#pragma once

#include <cstddef>
#include <cstdint>
#include <span>
#include <string>
#include <string_view>

#include "core/monitor.h"
#include "core/rng.h"

namespace plumbline::state_codec {

// Appends little-endian values to a byte string.
class writer {
 public:
  explicit writer(std::string& out) : out_(out) {}
  void u8(uint8_t v) { out_.push_back(static_cast<char>(v)); }
  void u32(uint32_t v);
  void u64(uint64_t v);
  void f64(double v);
  // u32 length, then the bytes. REQUIRES: s.size() < 2^32.
  void text(std::string_view s);
  std::string& bytes() { return out_; }

 private:
  std::string& out_;
};

// Reads little-endian values from a byte span, bounds-checked. After the
// first failure every read fails and error() says what went wrong first.
class reader {
 public:
  explicit reader(std::span<const unsigned char> bytes) : bytes_(bytes) {}
  explicit reader(std::string_view bytes)
      : bytes_(reinterpret_cast<const unsigned char*>(bytes.data()), bytes.size()) {}

  bool u8(uint8_t& v);
  bool u32(uint32_t& v);
  bool u64(uint64_t& v);
  bool f64(double& v);
  // A text of at most max_bytes bytes.
  bool text(std::string& s, std::size_t max_bytes);
  // Records `message` as the error (unless one is recorded); returns false.
  bool fail(std::string message);

  std::size_t left() const { return bytes_.size() - pos_; }
  std::size_t position() const { return pos_; }
  bool ok() const { return error_.empty(); }
  const std::string& error() const { return error_; }

 private:
  bool take(std::size_t n, const unsigned char*& p);
  std::span<const unsigned char> bytes_;
  std::size_t pos_ = 0;
  std::string error_;
};

// The generator's complete state (rng::state_type).
void encode(writer& w, const rng::state_type& s);
// Checks pos <= 64, half <= 1, half only with pos >= 1, and that no lane is
// all zero (xoshiro's one forbidden state).
bool decode(reader& r, rng::state_type& s);

// The monitor's windows, alarm and counters (not its settings).
void encode(writer& w, const stream_monitor& m);
// Restores into m as the header comment says; false (m unchanged) on any
// problem. `time` is the rebaseline time when the policy differs.
bool decode(reader& r, stream_monitor& m, double time);
// Reads and checks saved monitor state without restoring it (a dry run of
// decode); `dimension` receives the saved dimension.
bool check_monitor(reader& r, uint32_t& dimension);

}  // namespace plumbline::state_codec
