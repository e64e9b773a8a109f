// wire.cc: the record parser of wire.h.
//
// Design note.
// * One pass, left to right, over the line's bytes; no copies except a small
//   stack buffer for RFC 3339 fractions (below). The stream name is checked
//   16 bytes at a time with SSE2 where available, else with a 256-entry
//   table. A plain number directly followed by ',' or the line end is read
//   while scanning (the fast path below); any other field is cut at its ','
//   (no quoting), trimmed and parsed in full.
// * Numbers. A plain decimal ([-]DIGITS[.DIGITS], at most 19 digits, the
//   common case "502.13") is read by Clinger's exact fast path (see
//   fast_decimal). Anything else goes to std::from_chars (libstdc++ 12:
//   correctly rounded, round-half-even, locale-free); both give the same,
//   correctly rounded double, and the unit tests and the fuzz target hold
//   them to it. unix-seconds is first checked against its strict pattern
//   (digits, optional ".digits"), because from_chars would also accept an
//   exponent, "inf" or a fraction without digits. from_chars reports
//   overflow and underflow-to-zero alike as result_out_of_range: for a value
//   both become non_finite_value; for a time (never negative) an underflow is
//   the correctly rounded 0 and an overflow is out of range anyway.
// * RFC 3339. Fixed positions: "YYYY-MM-DD?HH:MM:SS", then an optional
//   fraction, then the offset. The civil date is turned into days since
//   1970-01-01 by H. Hinnant's days_from_civil ("chrono-Compatible Low-Level
//   Date Algorithms", 2013), valid for the whole proleptic Gregorian range.
//   The whole seconds S = days * 86400 + h * 3600 + m * 60 + s - offset are
//   exact in int64. With a fraction, the double must be the correctly rounded
//   value of S + 0.f, not double(S) + double(0.f) (two roundings). So the
//   digits of S and of the fraction are written into one buffer and read with
//   from_chars. At most 64 fraction digits are copied; if more follow and any
//   of them is nonzero, a '1' is appended in their place (a sticky digit).
//   That keeps the rounding exact whenever S >= 1: every double in [1, 2^38)
//   and every midpoint between two of them is a multiple of 2^-53, so it has
//   at most 53 decimal fraction digits; the text truncated after k >= 53
//   digits lies in the same gap between such points as the exact value, and
//   the sticky digit keeps it off a point when the exact value is not on one.
//   When S = 0 the fraction alone is the instant, read in place as ".fff"
//   with no copy and no length limit.
#include "daemon/wire.h"

#include <charconv>
#include <cmath>
#include <stdexcept>
#include <string>
#include <system_error>

#if defined(__SSE2__)
#include <emmintrin.h>
#endif

