// snapshot_format.cc: see snapshot_format.h.
//
// Design note. parse() trusts nothing: every length is compared with the
// bytes that are really there before it is used, the header and every
// section carry a CRC-32C, and a stream section is decoded completely (into
// staging, core/state_codec.h) so that a file that passes parse() restores
// without surprises. The checks run in the order that gives the most useful
// reason: size, magic (foreign file), version (future file), header
// checksum, declared length (truncation), then section by section.
#include "daemon/snapshot_format.h"

#include <array>
#include <bit>
#include <cmath>
#include <cstring>
#include <set>

#include "core/state_codec.h"

namespace plumbline::snapshot {

namespace {

// The reflected CRC-32C table, built at compile time from the reflected
// polynomial 0x82F63B78 (one bit at a time, the textbook construction).
constexpr std::array<uint32_t, 256> make_table() {
  std::array<uint32_t, 256> t{};
  for (uint32_t i = 0; i < 256; ++i) {
    uint32_t c = i;
    for (int k = 0; k < 8; ++k)
      c = (c & 1) ? (c >> 1) ^ 0x82F63B78u : c >> 1;
    t[i] = c;
  }
  return t;
}
constexpr std::array<uint32_t, 256> crc_table = make_table();

uint32_t load_u32(const char* p) {
  uint32_t v = 0;
  for (int i = 0; i < 4; ++i)
    v |= static_cast<uint32_t>(static_cast<unsigned char>(p[i])) << (8 * i);
  return v;
}
uint64_t load_u64(const char* p) {
  uint64_t v = 0;
  for (int i = 0; i < 8; ++i)
    v |= static_cast<uint64_t>(static_cast<unsigned char>(p[i])) << (8 * i);
  return v;
}

constexpr std::string_view name_prefix = "snapshot-";
constexpr std::string_view name_suffix = ".plbs";
constexpr std::size_t hex_digits = 16;

}  // namespace

uint32_t crc32c(const void* data, std::size_t n, uint32_t crc) {
  const auto* p = static_cast<const unsigned char*>(data);
  uint32_t c = ~crc;
  for (std::size_t i = 0; i < n; ++i)
    c = crc_table[(c ^ p[i]) & 0xFF] ^ (c >> 8);
  return ~c;
}

std::string frame(uint64_t generation, double written_at,
                  const std::vector<std::pair<section_kind, std::string>>& sections,
                  uint32_t version) {
  std::size_t total = header_bytes;
  for (const auto& s : sections)
    total += section_header_bytes + s.second.size();
  std::string out;
  out.reserve(total);
  state_codec::writer w(out);
  out.append(magic, sizeof magic);
  w.u32(version);
  w.u32(static_cast<uint32_t>(sections.size()));
  w.u64(generation);
  w.u64(total);
  w.f64(written_at);
  w.u32(0);  // reserved
  w.u32(crc32c(out.data(), out.size()));
  for (const auto& [kind, payload] : sections) {
    w.u32(static_cast<uint32_t>(kind));
    w.u32(crc32c(payload.data(), payload.size()));
    w.u64(payload.size());
    out.append(payload);
  }
  return out;
}

bool read_stream(std::string_view payload, stream_head& head, stream_fields& f,
                 std::size_t& monitor_at, std::string& error, uint32_t version) {
  state_codec::reader r(payload);
  uint8_t primed = 0;
  // Version 1 kept each stream's generator after the scheduling fields; it is
  // read (and checked) and dropped: evaluations now seed their own.
  rng::state_type unused_generator;
  const bool ok = r.text(head.name, max_name_bytes) && r.text(head.group, max_name_bytes) &&
                  r.u32(head.dimension) && r.u64(f.since_trigger) && r.u8(primed) &&
                  r.f64(f.last_sample_time) && r.f64(f.last_trigger_time) &&
                  r.u64(f.evaluations) && r.f64(f.last_evaluation_time) &&
                  r.f64(f.last_evaluation_seconds) &&
                  (version != 1 || state_codec::decode(r, unused_generator));
  if (ok && head.name.empty()) r.fail("a stream with an empty name");
  if (ok && primed > 1) r.fail("the primed flag is neither 0 nor 1");
  if (ok && head.dimension == 0) r.fail("a stream of dimension 0");
  if (!r.ok()) {
    error = r.error();
    return false;
  }
  f.primed = primed == 1;
  monitor_at = r.position();
  return true;
}

void write_stream(std::string& out, const stream_head& head, const stream_fields& f) {
  state_codec::writer w(out);
  w.text(head.name);
  w.text(head.group);
  w.u32(head.dimension);
  w.u64(f.since_trigger);
  w.u8(f.primed ? 1 : 0);
  w.f64(f.last_sample_time);
  w.f64(f.last_trigger_time);
  w.u64(f.evaluations);
  w.f64(f.last_evaluation_time);
  w.f64(f.last_evaluation_seconds);
}

expected<parsed> parse(std::string_view bytes) {
  const std::size_t n = bytes.size();
  if (n == 0) return make_error("empty file (0 bytes)");
  if (n < header_bytes)
    return make_error("truncated: " + std::to_string(n) + " bytes, shorter than the " +
                      std::to_string(header_bytes) + "-byte header");
  const char* h = bytes.data();
  if (std::memcmp(h, magic, sizeof magic) != 0)
    return make_error("not a plumbline snapshot (foreign magic)");
  parsed p;
  p.version = load_u32(h + 8);
  if (p.version > format_version)
    return make_error("format version " + std::to_string(p.version) +
                      " is newer than this build reads (" + std::to_string(format_version) + ")");
  if (p.version == 0) return make_error("format version 0 does not exist");
  if (load_u32(h + 44) != crc32c(h, 44)) return make_error("header checksum mismatch");
  const uint32_t count = load_u32(h + 12);
  p.generation = load_u64(h + 16);
  const uint64_t length = load_u64(h + 24);
  p.written_at = std::bit_cast<double>(load_u64(h + 32));
  if (load_u32(h + 40) != 0) return make_error("reserved header field is not zero");
  if (length < n)
    return make_error("file is " + std::to_string(n) + " bytes but its header declares " +
                      std::to_string(length) + " (trailing bytes)");
  if (length > n)
    return make_error("truncated: " + std::to_string(n) + " of " + std::to_string(length) +
                      " bytes");
  if (count < 1) return make_error("no daemon section");
  if (count - 1 > (n - header_bytes) / section_header_bytes)
    return make_error("declares " + std::to_string(count) + " sections, more than fit");

  std::size_t at = header_bytes;
  uint64_t declared_streams = 0;
  std::set<std::string, std::less<>> names;
  for (uint32_t i = 0; i < count; ++i) {
    const std::string where = "section " + std::to_string(i + 1);
    if (n - at < section_header_bytes) return make_error("truncated: " + where + " header");
    const uint32_t kind = load_u32(bytes.data() + at);
    const uint32_t crc = load_u32(bytes.data() + at + 4);
    const uint64_t len = load_u64(bytes.data() + at + 8);
    at += section_header_bytes;
    if (len > n - at) return make_error("truncated: " + where + " payload");
    const std::string_view payload = bytes.substr(at, static_cast<std::size_t>(len));
    at += static_cast<std::size_t>(len);
    if (crc32c(payload.data(), payload.size()) != crc)
      return make_error("checksum mismatch in " + where);
    if (i == 0) {
      if (kind != static_cast<uint32_t>(section_kind::daemon))
        return make_error(where + " is not the daemon section");
      state_codec::reader r(payload);
      if (!r.u64(p.seed) || !r.u64(declared_streams))
        return make_error(where + ": " + r.error());
      if (r.left() != 0) return make_error(where + ": trailing bytes");
      if (declared_streams != count - 1)
        return make_error("the daemon section declares " + std::to_string(declared_streams) +
                          " streams but the file has " + std::to_string(count - 1));
      continue;
    }
    if (kind != static_cast<uint32_t>(section_kind::stream))
      return make_error(where + " has unknown kind " + std::to_string(kind));
    stream_head head;
    stream_fields fields;
    std::size_t monitor_at = 0;
    std::string error;
    if (!read_stream(payload, head, fields, monitor_at, error, p.version))
      return make_error(where + ": " + error);
    state_codec::reader r(payload.substr(monitor_at));
    uint32_t dim = 0;
    if (!state_codec::check_monitor(r, dim)) return make_error(where + ": " + r.error());
    if (r.left() != 0) return make_error(where + ": trailing bytes");
    if (dim != head.dimension)
      return make_error(where + ": stream dimension " + std::to_string(head.dimension) +
                        " but its monitor has " + std::to_string(dim));
    if (!names.insert(head.name).second)
      return make_error(where + ": stream '" + head.name + "' appears twice");
    p.streams.push_back({section_kind::stream, payload});
  }
  if (at != n) return make_error("trailing bytes after the last section");
  return p;
}

std::string file_name(uint64_t generation) {
  static const char hex[] = "0123456789abcdef";
  std::string s(name_prefix);
  for (int i = static_cast<int>(hex_digits) - 1; i >= 0; --i)
    s += hex[(generation >> (4 * i)) & 15];
  s += name_suffix;
  return s;
}

std::optional<uint64_t> generation_of(std::string_view name) {
  if (name.size() != name_prefix.size() + hex_digits + name_suffix.size() ||
      !name.starts_with(name_prefix) || !name.ends_with(name_suffix))
    return std::nullopt;
  uint64_t g = 0;
  for (char c : name.substr(name_prefix.size(), hex_digits)) {
    int d = -1;
    if (c >= '0' && c <= '9') d = c - '0';
    if (c >= 'a' && c <= 'f') d = c - 'a' + 10;
    if (d < 0) return std::nullopt;
    g = (g << 4) | static_cast<uint64_t>(d);
  }
  return g;
}

}  // namespace plumbline::snapshot
