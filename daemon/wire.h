// wire.h: the ingest wire format, one measurement record per line.
//
// Purpose. The daemon's TCP sessions and UDP receiver hand their bytes to
// this parser. `line_assembler` cuts a byte stream into lines (reassembling
// lines split across reads, dropping over-long ones), and `parse_line` turns
// one line into a `record`: a stream name, an optional timestamp and 1 to 64
// values. The parser does no I/O and allocates nothing per record; the
// assembler allocates its one buffer at construction.
//
// Grammar (ABNF-like; RFC 5234 core rules ALPHA, DIGIT, SP, HTAB, CR, LF):
//
//   line          = ( blank / comment / record ) [ CR ]  ; the LF ends the line
//                                                        ; and is not part of it
//   blank         = *WSP
//   comment       = *WSP "#" *( any byte except LF )
//   record        = stream-field "," time-field 1*64( "," value-field )
//   stream-field  = *WSP stream *WSP
//   time-field    = *WSP [ time ] *WSP                   ; empty: receipt time
//   value-field   = *WSP value *WSP
//   WSP           = SP / HTAB
//
//   stream        = 1*200( ALPHA / DIGIT / "_" / "." / ":" / "/" / "-" )
//
//   time          = unix-seconds / date-time
//   unix-seconds  = 1*DIGIT [ "." 1*DIGIT ]               ; no sign, no exponent
//   date-time     = full-date ( "T" / "t" / SP ) full-time  ; RFC 3339 5.6
//   full-date     = 4DIGIT "-" 2DIGIT "-" 2DIGIT          ; year-month-mday
//   full-time     = 2DIGIT ":" 2DIGIT ":" 2DIGIT [ "." 1*DIGIT ] time-offset
//   time-offset   = "Z" / "z" / ( "+" / "-" ) 2DIGIT ":" 2DIGIT
//
//   value         = [ "+" / "-" ] ( decimal / special )
//   decimal       = ( 1*DIGIT [ "." *DIGIT ] / "." 1*DIGIT )
//                   [ ( "e" / "E" ) [ "+" / "-" ] 1*DIGIT ]
//   special       = "inf" / "infinity" / "nan" [ "(" *( ALPHA / DIGIT / "_" ) ")" ]
//                   ; case-insensitive; always rejected as non_finite_value
//
// Rules beyond the grammar.
//   * Lines. A single CR before the LF is stripped. Spaces and tabs around
//     every field are trimmed; inside a field they are errors. There is no
//     quoting: a field cannot hold a comma.
//   * TIME. Empty means "stamp on receipt" (has_time = false). unix-seconds is
//     read with std::from_chars, so its double is the correctly rounded value
//     of the decimal text. date-time follows RFC 3339 section 5.6/5.7: month
//     01-12, day within its month (Gregorian leap years: divisible by 4, except
//     centuries not divisible by 400), hour 00-23, minute 00-59, second 00-60,
//     offset hour 00-23 and minute 00-59 ("-00:00" is UTC). The fraction may
//     have any number of digits; the result is the correctly rounded double
//     of the exact instant. A seconds field of 60 is a leap second and is
//     accepted only where the instant is 23:59:60 in UTC (where leap seconds
//     are inserted); it maps to the following second, 00:00:00 UTC of the next
//     day, which is what the POSIX "Seconds Since the Epoch" formula gives for
//     tm_sec = 60. A date-time without an offset is rejected (RFC 3339 4.4).
//     Either form must convert to 0 <= time < 253402300800 (1970-01-01T00:00Z
//     up to, not including, 10000-01-01T00:00Z); the bound applies to the
//     converted double.
//   * VALUE. Read with std::from_chars(chars_format::general), which must
//     consume the whole field. One leading "+" is also accepted (so "+1.5"
//     reads as 1.5; "+-1" and "++1" are bad values). Results are the
//     correctly rounded doubles of the text; subnormals and -0.0 are kept.
//     NaN, an infinity, and a number outside a double's range (magnitude above
//     about 1.8e308, or nonzero but so small that it would round to zero,
//     below about 2.5e-324) are non_finite_value.
//   * Rejections. The first fault from the left decides the reason: the
//     stream field, then the time field, then the value fields in order. A
//     line with fewer than three fields, or with an empty value field, is
//     missing_value; a 65th value field is too_many_values whatever it holds.
//     line_too_long is reported by the assembler (on_overlong), never by
//     parse_line. wrong_dimension, too_many_streams and unmatched_stream are
//     decided by the daemon's stream table; they are listed here so that every reason a
//     line can be dropped for has one label.
//
// Thread-safety. parse_line and for_each_line_in_datagram are pure functions.
// A line_assembler belongs to one connection and one thread at a time.
//
// Lifetimes. A std::string_view handed to on_line is valid only until that
// call returns: a line that lay wholly inside one feed() is a view into that
// input (valid as long as the input is), but a reassembled line is a view into
// the assembler's buffer, which the same feed() may overwrite. record::stream
// views the parsed line and lives as long as it. Copy what must outlive them.
#pragma once

