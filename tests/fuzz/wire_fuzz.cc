// wire_fuzz.cc: libFuzzer target for the wire format of daemon/wire.h.
//
// Input layout: byte 0-1 choose max_line_bytes in [16, 16 + 1023], bytes 2-5
// seed the chunk sizes, the rest is the byte stream. The stream is fed to a
// line_assembler in random chunks (1 byte up to the whole), then finish().
// Invariants checked (any failure aborts):
//   * The lines and the over-long count equal those of a plain reference
//     split of the whole stream at every LF (over-long: more than
//     max_line_bytes bytes before the LF; an unfinished last line counts).
//   * A line wholly inside the chunk being fed is a view into that chunk at
//     its own offset; any other line is not a view into the chunk.
//   * for_each_line_in_datagram gives the same lines, as views into the
//     stream at their offsets.
//   * parse_line: a record's stream is a view into the line, 1 to 200 bytes
//     of the stream set; 1 <= dim <= 64; values finite; a time, when
//     present, finite and in [0, 253402300800). Rejections carry a reason
//     that parse_line may give. Ignored lines are blank or comments. The
//     same line parses to the same outcome twice. A record printed back
//     (shortest round-trip decimal) parses to the same bits.
//   * Each line's first 80 bytes, used as a VALUE field and as a TIME field,
//     give exactly what the documented rules written out with from_chars
//     alone give (so the parser's fast path agrees with from_chars).
// Build and run: see tests/fuzz/README.md.
#include <charconv>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <string>
#include <string_view>
#include <vector>

#include "daemon/wire.h"

