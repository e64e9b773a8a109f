// snapshot_format.h: the snapshot file format (see snapshot.h and
// DEVELOPERS.md, "Snapshot format"): CRC-32C, framing, and a complete check
// of a file image. No files, sockets or streams here: the libFuzzer target
// tests/fuzz/snapshot_fuzz.cc drives parse() with arbitrary bytes.
//
// Thread-safety: pure functions.
#pragma once

#include <cstddef>
#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

#include "core/rng.h"
#include "core/status.h"

namespace plumbline::snapshot {

// CRC-32C (Castagnoli polynomial 0x1EDC6F41, reflected 0x82F63B78, initial
// value and final XOR 0xFFFFFFFF), as in RFC 3720 section 12.1 and the
// iSCSI/SCTP check value: crc32c("123456789") = 0xE3069283. `crc` continues
// an earlier call's result.
uint32_t crc32c(const void* data, std::size_t n, uint32_t crc = 0);

inline constexpr char magic[8] = {'P', 'L', 'B', 'L', 'S', 'N', 'A', 'P'};
// 2: stream sections hold no generator (each evaluation seeds its own, see
// core/monitor.h evaluation_seed). 1: they held one after the scheduling
// fields; a version 1 file still reads, its generators skipped.
inline constexpr uint32_t format_version = 2;
inline constexpr std::size_t header_bytes = 48;
inline constexpr std::size_t section_header_bytes = 16;
// The largest snapshot file read back (and so the largest written).
inline constexpr uint64_t max_file_bytes = uint64_t{4} << 30;
inline constexpr std::size_t max_name_bytes = 4096;  // a stream or group name in a section

enum class section_kind : uint32_t { daemon = 1, stream = 2 };

struct section {
  section_kind kind = section_kind::daemon;
  std::string_view payload;  // a view into the file's bytes
};

struct parsed {
  uint32_t version = 0;
  uint64_t generation = 0;
  double written_at = 0;  // Unix seconds
  uint64_t seed = 0;      // the daemon's evaluation seed when written
  std::vector<section> streams;
};

// Frames and checksums sections into a complete file image whose header
// says format `version` (the sections must be laid out as that version says;
// the daemon writes only format_version).
std::string frame(uint64_t generation, double written_at,
                  const std::vector<std::pair<section_kind, std::string>>& sections,
                  uint32_t version = format_version);

// Checks a file image completely (header, lengths, checksums, the daemon
// section, every stream section decoded in a dry run) and returns its
// sections, or the reason it is unusable ("truncated: ...", "not a snapshot
// (foreign magic)", "format version 7 is newer than this build reads (1)",
// "checksum mismatch in section 3", ...).
expected<parsed> parse(std::string_view bytes);

// A stream section's payload: u32-length-prefixed name and group, u32
// dimension, the scheduling fields (in version 1, a generator state after
// them), then the monitor's state (core/state_codec.h).
struct stream_head {
  std::string name;
  std::string group;
  uint32_t dimension = 0;
};
struct stream_fields {
  uint64_t since_trigger = 0;
  bool primed = false;
  double last_sample_time = 0;
  double last_trigger_time = 0;
  uint64_t evaluations = 0;
  double last_evaluation_time = 0;
  double last_evaluation_seconds = 0;
};
// Reads everything before the monitor's state, as laid out in file format
// `version`; `monitor_at` receives the offset of the monitor's bytes. False
// with `error` set on a malformed payload. REQUIRES: 1 <= version <=
// format_version.
bool read_stream(std::string_view payload, stream_head& head, stream_fields& fields,
                 std::size_t& monitor_at, std::string& error,
                 uint32_t version = format_version);
// Appends the head and fields in the current format (the monitor's state
// follows).
void write_stream(std::string& out, const stream_head& head, const stream_fields& fields);

// "snapshot-000000000000002a.plbs"; and its inverse (nullopt for any other name).
std::string file_name(uint64_t generation);
std::optional<uint64_t> generation_of(std::string_view file_name);

}  // namespace plumbline::snapshot