#include <array>
#include <concepts>
#include <cstddef>
#include <cstdint>
#include <cstring>
#include <memory>
#include <span>
#include <string_view>

namespace plumbline::wire {

// Longest stream name, in bytes.
inline constexpr std::size_t max_stream_name = 200;
// Most values in one record (the largest dimension of a stream).
inline constexpr std::size_t max_values = 64;

// Limits of the assembler's line length (bytes before the LF, a CR included).
inline constexpr std::size_t min_line_bytes = 16;
inline constexpr std::size_t max_line_bytes_limit = std::size_t{1} << 20;
inline constexpr std::size_t default_max_line_bytes = 4096;

// First Unix second not accepted: 10000-01-01T00:00:00Z.
inline constexpr double time_limit = 253402300800.0;

// Why a line was dropped. Values are dense from 0, for counter arrays.
enum class reject_reason : uint8_t {
  line_too_long,     // longer than the assembler's max_line_bytes
  bad_stream_name,   // empty, longer than 200, or a byte outside the stream set
  bad_time,          // not unix-seconds or an RFC 3339 date-time, or out of range
  bad_value,         // a value field that is not a number
  non_finite_value,  // NaN, infinity, or outside a double's range
  missing_value,     // fewer than three fields, or an empty value field
  too_many_values,   // more than max_values value fields
  wrong_dimension,   // (stream table) value count differs from the stream's
  too_many_streams,  // (stream table) a new stream beyond the configured limit
  unmatched_stream,  // (stream table) a new stream that no configured group matches
};
inline constexpr std::size_t reject_reason_count = 10;

// The snake_case label of `r` ("line_too_long", ...), used as the value of
// the Prometheus label `reason`. An out-of-range value gives "unknown".
std::string_view reason_name(reject_reason r);

// One parsed measurement. Reused across lines: parse_line overwrites every
// member on success; on a rejection its contents are unspecified.
struct record {
  std::string_view stream;                  // a view into the parsed line
  bool has_time = false;                    // false: the line's TIME was empty
  double time = 0;                          // Unix seconds, UTC; meaningful when has_time
  uint32_t dim = 0;                         // number of values, 1 .. max_values
  std::array<double, max_values> values{};  // values[0 .. dim), all finite

  std::span<const double> value_span() const { return {values.data(), dim}; }
};

enum class line_kind : uint8_t { record, ignored, rejected };

// `reason` is meaningful only when kind == line_kind::rejected.
struct parse_outcome {
  line_kind kind = line_kind::ignored;
  reject_reason reason = reject_reason::bad_value;
};

// Parses one line, given without its LF (a trailing CR is stripped here).
// Blank and comment lines are `ignored` and leave `out` untouched.
parse_outcome parse_line(std::string_view line, record& out);

// Cuts a byte stream into lines.
//
// Every LF ends a line; the line handed on excludes the LF. A line is
// over-long when more than max_line_bytes bytes precede its LF: on_overlong()
// is called once for it as soon as that is known, and its bytes are
// discarded up to and including its LF; the lines after it are kept. A line
// wholly inside one feed() is passed as a view into that input without a
// copy; only the unfinished tail of an input is copied into the assembler's
// buffer (max_line_bytes, allocated at construction, never grown).
//
// Callbacks: on_line(std::string_view) and on_overlong(), any callables;
// they are called synchronously and must not call back into this assembler.
class line_assembler {
 public:
  // REQUIRES: min_line_bytes <= max_line_bytes <= max_line_bytes_limit;
  // otherwise throws std::invalid_argument (a configuration error, found at
  // start-up).
  explicit line_assembler(std::size_t max_line_bytes = default_max_line_bytes);

  line_assembler(line_assembler&&) noexcept = default;
  line_assembler& operator=(line_assembler&&) noexcept = default;