namespace plumbline::wire {

namespace {

constexpr std::array<bool, 256> make_stream_table() {
  std::array<bool, 256> t{};
  for (int c = '0'; c <= '9'; ++c)
    t[static_cast<std::size_t>(c)] = true;
  for (int c = 'A'; c <= 'Z'; ++c)
    t[static_cast<std::size_t>(c)] = true;
  for (int c = 'a'; c <= 'z'; ++c)
    t[static_cast<std::size_t>(c)] = true;
  for (char c : {'_', '.', ':', '/', '-'})
    t[static_cast<unsigned char>(c)] = true;
  return t;
}
constexpr std::array<bool, 256> stream_table = make_stream_table();

inline bool is_stream_char(char c) {
  return stream_table[static_cast<unsigned char>(c)];
}
inline bool is_blank(char c) {
  return c == ' ' || c == '\t';
}
inline bool is_digit(char c) {
  return c >= '0' && c <= '9';
}

inline const char* skip_blanks(const char* p, const char* end) {
  while (p != end && is_blank(*p))
    ++p;
  return p;
}
inline const char* trim_back(const char* begin, const char* e) {
  while (e != begin && is_blank(e[-1]))
    --e;
  return e;
}
inline const char* find_comma(const char* p, const char* end) {
  while (p != end && *p != ',')
    ++p;
  return p;
}

// Returns the first byte at or after p that is not a stream character (or
// end). With SSE2, 16 bytes at a time: a byte is in the set when it lies in
// '-' .. ':' (0x2d-0x3a: "-./", digits, ':'), is a letter ((c | 0x20) in
// 'a' .. 'z'), or is '_'. The unsigned test lo <= c <= hi is
// min(c - lo, hi - lo) == c - lo.
inline const char* scan_stream_name(const char* p, const char* end) {
#if defined(__SSE2__)
  const __m128i lo_punct = _mm_set1_epi8(0x2d);
  const __m128i span_punct = _mm_set1_epi8(0x3a - 0x2d);
  const __m128i case_bit = _mm_set1_epi8(0x20);
  const __m128i lo_alpha = _mm_set1_epi8('a');
  const __m128i span_alpha = _mm_set1_epi8('z' - 'a');
  const __m128i underscore = _mm_set1_epi8('_');
  while (end - p >= 16) {
    const __m128i c = _mm_loadu_si128(reinterpret_cast<const __m128i*>(p));
    const __m128i a = _mm_sub_epi8(c, lo_punct);
    const __m128i b = _mm_sub_epi8(_mm_or_si128(c, case_bit), lo_alpha);
    const __m128i in = _mm_or_si128(_mm_or_si128(_mm_cmpeq_epi8(_mm_min_epu8(a, span_punct), a),
                                                 _mm_cmpeq_epi8(_mm_min_epu8(b, span_alpha), b)),
                                    _mm_cmpeq_epi8(c, underscore));
    const auto outside = static_cast<unsigned>(~_mm_movemask_epi8(in)) & 0xffffu;
    if (outside != 0) return p + __builtin_ctz(outside);
    p += 16;
  }
#endif
  while (p != end && is_stream_char(*p))
    ++p;
  return p;
}

constexpr parse_outcome rejected(reject_reason r) {
  return {line_kind::rejected, r};
}

// Days from 1970-01-01 to y-m-d in the proleptic Gregorian calendar
// (Hinnant's days_from_civil). REQUIRES: 1 <= m <= 12, 1 <= d <= 31.
constexpr int64_t days_from_civil(int64_t y, unsigned m, unsigned d) {
  y -= m <= 2 ? 1 : 0;
  const int64_t era = (y >= 0 ? y : y - 399) / 400;
  const auto yoe = static_cast<unsigned>(y - era * 400);                 // [0, 399]
  const unsigned doy = (153 * (m > 2 ? m - 3 : m + 9) + 2) / 5 + d - 1;  // [0, 365]
  const unsigned doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;            // [0, 146096]
  return era * 146097 + static_cast<int64_t>(doe) - 719468;
}
static_assert(days_from_civil(1970, 1, 1) == 0);
// 946684800 / 86400: 2000-01-01T00:00:00Z is Unix second 946684800 (from memory).
static_assert(days_from_civil(2000, 1, 1) == 10957);

constexpr bool is_leap_year(int y) {
  return y % 4 == 0 && (y % 100 != 0 || y % 400 == 0);
}

constexpr unsigned days_in_month(int y, unsigned m) {
  constexpr unsigned days[12] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
  return m == 2 && is_leap_year(y) ? 29 : days[m - 1];
}

inline bool two_digits(const char* p, unsigned& v) {
  if (!is_digit(p[0]) || !is_digit(p[1])) return false;
  v = static_cast<unsigned>(p[0] - '0') * 10 + static_cast<unsigned>(p[1] - '0');
  return true;
}

// Clinger's fast path ("How to Read Floating Point Numbers Accurately",
// PLDI 1990). Reads [-]DIGITS[.DIGITS] from p (the '-' only when
// allow_minus) and returns the end of what it read, or nullptr when the text
// does not qualify. It qualifies with at most 19 digits, whose integer w (the
// digits without the point) is at most 2^53, and at most 22 fraction digits k:
// then w and 10^k are exact doubles, so the one IEEE division w / 10^k is the
// correctly rounded value, the same double from_chars gives. Whatever does
// not qualify (an exponent, more digits, "inf") goes to from_chars.
inline const char* fast_decimal(const char* p, const char* end, bool allow_minus, double& v) {
  static constexpr double powers_of_ten[] = {1e0,  1e1,  1e2,  1e3,  1e4,  1e5,  1e6,  1e7,
                                             1e8,  1e9,  1e10, 1e11, 1e12, 1e13, 1e14, 1e15,
                                             1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22};
  const bool negative = allow_minus && p != end && *p == '-';
  if (negative) ++p;
  const char* const int_begin = p;
  uint64_t w = 0;
  while (p != end && is_digit(*p))
    w = w * 10 + static_cast<uint64_t>(*p++ - '0');
  auto n_digits = static_cast<std::size_t>(p - int_begin);
  if (n_digits == 0) return nullptr;
  std::size_t frac_digits = 0;
  if (p != end && *p == '.') {
    const char* const frac_begin = ++p;
    while (p != end && is_digit(*p))
      w = w * 10 + static_cast<uint64_t>(*p++ - '0');
    frac_digits = static_cast<std::size_t>(p - frac_begin);
    if (frac_digits == 0) return nullptr;
    n_digits += frac_digits;
  }
  // At most 19 digits keep w below 10^19 < 2^64: it did not wrap.
  if (n_digits > 19 || frac_digits > 22 || w > (uint64_t{1} << 53)) return nullptr;
  const double x = static_cast<double>(w) / powers_of_ten[frac_digits];
  v = negative ? -x : x;
  return p;
}

// Reads the non-negative decimal [b, e) (digits with an optional fraction,
// already checked) as a time. A value so small that from_chars reports it out
// of range is the correctly rounded 0; a large one is refused.
inline bool read_time_double(const char* b, const char* e, double& v) {
  const auto r = std::from_chars(b, e, v, std::chars_format::general);
  if (r.ptr != e) return false;
  if (r.ec == std::errc()) return true;
  if (r.ec != std::errc::result_out_of_range) return false;
  for (const char* p = b; p != e && *p != '.'; ++p)
    if (*p != '0') return false;  // overflow
  v = 0.0;
  return true;
}

// unix-seconds = 1*DIGIT [ "." 1*DIGIT ].
bool parse_unix_seconds(const char* b, const char* e, double& out) {
  const char* p = b;
  while (p != e && is_digit(*p))
    ++p;
  if (p == b) return false;
  if (p != e) {
    if (*p != '.') return false;
    const char* f = ++p;
    while (p != e && is_digit(*p))
      ++p;
    if (p == f || p != e) return false;
  }
  double v;
  if (!read_time_double(b, e, v)) return false;
  if (!(v < time_limit)) return false;
  out = v;
  return true;
}

// RFC 3339 date-time (see wire.h), converted to Unix seconds.
bool parse_date_time(const char* b, const char* e, double& out) {
  const auto n = static_cast<std::size_t>(e - b);
  // "YYYY-MM-DDTHH:MM:SS" and at least "Z".
  if (n < 20) return false;
  unsigned yh, yl, mon, mday, hour, minute, sec;
  if (!two_digits(b, yh) || !two_digits(b + 2, yl) || b[4] != '-' || !two_digits(b + 5, mon) ||
      b[7] != '-' || !two_digits(b + 8, mday))
    return false;
  if (b[10] != 'T' && b[10] != 't' && b[10] != ' ') return false;
  if (!two_digits(b + 11, hour) || b[13] != ':' || !two_digits(b + 14, minute) || b[16] != ':' ||
      !two_digits(b + 17, sec))
    return false;
  const int year = static_cast<int>(yh * 100 + yl);
  if (mon < 1 || mon > 12 || mday < 1 || mday > days_in_month(year, mon)) return false;
  if (hour > 23 || minute > 59 || sec > 60) return false;

  const char* p = b + 19;
  const char* frac_dot = nullptr;  // the '.' of the fraction
  const char* frac_end = nullptr;
  if (*p == '.') {
    frac_dot = p++;
    while (p != e && is_digit(*p))
      ++p;
    if (p == frac_dot + 1) return false;
    frac_end = p;
  }
  if (p == e) return false;  // no offset: unqualified local time
  int64_t offset_seconds = 0;
  if (*p == 'Z' || *p == 'z') {
    ++p;
  } else if (*p == '+' || *p == '-') {
    unsigned oh, om;
    if (e - p != 6 || !two_digits(p + 1, oh) || p[3] != ':' || !two_digits(p + 4, om)) return false;
    if (oh > 23 || om > 59) return false;
    offset_seconds = static_cast<int64_t>(oh * 3600 + om * 60) * (*p == '-' ? -1 : 1);
    p += 6;
  } else {
    return false;
  }
  if (p != e) return false;

  const int64_t s = days_from_civil(year, mon, mday) * 86400 +
                    static_cast<int64_t>(hour * 3600 + minute * 60 + sec) - offset_seconds;
  // A leap second is 23:59:60 UTC, so the following second is a midnight.
  if (sec == 60 && (s % 86400 + 86400) % 86400 != 0) return false;
  if (s < 0 || static_cast<double>(s) >= time_limit) return false;

  double v;
  if (frac_dot == nullptr) {
    v = static_cast<double>(s);
  } else if (s == 0) {
    if (!read_time_double(frac_dot, frac_end, v)) return false;
  } else {
    constexpr std::size_t max_copied = 64;
    char buf[24 + max_copied + 1];
    char* w = std::to_chars(buf, buf + 24, s).ptr;
    *w++ = '.';
    const char* f = frac_dot + 1;
    const auto digits = static_cast<std::size_t>(frac_end - f);
    const std::size_t copied = digits < max_copied ? digits : max_copied;
    std::memcpy(w, f, copied);
    w += copied;
    for (const char* q = f + copied; q != frac_end; ++q) {
      if (*q != '0') {
        *w++ = '1';
        break;
      }
    }
    if (!read_time_double(buf, w, v)) return false;
  }
  if (!(v < time_limit)) return false;
  out = v;
  return true;
}

// One value field [b, e), non-empty and trimmed.
inline bool parse_value(const char* b, const char* e, double& v, reject_reason& why) {
  if (*b == '+') {
    ++b;
    if (b == e || *b == '+' || *b == '-') {
      why = reject_reason::bad_value;
      return false;
    }
  }
  const auto r = std::from_chars(b, e, v, std::chars_format::general);
  if (r.ptr != e || r.ec == std::errc::invalid_argument) {
    why = reject_reason::bad_value;
    return false;
  }
  if (r.ec != std::errc() || !std::isfinite(v)) {
    why = reject_reason::non_finite_value;
    return false;
  }
  return true;
}

}  // namespace

std::string_view reason_name(reject_reason r) {
  switch (r) {
    case reject_reason::line_too_long:
      return "line_too_long";
    case reject_reason::bad_stream_name:
      return "bad_stream_name";
    case reject_reason::bad_time:
      return "bad_time";
    case reject_reason::bad_value:
      return "bad_value";
    case reject_reason::non_finite_value:
      return "non_finite_value";
    case reject_reason::missing_value:
      return "missing_value";
    case reject_reason::too_many_values:
      return "too_many_values";
    case reject_reason::wrong_dimension:
      return "wrong_dimension";
    case reject_reason::too_many_streams:
      return "too_many_streams";
    case reject_reason::unmatched_stream:
      return "unmatched_stream";
  }
  return "unknown";
}

parse_outcome parse_line(std::string_view line, record& out) {
  const char* p = line.data();
  const char* end = p + line.size();
  if (p != end && end[-1] == '\r') --end;
  p = skip_blanks(p, end);
  if (p == end || *p == '#') return {line_kind::ignored, reject_reason::bad_value};

  // STREAM
  const char* const name = p;
  p = scan_stream_name(p, end);
  const auto name_len = static_cast<std::size_t>(p - name);
  p = skip_blanks(p, end);
  if (name_len == 0 || name_len > max_stream_name || (p != end && *p != ','))
    return rejected(reject_reason::bad_stream_name);
  if (p == end) return rejected(reject_reason::missing_value);
  ++p;

  // TIME. Plain unix-seconds directly followed by ',' take the fast path;
  // everything else is cut at its comma, trimmed and parsed in full.
  const char* const t = skip_blanks(p, end);
  const char* t_comma = nullptr;
  double tv;
  if (t != end && is_digit(*t)) {
    const char* const q = fast_decimal(t, end, false, tv);
    if (q != nullptr && q != end && *q == ',' && tv < time_limit) {
      out.has_time = true;
      out.time = tv;
      t_comma = q;
    }
  }
  if (t_comma == nullptr) {
    t_comma = find_comma(t, end);
    const char* const t_end = trim_back(t, t_comma);
    if (t == t_end) {
      out.has_time = false;
      out.time = 0;
    } else {
      const bool is_date = t_end - t > 4 && t[4] == '-';
      const bool ok =
          is_date ? parse_date_time(t, t_end, out.time) : parse_unix_seconds(t, t_end, out.time);
      if (!ok) return rejected(reject_reason::bad_time);
      out.has_time = true;
    }
  }
  if (t_comma == end) return rejected(reject_reason::missing_value);
  p = t_comma + 1;

  // VALUES. The same split between a fast path and the full parse.
  uint32_t dim = 0;
  for (;;) {
    const char* const v = skip_blanks(p, end);
    if (dim == max_values) return rejected(reject_reason::too_many_values);
    const char* comma = fast_decimal(v, end, true, out.values[dim]);
    if (comma == nullptr || (comma != end && *comma != ',')) {
      comma = find_comma(v, end);
      const char* const v_end = trim_back(v, comma);
      if (v == v_end) return rejected(reject_reason::missing_value);
      reject_reason why;
      if (!parse_value(v, v_end, out.values[dim], why)) return rejected(why);
    }
    ++dim;
    if (comma == end) break;
    p = comma + 1;
  }
  out.stream = std::string_view(name, name_len);
  out.dim = dim;
  return {line_kind::record, reject_reason::bad_value};
}

line_assembler::line_assembler(std::size_t max_line_bytes) {
  if (max_line_bytes < min_line_bytes || max_line_bytes > max_line_bytes_limit)
    throw std::invalid_argument("max_line_bytes is " + std::to_string(max_line_bytes) +
                                "; it must lie in [" + std::to_string(min_line_bytes) + ", " +
                                std::to_string(max_line_bytes_limit) + "]");
  buf_ = std::make_unique<char[]>(max_line_bytes);
  cap_ = max_line_bytes;
}

}  // namespace plumbline::wire
