// snapshot.h: the daemon's state on disk, written atomically, read safely.
//
// Purpose. A reference window can take hours of production to collect; a
// restart, a crash or a configuration change must not throw it away. The
// daemon therefore writes every stream's state (windows, alarm, counters,
// evaluation count) to a data directory, periodically and at a graceful stop, and
// restores the newest valid file at start. DEVELOPERS.md ("Snapshot format")
// documents the byte layout; in short: a 48-byte header (magic "PLBLSNAP",
// format version, section count, generation, file length, write time,
// CRC-32C of the header), then sections, each a 16-byte header (kind,
// CRC-32C of the payload, payload length) and its payload. Section 1 says
// what the daemon was (seed, stream count); one section 2 per stream holds
// its name, dimension, scheduling fields and core state (core/state_codec.h);
// in format version 1 a generator state came before the core state.
//
// Files in the data directory:
//   snapshot-GGGGGGGGGGGGGGGG.plbs   a snapshot of generation G (16 lowercase
//                                    hex digits); only these names are read
//   .snapshot-G.tmp                  a write in progress, never read; left
//                                    over ones are removed at start
//   NAME.bad, NAME.bad.N             a snapshot found unusable, set aside
//                                    (renamed, never deleted)
// A write goes to the temp file, is fsync'ed, renamed over its final name,
// and the directory is fsync'ed; only then are generations older than the
// previous good one removed, so the newest two good generations are kept.
//
// Restore. Candidates are tried newest first. A file that cannot be read, is
// not a regular file, is too large, truncated, foreign (wrong magic), of a
// future format version, or fails a checksum or a structural check is
// reported by name and reason and renamed aside; the next older one is
// tried. When none is valid the daemon starts empty and says so. No input
// makes the loader crash or read out of bounds (tests/fuzz/snapshot_fuzz.cc).
//
// Thread-safety. snapshotter::write_now() may be called from any thread (one
// write at a time, under its own mutex); each stream is locked only while its
// state is copied. restore() runs once, before ingest starts.
#pragma once

#include <atomic>
#include <cstddef>
#include <cstdint>
#include <functional>
#include <mutex>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "core/status.h"
#include "daemon/snapshot_format.h"
#include "daemon/stream_table.h"

namespace plumbline::snapshot {

// One stream's section payload. REQUIRES: e.mu held.
std::string encode_stream(const stream_entry& e);
// Restores the payload, laid out in file format `version`, into e.
// REQUIRES: e.mu held, head.name == e.name. False (e unchanged, `error` set)
// when it does not fit the entry.
bool restore_stream(std::string_view payload, stream_entry& e, double now, std::string& error,
                    uint32_t version = format_version);

// Counters the daemon exports (metrics.h).
struct status {
  std::atomic<double> last_good_time{0};  // header time of the newest good snapshot; 0 = none
  std::atomic<uint64_t> failures{0};      // snapshot writes that failed
  std::atomic<int> reload_ok{1};          // 0 after a refused reload until a good one
};

using log_fn = std::function<void(int severity, const std::string&)>;  // 0 info, 1 warn, 2 error

class snapshotter {
 public:
  // `dir` is the data directory (created when missing). `log` receives
  // every message.
  snapshotter(std::string dir, stream_table& streams, uint64_t seed, status& st, log_fn log);

  const std::string& dir() const { return dir_; }

  // Restores the newest valid snapshot into `streams` (which must be empty
  // and not yet fed). Returns how many streams were restored; every problem
  // is logged. Never fails: the worst case is an empty start.
  std::size_t restore(double now);

  // Writes one snapshot of every stream now. Returns the file's path, or why
  // it failed (also logged and counted in status::failures).
  expected<std::string> write_now();

 private:
  expected<std::string> write_locked();
  void set_aside(const std::string& name, const std::string& reason);

  std::string dir_;
  stream_table& streams_;
  uint64_t seed_;
  status& status_;
  log_fn log_;
  std::mutex mu_;
  uint64_t next_generation_ = 1;              // guarded by mu_
  std::optional<uint64_t> last_good_;         // guarded by mu_
};

}  // namespace plumbline::snapshot