namespace {

namespace wire = plumbline::wire;

void require(bool ok, const char* what) {
  if (!ok) {
    std::fprintf(stderr, "invariant violated: %s\n", what);
    std::abort();
  }
}

bool inside(const char* p, std::size_t n, const char* begin, const char* end) {
  return p >= begin && p + n <= end;
}

bool same_bits(double a, double b) {
  return std::memcmp(&a, &b, sizeof a) == 0;
}

bool stream_char(char c) {
  return (c >= '0' && c <= '9') || (c >= 'A' && c <= 'Z') || (c >= 'a' && c <= 'z') || c == '_' ||
         c == '.' || c == ':' || c == '/' || c == '-';
}

struct ref_line {
  std::size_t start;
  std::size_t size;
};

void check_parse(std::string_view line) {
  wire::record r;
  const auto o = wire::parse_line(line, r);
  wire::record again;
  const auto o2 = wire::parse_line(line, again);
  require(o.kind == o2.kind, "parse_line is deterministic (kind)");
  switch (o.kind) {
    case wire::line_kind::ignored: {
      std::string_view t = line;
      if (!t.empty() && t.back() == '\r') t.remove_suffix(1);
      const auto first = t.find_first_not_of(" \t");
      require(first == std::string_view::npos || t[first] == '#', "ignored lines are blank or '#'");
      return;
    }
    case wire::line_kind::rejected: {
      require(o.reason == o2.reason, "parse_line is deterministic (reason)");
      using rr = wire::reject_reason;
      require(o.reason == rr::bad_stream_name || o.reason == rr::bad_time ||
                  o.reason == rr::bad_value || o.reason == rr::non_finite_value ||
                  o.reason == rr::missing_value || o.reason == rr::too_many_values,
              "parse_line gives only its own reasons");
      require(wire::reason_name(o.reason) != "unknown", "every reason has a name");
      return;
    }
    case wire::line_kind::record:
      break;
  }
  require(inside(r.stream.data(), r.stream.size(), line.data(), line.data() + line.size()),
          "stream view lies inside the line");
  require(!r.stream.empty() && r.stream.size() <= wire::max_stream_name, "stream length");
  for (char c : r.stream)
    require(stream_char(c), "stream characters");
  require(r.dim >= 1 && r.dim <= wire::max_values, "1 <= dim <= 64");
  require(r.value_span().size() == r.dim, "value_span has dim values");
  for (uint32_t i = 0; i < r.dim; ++i)
    require(std::isfinite(r.values[i]), "values are finite");
  if (r.has_time)
    require(std::isfinite(r.time) && r.time >= 0 && r.time < wire::time_limit, "time range");
  require(again.dim == r.dim && again.has_time == r.has_time && again.stream == r.stream,
          "parse_line is deterministic (record)");

  // Print the record back and parse it again: the same bits.
  char text[wire::max_stream_name + 64 * 32 + 512];
  char* w = text;
  char* const end = text + sizeof text;
  std::memcpy(w, r.stream.data(), r.stream.size());
  w += r.stream.size();
  *w++ = ',';
  if (r.has_time) w = std::to_chars(w, end, r.time, std::chars_format::fixed).ptr;
  for (uint32_t i = 0; i < r.dim; ++i) {
    *w++ = ',';
    w = std::to_chars(w, end, r.values[i]).ptr;
  }
  wire::record back;
  const auto ob =
      wire::parse_line(std::string_view(text, static_cast<std::size_t>(w - text)), back);
  require(ob.kind == wire::line_kind::record, "a printed record parses");
  require(back.stream == r.stream && back.dim == r.dim && back.has_time == r.has_time,
          "a printed record keeps stream, dim and has_time");
  if (r.has_time) require(same_bits(back.time, r.time), "a printed time reads back exactly");
  for (uint32_t i = 0; i < r.dim; ++i)
    require(same_bits(back.values[i], r.values[i]), "a printed value reads back exactly");
}

std::string_view trim(std::string_view t) {
  const auto b = t.find_first_not_of(" \t");
  if (b == std::string_view::npos) return {};
  return t.substr(b, t.find_last_not_of(" \t") - b + 1);
}

// The documented VALUE rules, written out with from_chars alone (no fast
// path): a leading '+' not followed by a sign, then from_chars taking the
// whole field; out of range or not finite is non_finite_value.
void check_value_field(std::string_view text) {
  if (text.find_first_of(",\n") != std::string_view::npos) return;
  if (!text.empty() && text.back() == '\r') return;
  std::string line = "fuzz,1,";
  line.append(text);
  wire::record r;
  const auto o = wire::parse_line(line, r);
  std::string_view f = trim(text);
  if (f.empty()) {
    require(o.kind == wire::line_kind::rejected && o.reason == wire::reject_reason::missing_value,
            "value oracle: empty field");
    return;
  }
  bool bad = false;
  if (f.front() == '+') {
    f.remove_prefix(1);
    bad = f.empty() || f.front() == '+' || f.front() == '-';
  }
  double v = 0;
  std::from_chars_result fc{};
  if (!bad) {
    fc = std::from_chars(f.data(), f.data() + f.size(), v);
    bad = fc.ptr != f.data() + f.size() || fc.ec == std::errc::invalid_argument;
  }
  if (bad) {
    require(o.kind == wire::line_kind::rejected && o.reason == wire::reject_reason::bad_value,
            "value oracle: bad_value");
  } else if (fc.ec != std::errc() || !std::isfinite(v)) {
    require(
        o.kind == wire::line_kind::rejected && o.reason == wire::reject_reason::non_finite_value,
        "value oracle: non_finite_value");
  } else {
    require(o.kind == wire::line_kind::record && r.dim == 1 && same_bits(r.values[0], v),
            "value oracle: the value from_chars reads");
  }
}

// The documented unix-seconds rules, written out with from_chars alone.
void check_time_field(std::string_view text) {
  if (text.find_first_of(",\n") != std::string_view::npos) return;
  const std::string_view f = trim(text);
  if (f.size() > 4 && f[4] == '-') return;  // an RFC 3339 date-time
  std::string line = "fuzz,";
  line.append(text);
  line.append(",1");
  wire::record r;
  const auto o = wire::parse_line(line, r);
  if (f.empty()) {
    require(o.kind == wire::line_kind::record && !r.has_time, "time oracle: empty is receipt");
    return;
  }
  std::size_t i = 0;
  while (i < f.size() && f[i] >= '0' && f[i] <= '9')
    ++i;
  bool ok = i > 0;
  const std::size_t int_digits = i;
  if (ok && i < f.size()) {
    ok = f[i] == '.';
    const std::size_t frac_begin = ++i;
    while (i < f.size() && f[i] >= '0' && f[i] <= '9')
      ++i;
    ok = ok && i > frac_begin && i == f.size();
  }
  double v = 0;
  if (ok) {
    const auto fc = std::from_chars(f.data(), f.data() + f.size(), v);
    if (fc.ec == std::errc::result_out_of_range) {
      // Underflow (all-zero integer part) is the correctly rounded 0.
      ok = f.substr(0, int_digits).find_first_not_of('0') == std::string_view::npos;
      v = 0;
    }
    ok = ok && v < wire::time_limit;
  }
  if (ok)
    require(o.kind == wire::line_kind::record && r.has_time && same_bits(r.time, v),
            "time oracle: the time from_chars reads");
  else
    require(o.kind == wire::line_kind::rejected && o.reason == wire::reject_reason::bad_time,
            "time oracle: bad_time");
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, std::size_t size) {
  if (size < 6) return 0;
  const std::size_t cap = wire::min_line_bytes + ((std::size_t{data[0]} << 8 | data[1]) & 1023);
  uint32_t state =
      (uint32_t{data[2]} << 24 | uint32_t{data[3]} << 16 | uint32_t{data[4]} << 8 | data[5]) | 1u;
  const char* const body = reinterpret_cast<const char*>(data + 6);
  const std::size_t n = size - 6;

  // Reference split.
  std::vector<ref_line> want;
  int want_overlong = 0;
  for (std::size_t p = 0; p < n;) {
    const void* hit = std::memchr(body + p, '\n', n - p);
    const std::size_t eol =
        hit ? static_cast<std::size_t>(static_cast<const char*>(hit) - body) : n;
    if (eol - p > cap)
      ++want_overlong;
    else if (hit || eol > p)
      want.push_back({p, eol - p});
    p = eol + 1;
  }

  // The assembler, in random chunks.
  wire::line_assembler a(cap);
  std::size_t next = 0;
  int overlong = 0;
  const char* chunk_begin = nullptr;
  const char* chunk_end = nullptr;
  auto on_line = [&](std::string_view line) {
    require(next < want.size(), "no more lines than the reference");
    const ref_line& e = want[next++];
    require(line == std::string_view(body + e.start, e.size), "line content");
    require(line.size() <= cap, "no line over the limit");
    if (chunk_begin != nullptr && body + e.start >= chunk_begin)
      require(line.data() == body + e.start, "a line inside one feed is a view into it");
    else if (!line.empty() && chunk_begin != nullptr)
      require(!inside(line.data(), line.size(), chunk_begin, chunk_end),
              "a reassembled line is not a view into the chunk");
    check_parse(line);
    check_value_field(line.substr(0, 80));
    check_time_field(line.substr(0, 80));
  };
  auto on_overlong = [&] { ++overlong; };
  for (std::size_t p = 0; p < n;) {
    state ^= state << 13;
    state ^= state >> 17;
    state ^= state << 5;
    std::size_t len = (state & 3) == 0 ? n - p : 1 + state % 97;
    if (len > n - p) len = n - p;
    chunk_begin = body + p;
    chunk_end = body + p + len;
    a.feed(std::span<const char>(chunk_begin, len), on_line, on_overlong);
    p += len;
  }
  chunk_begin = chunk_end = nullptr;
  a.finish(on_line, on_overlong);
  require(next == want.size(), "every reference line delivered");
  require(overlong == want_overlong, "over-long count");
  require(a.pending_bytes() == 0 && !a.discarding(), "finish leaves the assembler empty");

  // The datagram splitter.
  std::size_t d_next = 0;
  int d_overlong = 0;
  wire::for_each_line_in_datagram(
      std::string_view(body, n), cap,
      [&](std::string_view line) {
        require(d_next < want.size(), "datagram: no more lines than the reference");
        const ref_line& e = want[d_next++];
        require(line.data() == body + e.start && line.size() == e.size,
                "datagram: lines are views at their offsets");
      },
      [&] { ++d_overlong; });
  require(d_next == want.size() && d_overlong == want_overlong, "datagram: same split");
  return 0;
}
