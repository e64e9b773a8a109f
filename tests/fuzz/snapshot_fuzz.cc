// snapshot_fuzz.cc: libFuzzer target for the snapshot loader
// (daemon/snapshot_format.h and core/state_codec.h).
//
// Input layout: byte 0 is the mode, the rest is a snapshot file image.
//   mode bit 0 clear  before parsing, the header CRC and every section CRC
//                     whose section lies inside the image are recomputed, so
//                     the fuzzer gets past the checksums and into the
//                     decoders behind them;
//   mode bit 0 set    the image is parsed exactly as given (the checksums
//                     then stop nearly every mutation, as on disk).
// Invariants checked (any failure aborts):
//   * parse() returns (no crash, no sanitizer report, no huge allocation:
//     run with -rss_limit_mb and -malloc_limit_mb) and, on refusal, a
//     non-empty reason.
//   * An accepted image is canonical: framing its sections again (daemon
//     section from the parsed seed and count, header with the parsed format
//     version) gives back exactly the input.
//   * Every accepted stream restores into a fresh monitor of its dimension
//     (under each reference policy, with windows of other sizes than the
//     saved ones), the windows respect their capacities, and the restored
//     state encodes to bytes that the codec accepts again; a monitor of
//     another dimension refuses it and is left unchanged.
// Build and run: see tests/fuzz/README.md (or `bash deploy/setup.sh fuzz`).
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <string>
#include <string_view>

#include "core/state_codec.h"
#include "daemon/snapshot_format.h"

namespace {

namespace snap = plumbline::snapshot;
namespace codec = plumbline::state_codec;

void require(bool ok, const char* what) {
  if (!ok) {
    std::fprintf(stderr, "invariant violated: %s\n", what);
    std::abort();
  }
}

uint32_t load_u32(const std::string& b, std::size_t at) {
  uint32_t v = 0;
  for (int i = 0; i < 4; ++i)
    v |= static_cast<uint32_t>(static_cast<unsigned char>(b[at + i])) << (8 * i);
  return v;
}
uint64_t load_u64(const std::string& b, std::size_t at) {
  uint64_t v = 0;
  for (int i = 0; i < 8; ++i)
    v |= static_cast<uint64_t>(static_cast<unsigned char>(b[at + i])) << (8 * i);
  return v;
}
void store_u32(std::string& b, std::size_t at, uint32_t v) {
  for (int i = 0; i < 4; ++i)
    b[at + i] = static_cast<char>((v >> (8 * i)) & 0xFF);
}

// Recomputes the checksums the layout of DEVELOPERS.md places in the image.
void fix_checksums(std::string& b) {
  if (b.size() < snap::header_bytes) return;
  store_u32(b, 44, snap::crc32c(b.data(), 44));
  std::size_t at = snap::header_bytes;
  const uint32_t count = load_u32(b, 12);
  for (uint32_t i = 0; i < count && b.size() - at >= snap::section_header_bytes; ++i) {
    const uint64_t len = load_u64(b, at + 8);
    if (len > b.size() - at - snap::section_header_bytes) return;
    store_u32(b, at + 4,
              snap::crc32c(b.data() + at + snap::section_header_bytes,
                           static_cast<std::size_t>(len)));
    at += snap::section_header_bytes + static_cast<std::size_t>(len);
  }
}

void check_restore(std::string_view payload, uint32_t version) {
  snap::stream_head head;
  snap::stream_fields fields;
  std::size_t at = 0;
  std::string error;
  require(snap::read_stream(payload, head, fields, at, error, version),
          "an accepted stream's head reads");
  const std::string_view state = payload.substr(at);
  if (head.dimension > 64) return;  // accepted, but too wide to build cheaply here
  for (int policy = 0; policy < 3; ++policy) {
    plumbline::monitor_settings s;
    s.policy = static_cast<plumbline::reference_policy>(policy);
    s.reference_size = 7 + static_cast<std::size_t>(policy);
    s.recent_size = 5;
    s.alarm.history_limit = 3;
    plumbline::stream_monitor m(s, head.dimension);
    codec::reader r(state);
    require(codec::decode(r, m, 1.0), "an accepted stream restores");
    require(m.reference_fill() <= m.reference_capacity(), "reference within capacity");
    require(m.recent_fill() <= m.recent_capacity(), "recent within capacity");
    require(m.alarm().history_size() <= 3, "history within the limit");
    plumbline::evaluation_input in;
    m.capture(in);
    std::string again;
    codec::writer w(again);
    codec::encode(w, m);
    codec::reader r2(again);
    uint32_t dim = 0;
    require(codec::check_monitor(r2, dim) && r2.left() == 0 && dim == head.dimension,
            "a restored monitor encodes to valid state");
  }
  plumbline::monitor_settings s;
  plumbline::stream_monitor other(s, head.dimension + 1);
  codec::reader r(state);
  require(!codec::decode(r, other, 1.0), "a monitor of another dimension refuses the state");
  require(other.samples_total() == 0 && other.reference_fill() == 0,
          "a refused restore changes nothing");
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  if (size < 1) return 0;
  std::string image(reinterpret_cast<const char*>(data) + 1, size - 1);
  if ((data[0] & 1) == 0) fix_checksums(image);
  auto p = snap::parse(image);
  if (!p) {
    require(!p.err().message.empty(), "a refusal has a reason");
    return 0;
  }
  std::vector<std::pair<snap::section_kind, std::string>> sections;
  std::string daemon;
  codec::writer w(daemon);
  w.u64(p.value().seed);
  w.u64(p.value().streams.size());
  sections.emplace_back(snap::section_kind::daemon, daemon);
  for (const auto& s : p.value().streams)
    sections.emplace_back(s.kind, std::string(s.payload));
  require(snap::frame(p.value().generation, p.value().written_at, sections, p.value().version) ==
              image,
          "an accepted image is canonical");
  for (const auto& s : p.value().streams)
    check_restore(s.payload, p.value().version);
  return 0;
}