  std::size_t max_line_bytes() const { return cap_; }
  // Bytes of an unfinished line held in the buffer (0 while discarding).
  std::size_t pending_bytes() const { return len_; }
  // True while the rest of an over-long line is being skipped.
  bool discarding() const { return discarding_; }

  template <typename on_line_fn, typename on_overlong_fn>
  requires std::invocable<on_line_fn&, std::string_view> && std::invocable<on_overlong_fn&>
  void feed(std::span<const char> bytes, on_line_fn&& on_line, on_overlong_fn&& on_overlong);

  // End of input (connection closed, end of a datagram): delivers an
  // unfinished last line, if any, as a line of its own, and leaves the
  // assembler empty. An over-long line in progress was already reported when
  // it passed the limit and is dropped, so finish() never calls on_overlong;
  // it takes it to mirror feed().
  template <typename on_line_fn, typename on_overlong_fn>
  requires std::invocable<on_line_fn&, std::string_view> && std::invocable<on_overlong_fn&>
  void finish(on_line_fn&& on_line, on_overlong_fn&& on_overlong);

  // Forgets any unfinished line, for reuse on a new connection.
  void reset() {
    len_ = 0;
    discarding_ = false;
  }

 private:
  std::unique_ptr<char[]> buf_;
  std::size_t cap_ = 0;
  std::size_t len_ = 0;
  bool discarding_ = false;
};

// Splits one UDP datagram into lines: LF-separated, the last one may lack its
// LF (a datagram ending in LF has no empty line after it). Lines longer than
// max_line_bytes go to on_overlong() instead of on_line. No buffer is used:
// every line is a view into `datagram`.
template <typename on_line_fn, typename on_overlong_fn>
requires std::invocable<on_line_fn&, std::string_view> && std::invocable<on_overlong_fn&>
void for_each_line_in_datagram(std::string_view datagram, std::size_t max_line_bytes,
                               on_line_fn&& on_line, on_overlong_fn&& on_overlong) {
  const char* p = datagram.data();
  const char* const end = p + datagram.size();
  while (p != end) {
    const void* hit = std::memchr(p, '\n', static_cast<std::size_t>(end - p));
    const char* eol = hit ? static_cast<const char*>(hit) : end;
    const auto n = static_cast<std::size_t>(eol - p);
    if (n > max_line_bytes)
      on_overlong();
    else
      on_line(std::string_view(p, n));
    if (eol == end) break;
    p = eol + 1;
  }
}

template <typename on_line_fn, typename on_overlong_fn>
requires std::invocable<on_line_fn&, std::string_view> && std::invocable<on_overlong_fn&>
void line_assembler::feed(std::span<const char> bytes, on_line_fn&& on_line,
                          on_overlong_fn&& on_overlong) {
  const char* p = bytes.data();
  const char* const end = p + bytes.size();
  while (p != end) {
    const void* hit = std::memchr(p, '\n', static_cast<std::size_t>(end - p));
    const char* const eol = hit ? static_cast<const char*>(hit) : end;
    const auto n = static_cast<std::size_t>(eol - p);
    if (discarding_) {
      // The over-long line was reported; skip through its LF.
      if (!hit) return;
      discarding_ = false;
    } else if (len_ != 0) {
      // Continue the line held in the buffer.
      if (n > cap_ - len_) {
        on_overlong();
        len_ = 0;
        if (!hit) {
          discarding_ = true;
          return;
        }
      } else {
        std::memcpy(buf_.get() + len_, p, n);
        len_ += n;
        if (!hit) return;
        const std::string_view line(buf_.get(), len_);
        len_ = 0;
        on_line(line);
      }
    } else if (!hit) {
      // An unfinished tail: keep it for the next feed().
      if (n > cap_) {
        on_overlong();
        discarding_ = true;
      } else if (n != 0) {
        std::memcpy(buf_.get(), p, n);
        len_ = n;
      }
      return;
    } else if (n > cap_) {
      on_overlong();
    } else {
      on_line(std::string_view(p, n));
    }
    p = eol + 1;
  }
}

template <typename on_line_fn, typename on_overlong_fn>
requires std::invocable<on_line_fn&, std::string_view> && std::invocable<on_overlong_fn&>
void line_assembler::finish(on_line_fn&& on_line, on_overlong_fn&& /*on_overlong*/) {
  const std::size_t n = len_;
  const bool had_line = !discarding_ && n != 0;
  reset();
  // The buffer's bytes stay intact until the next feed().
  if (had_line) on_line(std::string_view(buf_.get(), n));
}

}  // namespace plumbline::wire
