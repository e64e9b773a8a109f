// wire_test.cc: the ingest wire format of daemon/wire.h.
//
// Outside sources, named beside each check:
//   * RFC 3339 (Klyne & Newman, 2002): the grammar of section 5.6, the
//     ranges of section 5.7 and the examples of section 5.8.
//   * Python's standard library, run live through /usr/bin/python3 by
//     tests/reference/wire_reference.py: datetime for the calendar and
//     offsets, fractions.Fraction for exact sums, float() (correctly rounded)
//     for decimal text. Answers come back as IEEE 754 bit patterns.
//   * IEEE 754 binary64 facts: the smallest subnormal is 2^-1074, the
//     smallest normal 2^-1022, the largest finite (2 - 2^-52) 2^1023, and
//     ties round to even.
//   * The POSIX "Seconds Since the Epoch" formula (XBD 4.16) for the leap
//     second mapping: tm_sec = 60 counts as the following second.
//   * std::from_chars itself, where wire.h promises "reads as from_chars does".
// Randomised cases are drawn from plumbline::rng with fixed seeds.
#include "daemon/wire.h"

#include <bit>
#include <catch2/catch.hpp>
#include <charconv>
#include <cmath>
#include <cstdint>
#include <limits>
#include <nlohmann/json.hpp>
#include <set>
#include <stdexcept>
#include <string>
#include <vector>

#include "core/rng.h"
#include "support/python.h"

namespace {

using nlohmann::json;
using plumbline::rng;
using plumbline::testing::run_python;
namespace wire = plumbline::wire;
using wire::line_kind;
using wire::reject_reason;

constexpr const char* script = "tests/reference/wire_reference.py";

struct parsed {
  wire::parse_outcome outcome;
  wire::record rec;
};

parsed parse(std::string_view line) {
  parsed p;
  p.outcome = wire::parse_line(line, p.rec);
  return p;
}

wire::record parse_ok(std::string_view line) {
  auto p = parse(line);
  INFO("line: " << std::string(line));
  REQUIRE(p.outcome.kind == line_kind::record);
  return p.rec;
}

reject_reason parse_rejected(std::string_view line) {
  auto p = parse(line);
  INFO("line: " << std::string(line));
  REQUIRE(p.outcome.kind == line_kind::rejected);
  return p.outcome.reason;
}

uint64_t bits_of(double x) {
  return std::bit_cast<uint64_t>(x);
}

// What from_chars itself makes of the whole of `text`.
double from_chars_value(std::string_view text) {
  double v = 0;
  const auto r = std::from_chars(text.data(), text.data() + text.size(), v);
  REQUIRE(r.ec == std::errc());
  REQUIRE(r.ptr == text.data() + text.size());
  return v;
}

std::string digits(rng& g, std::size_t n) {
  std::string s;
  for (std::size_t i = 0; i < n; ++i)
    s += static_cast<char>('0' + g.bounded(10));
  return s;
}

std::string two(unsigned v) {
  std::string s = std::to_string(v);
  return s.size() < 2 ? "0" + s : s;
}

// ---------------------------------------------------------------- records --

TEST_CASE("a typical record parses into stream, time and value", "[daemon][wire]") {
  const auto r = parse_ok("larkspur/line_b/fill_4,1764633600.25,502.13");
  CHECK(r.stream == "larkspur/line_b/fill_4");
  CHECK(r.has_time);
  // 1764633600.25 is exact in binary (0.25 = 2^-2), so the double is exact.
  CHECK(r.time == 1764633600.25);
  REQUIRE(r.dim == 1);
  CHECK(r.values[0] == 502.13);
  REQUIRE(r.value_span().size() == 1);
  CHECK(r.value_span().data() == r.values.data());
}

TEST_CASE("an empty time field means receipt time", "[daemon][wire]") {
  const auto r = parse_ok("larkspur/pasteuriser_1/temp,,72.4,72.6");
  CHECK_FALSE(r.has_time);
  REQUIRE(r.dim == 2);
  CHECK(r.values[0] == 72.4);
  CHECK(r.values[1] == 72.6);
  const auto blank_time = parse_ok("larkspur/pasteuriser_1/temp, \t ,72.4");
  CHECK_FALSE(blank_time.has_time);
}

TEST_CASE("the stream view points into the parsed line", "[daemon][wire]") {
  const std::string line = "  larkspur:line_a.capper-2 , 10 , 1.5";
  const auto r = parse_ok(line);
  CHECK(r.stream == "larkspur:line_a.capper-2");
  CHECK(r.stream.data() == line.data() + 2);
}

TEST_CASE("spaces and tabs around every field are trimmed", "[daemon][wire]") {
  const auto r = parse_ok(" \tlarkspur/line_b/torque_1 \t,\t 1764633600 ,  3.5 \t, -2\t");
  CHECK(r.stream == "larkspur/line_b/torque_1");
  CHECK(r.time == 1764633600.0);
  REQUIRE(r.dim == 2);
  CHECK(r.values[0] == 3.5);
  CHECK(r.values[1] == -2.0);
  // Inside a field, a blank is an error of that field.
  CHECK(parse_rejected("larkspur line_b,1,2") == reject_reason::bad_stream_name);
  CHECK(parse_rejected("larkspur/line_b,17646 33600,2") == reject_reason::bad_time);
  CHECK(parse_rejected("larkspur/line_b,1,2 5") == reject_reason::bad_value);
}

TEST_CASE("a CR before the line end is stripped once", "[daemon][wire]") {
  const auto r = parse_ok("larkspur/line_b/fill_4,1,2.5\r");
  REQUIRE(r.dim == 1);
  CHECK(r.values[0] == 2.5);
  CHECK(parse("\r").outcome.kind == line_kind::ignored);
  CHECK(parse("# comment\r").outcome.kind == line_kind::ignored);
  // Only one CR belongs to the line end; a second is part of the value.
  CHECK(parse_rejected("larkspur/line_b/fill_4,1,2.5\r\r") == reject_reason::bad_value);
  // A CR elsewhere is not a line end.
  CHECK(parse_rejected("larkspur/line_b/fill_4,1\r,2.5") == reject_reason::bad_time);
}

TEST_CASE("blank and comment lines are ignored and leave the record untouched", "[daemon][wire]") {
  wire::record r;
  r.dim = 7;
  r.stream = "before";
  for (std::string_view line :
       {"", " ", "\t \t", "#", "# larkspur/line_b,1,2", "   # x,y,z", "\t#", "#,,,,,,"}) {
    INFO("line: " << std::string(line));
    const auto o = wire::parse_line(line, r);
    CHECK(o.kind == line_kind::ignored);
  }
  CHECK(r.dim == 7);
  CHECK(r.stream == "before");
  // '#' is a comment only as the first non-blank character.
  CHECK(parse_rejected("larkspur#1,1,2") == reject_reason::bad_stream_name);
}

// ------------------------------------------------------------- rejections --

TEST_CASE("every reject reason has its snake_case label", "[daemon][wire]") {
  // The labels are the values of the Prometheus label `reason`; Prometheus
  // label values may be any UTF-8, but the project keeps them snake_case.
  const std::vector<std::pair<reject_reason, std::string_view>> expected = {
      {reject_reason::line_too_long, "line_too_long"},
      {reject_reason::bad_stream_name, "bad_stream_name"},
      {reject_reason::bad_time, "bad_time"},
      {reject_reason::bad_value, "bad_value"},
      {reject_reason::non_finite_value, "non_finite_value"},
      {reject_reason::missing_value, "missing_value"},
      {reject_reason::too_many_values, "too_many_values"},
      {reject_reason::wrong_dimension, "wrong_dimension"},
      {reject_reason::too_many_streams, "too_many_streams"},
      {reject_reason::unmatched_stream, "unmatched_stream"},
  };
  REQUIRE(expected.size() == wire::reject_reason_count);
  std::set<std::string_view> seen;
  for (std::size_t i = 0; i < expected.size(); ++i) {
    CHECK(static_cast<std::size_t>(expected[i].first) == i);  // dense from 0
    CHECK(wire::reason_name(expected[i].first) == expected[i].second);
    seen.insert(wire::reason_name(expected[i].first));
  }
  CHECK(seen.size() == wire::reject_reason_count);
  CHECK(wire::reason_name(static_cast<reject_reason>(wire::reject_reason_count)) == "unknown");
}

TEST_CASE("bad stream names are rejected", "[daemon][wire]") {
  for (std::string_view line : {",1,2", " ,1,2", "larkspur/line b,1,2", "larkspur\xc3\xa9,1,2",
                                "line;b,1,2", "line\"b\",1,2", "line\tb,1,2", "line*,1,2"}) {
    INFO("line: " << std::string(line));
    CHECK(parse_rejected(line) == reject_reason::bad_stream_name);
  }
  // A NUL byte is not in the stream set.
  CHECK(parse_rejected(std::string_view("line\0b,1,2", 10)) == reject_reason::bad_stream_name);
  // Every character of the documented set is accepted.
  const auto r = parse_ok("AZaz09_.:/-,1,2");
  CHECK(r.stream == "AZaz09_.:/-");
}

TEST_CASE("every byte at every position of a stream name is judged by the stream set",
          "[daemon][wire]") {
  // The set of wire.h: ASCII letters, digits and _ . : / -. Names of 40 bytes
  // exercise the 16-byte block scan and its scalar tail at every offset.
  auto in_set = [](int c) {
    return (c >= 'A' && c <= 'Z') || (c >= 'a' && c <= 'z') || (c >= '0' && c <= '9') || c == '_' ||
           c == '.' || c == ':' || c == '/' || c == '-';
  };
  for (int c = 0; c < 256; ++c) {
    if (c == ',') continue;  // a comma ends the field instead
    for (std::size_t pos = 0; pos < 40; ++pos) {
      std::string name(40, 'k');
      name[pos] = static_cast<char>(c);
      const std::string line = name + ",1,2";  // record::stream views it
      const auto p = parse(line);
      INFO("byte " << c << " at " << pos);
      if (in_set(c)) {
        REQUIRE(p.outcome.kind == line_kind::record);
        CHECK(p.rec.stream == name);
      } else if ((c == ' ' || c == '\t') && (pos == 0 || pos == 39)) {
        REQUIRE(p.outcome.kind == line_kind::record);  // blanks around a field are trimmed
        CHECK(p.rec.stream == std::string(39, 'k'));
      } else if (c == '#' && pos == 0) {
        CHECK(p.outcome.kind == line_kind::ignored);  // a comment line
      } else {
        REQUIRE(p.outcome.kind == line_kind::rejected);
        CHECK(p.outcome.reason == reject_reason::bad_stream_name);
      }
    }
  }
}

TEST_CASE("stream names of 200 characters pass and of 201 are rejected", "[daemon][wire]") {
  const std::string name200(200, 's');
  const auto r = parse_ok(name200 + ",1,2");
  CHECK(r.stream.size() == 200);
  CHECK(parse_rejected(name200 + "s,1,2") == reject_reason::bad_stream_name);
  CHECK(parse_rejected(std::string(5000, 's') + ",1,2") == reject_reason::bad_stream_name);
}

TEST_CASE("lines with fewer than three fields or an empty value are missing a value",
          "[daemon][wire]") {
  for (std::string_view line :
       {"larkspur/line_b", "larkspur/line_b ", "larkspur/line_b,", "larkspur/line_b,1",
        "larkspur/line_b,1,", "larkspur/line_b,1, ", "larkspur/line_b,,", "larkspur/line_b,1,2,",
        "larkspur/line_b,1,,2", "larkspur/line_b,1,2, \t,3"}) {
    INFO("line: " << std::string(line));
    CHECK(parse_rejected(line) == reject_reason::missing_value);
  }
}

TEST_CASE("64 values pass and a 65th field is too many", "[daemon][wire]") {
  std::string line = "larkspur/line_b/vision_grid,1764633600";
  for (int i = 0; i < 64; ++i)
    line += "," + std::to_string(i) + ".5";
  const auto r = parse_ok(line);
  REQUIRE(r.dim == 64);
  for (uint32_t i = 0; i < r.dim; ++i)
    CHECK(r.values[i] == i + 0.5);
  CHECK(r.value_span().size() == 64);
  CHECK(parse_rejected(line + ",64.5") == reject_reason::too_many_values);
  // The 65th field is too many whatever it holds.
  CHECK(parse_rejected(line + ",") == reject_reason::too_many_values);
  CHECK(parse_rejected(line + ",x") == reject_reason::too_many_values);
}

TEST_CASE("the first fault from the left decides the reason", "[daemon][wire]") {
  CHECK(parse_rejected("bad name,x,nan") == reject_reason::bad_stream_name);
  CHECK(parse_rejected("larkspur/line_b,x,nan") == reject_reason::bad_time);
  CHECK(parse_rejected("larkspur/line_b,1,x,nan") == reject_reason::bad_value);
  CHECK(parse_rejected("larkspur/line_b,1,nan,x") == reject_reason::non_finite_value);
  CHECK(parse_rejected("larkspur/line_b,1,,x") == reject_reason::missing_value);
}

// ----------------------------------------------------------------- values --

TEST_CASE("values that are not numbers are bad values", "[daemon][wire]") {
  for (std::string_view v :
       {"x",   "1x",  "1.2.3", "0x10", "0x1p3", "1e",   "1e+", "e5",    ".",   "-",           "+",
        "++1", "+-1", "-+1",   "--1",  "1,5e",  "1 .5", "one", "1_000", "1d5", "\xef\xbc\x91"}) {
    INFO("value: " << std::string(v));
    CHECK(parse_rejected("larkspur/line_b," + std::string("1,") + std::string(v)) ==
          reject_reason::bad_value);
  }
}

TEST_CASE("NaN, infinities and out-of-range numbers are non-finite values", "[daemon][wire]") {
  // IEEE 754 binary64: the largest finite double is about 1.7976931348623157e308,
  // so 1.8e308 overflows; the smallest subnormal is 2^-1074 (about
  // 4.94e-324), and a decimal below half of it (about 2.47e-324) rounds to 0.
  for (std::string_view v : {"nan", "NaN", "-nan", "nan(123)", "inf", "-inf", "+inf", "Infinity",
                             "INF", "1e999", "-1e999", "1.8e308", "1e-400", "-1e-400", "2e-324"}) {
    INFO("value: " << std::string(v));
    CHECK(parse_rejected("larkspur/line_b,1," + std::string(v)) == reject_reason::non_finite_value);
  }
}

TEST_CASE("values at the edges of a double read exactly", "[daemon][wire]") {
  // Expected values are IEEE 754 binary64 facts built with ldexp, not literals.
  struct edge {
    const char* text;
    double want;
  };
  const double max_finite = std::ldexp(2.0 - std::ldexp(1.0, -52), 1023);
  const edge edges[] = {
      {"4.9406564584124654e-324", std::ldexp(1.0, -1074)},  // smallest subnormal
      {"3e-324", std::ldexp(1.0, -1074)},                   // rounds up to it
      {"-4.9406564584124654e-324", -std::ldexp(1.0, -1074)},
      {"2.2250738585072014e-308", std::ldexp(1.0, -1022)},  // smallest normal
      {"1.7976931348623157e308", max_finite},
      {"1e308", 1e308},
      {"+1e308", 1e308},
      {"-1e308", -1e308},
      {"9007199254740993", std::ldexp(1.0, 53)},      // 2^53 + 1: tie, rounds to even 2^53
      {"9007199254740995", std::ldexp(1.0, 53) + 4},  // 2^53 + 3: tie, rounds to even
      {"0.1", 0x1.999999999999ap-4},                  // the binary64 nearest 1/10
      {"+1.5", 1.5},
      {"1.", 1.0},
      {".5", 0.5},
      {"1E3", 1000.0},
      {"000012.5e-1", 1.25},
  };
  for (const auto& e : edges) {
    INFO("value: " << e.text);
    const auto r = parse_ok(std::string("larkspur/line_b,1,") + e.text);
    REQUIRE(r.dim == 1);
    CHECK(bits_of(r.values[0]) == bits_of(e.want));
  }
  const auto neg_zero = parse_ok("larkspur/line_b,1,-0.0");
  CHECK(neg_zero.values[0] == 0.0);
  CHECK(std::signbit(neg_zero.values[0]));
  const auto pos_zero = parse_ok("larkspur/line_b,1,+0");
  CHECK_FALSE(std::signbit(pos_zero.values[0]));
}

TEST_CASE("plain decimals on the fast path read exactly as from_chars reads them",
          "[daemon][wire]") {
  // wire.cc reads [-]DIGITS[.DIGITS] of up to 19 digits with Clinger's fast
  // path; from_chars is the definition it must match bit for bit. The cases
  // straddle each of its limits: 19 and 20 digits, w = 2^53 and 2^53 + 1,
  // 22 and 23 fraction digits.
  std::vector<std::string> texts = {"0",
                                    "-0",
                                    "0.0",
                                    "-0.000",
                                    "1",
                                    "502.13",
                                    "-502.13",
                                    "9007199254740992",
                                    "9007199254740993",
                                    "900719925474099.3",
                                    "90071992547409.93",
                                    "1234567890123456789",
                                    "12345678901234567890",
                                    "0.1234567890123456789",
                                    "0.0000000000000000000001",
                                    "0.00000000000000000000001",
                                    "0.9999999999999999999",
                                    "1764633600.25"};
  rng g(5081990);
  for (int i = 0; i < 20000; ++i) {
    std::string t = g.bounded(4) == 0 ? "-" : "";
    const std::size_t total = 1 + g.bounded(21);
    const std::size_t frac = g.bounded(static_cast<uint32_t>(total));
    t += digits(g, total - frac);
    if (frac != 0) t += "." + digits(g, frac);
    texts.push_back(t);
  }
  for (const auto& t : texts) {
    INFO("value: " << t);
    const auto r = parse_ok("larkspur/line_b,1," + t + ",7");
    REQUIRE(r.dim == 2);
    CHECK(bits_of(r.values[0]) == bits_of(from_chars_value(t)));
    const auto last = parse_ok("larkspur/line_b,1,7," + t);
    CHECK(bits_of(last.values[1]) == bits_of(from_chars_value(t)));
    if (t[0] != '-') {
      // The same text as unix seconds, when in range.
      const double want = from_chars_value(t);
      const auto p = parse("larkspur/line_b," + t + ",1");
      if (want < wire::time_limit) {
        REQUIRE(p.outcome.kind == line_kind::record);
        CHECK(bits_of(p.rec.time) == bits_of(want));
      } else {
        CHECK(p.outcome.kind == line_kind::rejected);
      }
    }
  }
}

TEST_CASE("random decimal values read as Python's float reads them", "[daemon][wire]") {
  // Reference: CPython float() (correctly rounded, dtoa.c), run live.
  rng g(20251202);
  std::vector<std::string> texts;
  for (int i = 0; i < 3000; ++i) {
    std::string s;
    if (g.bounded(2)) s += '-';
    const std::size_t int_digits = g.bounded(20);
    const std::size_t frac_digits = g.bounded(3) == 0 ? 0 : 1 + g.bounded(25);
    s += digits(g, int_digits);
    if (frac_digits != 0 || int_digits == 0)
      s += "." + digits(g, frac_digits == 0 ? 1 : frac_digits);
    if (g.bounded(3) != 0) {
      // Exponents from -345 to 330 cover underflow, subnormals and overflow.
      const int exp10 = static_cast<int>(g.bounded(676)) - 345;
      s += (g.bounded(2) ? "e" : "E") + std::to_string(exp10);
    }
    texts.push_back(s);
  }
  const json answer = run_python(script, json{{"values", texts}});
  REQUIRE(answer["values"].size() == texts.size());
  int checked_ok = 0, checked_overflow = 0, checked_underflow = 0;
  for (std::size_t i = 0; i < texts.size(); ++i) {
    INFO("value: " << texts[i]);
    const auto& want = answer["values"][i];
    const auto p = parse("larkspur/line_b,1," + texts[i]);
    const std::string outcome = want["outcome"];
    if (outcome == "ok") {
      REQUIRE(p.outcome.kind == line_kind::record);
      CHECK(bits_of(p.rec.values[0]) == want["bits"].get<uint64_t>());
      ++checked_ok;
    } else {
      REQUIRE(p.outcome.kind == line_kind::rejected);
      CHECK(p.outcome.reason == reject_reason::non_finite_value);
      ++(outcome == "overflow" ? checked_overflow : checked_underflow);
    }
  }
  // The draw covers all three outcomes.
  CHECK(checked_ok > 1000);
  CHECK(checked_overflow > 20);
  CHECK(checked_underflow > 20);
}

// ----------------------------------------------------------- unix seconds --

TEST_CASE("unix seconds read exactly as from_chars reads them", "[daemon][wire]") {
  for (std::string_view t : {"0", "0.0", "1", "1764633600", "1764633600.25", "1764633600.1",
                             "1764633600.123456789", "0000001764633600.5", "0.000000000000001",
                             "253402300799", "253402300799.99998", "482196050.52"}) {
    INFO("time: " << std::string(t));
    const auto r = parse_ok("larkspur/line_b," + std::string(t) + ",1");
    CHECK(r.has_time);
    CHECK(bits_of(r.time) == bits_of(from_chars_value(t)));
  }
}

TEST_CASE("unix seconds outside the grammar or the range are bad times", "[daemon][wire]") {
  // 253402300800 is 10000-01-01T00:00:00Z (checked by Python in the date-time
  // cases below); 253402300799.99999999 rounds up to it and is out as well.
  for (std::string_view t : {"-1", "+1", "1e9", "1E9", "1.", ".5", "1..2", "1.2.3", "0x10", "inf",
                             "nan", "12a", "253402300800", "253402300800.0",
                             "253402300799.99999999", "999999999999999999999999", "1_000"}) {
    INFO("time: " << std::string(t));
    CHECK(parse_rejected("larkspur/line_b," + std::string(t) + ",1") == reject_reason::bad_time);
  }
}

TEST_CASE("random unix seconds read as Python's float reads them", "[daemon][wire]") {
  // Reference: CPython float(), run live; range [0, 253402300800) applied there.
  rng g(7001);
  std::vector<std::string> texts;
  for (int i = 0; i < 1000; ++i) {
    std::string s = digits(g, 1 + g.bounded(13));
    if (g.bounded(4) != 0) s += "." + digits(g, 1 + g.bounded(30));
    texts.push_back(s);
  }
  const json answer = run_python(script, json{{"unix_seconds", texts}});
  REQUIRE(answer["unix_seconds"].size() == texts.size());
  int accepted = 0, refused = 0;
  for (std::size_t i = 0; i < texts.size(); ++i) {
    INFO("time: " << texts[i]);
    const auto& want = answer["unix_seconds"][i];
    const auto p = parse("larkspur/line_b," + texts[i] + ",1");
    if (want.is_null()) {
      REQUIRE(p.outcome.kind == line_kind::rejected);
      CHECK(p.outcome.reason == reject_reason::bad_time);
      ++refused;
    } else {
      REQUIRE(p.outcome.kind == line_kind::record);
      CHECK(bits_of(p.rec.time) == want.get<uint64_t>());
      ++accepted;
    }
  }
  CHECK(accepted > 500);
  CHECK(refused > 20);
}

// -------------------------------------------------------------- RFC 3339 --

TEST_CASE("the RFC 3339 section 5.8 examples convert to their Unix seconds", "[daemon][wire]") {
  // Hand values, each justified, then the same strings checked by Python:
  //  1985-04-12T23:20:50.52Z: 1985-04-12 is day 5580 after 1970-01-01, so
  //    5580 * 86400 + 23 * 3600 + 20 * 60 + 50 = 482196050, plus .52.
  //  1996-12-19T16:39:57-08:00 is 1996-12-20T00:39:57Z: day 9850, so
  //    9850 * 86400 + 39 * 60 + 57 = 851042397.
  //  1990-12-31T23:59:60Z (a leap second) and 1990-12-31T15:59:60-08:00 (the
  //    same instant) map to the following second, 1991-01-01T00:00:00Z =
  //    day 7670 * 86400 = 662688000 (the POSIX formula with tm_sec = 60).
  //  1937-01-01T12:00:27.87+00:20 is before 1970 and out of range.
  struct example {
    const char* text;
    double want;
  };
  const example examples[] = {
      {"1985-04-12T23:20:50.52Z", 482196050.52},
      {"1996-12-19T16:39:57-08:00", 851042397.0},
      {"1990-12-31T23:59:60Z", 662688000.0},
      {"1990-12-31T15:59:60-08:00", 662688000.0},
  };
  std::vector<std::string> texts;
  for (const auto& e : examples) {
    INFO("time: " << e.text);
    const auto r = parse_ok(std::string("larkspur/line_b,") + e.text + ",1");
    CHECK(r.has_time);
    CHECK(bits_of(r.time) == bits_of(e.want));
    texts.emplace_back(e.text);
  }
  CHECK(parse_rejected("larkspur/line_b,1937-01-01T12:00:27.87+00:20,1") ==
        reject_reason::bad_time);
  texts.emplace_back("1937-01-01T12:00:27.87+00:20");

  const json answer = run_python(script, json{{"date_times", texts}});
  REQUIRE(answer["date_times"].size() == texts.size());
  for (std::size_t i = 0; i < std::size(examples); ++i) {
    INFO("time: " << texts[i]);
    REQUIRE_FALSE(answer["date_times"][i].is_null());
    CHECK(answer["date_times"][i].get<uint64_t>() == bits_of(examples[i].want));
  }
  CHECK(answer["date_times"][std::size(examples)].is_null());
}

TEST_CASE("RFC 3339 spellings with t, z and a space separator are accepted", "[daemon][wire]") {
  // RFC 3339 section 5.6, NOTE: 'T' and 'Z' may be lower case, and the 'T'
  // may be replaced by a space.
  for (std::string_view t :
       {"1985-04-12t23:20:50.52z", "1985-04-12 23:20:50.52Z", "1985-04-12T23:20:50.52+00:00",
        "1985-04-12T23:20:50.52-00:00", " 1985-04-12 23:20:50.52z\t"}) {
    INFO("time: " << std::string(t));
    const auto r = parse_ok("larkspur/line_b," + std::string(t) + ",1");
    CHECK(r.time == 482196050.52);
  }
}

TEST_CASE("RFC 3339 date-times outside the grammar or the ranges are bad times", "[daemon][wire]") {
  for (std::string_view t : {
           "2025-02-29T00:00:00Z",           // 2025 is not a leap year
           "2100-02-29T00:00:00Z",           // a century not divisible by 400
           "2025-04-31T00:00:00Z",           // April has 30 days
           "2025-13-01T00:00:00Z",           // month 13
           "2025-00-01T00:00:00Z",           // month 0
           "2025-01-00T00:00:00Z",           // day 0
           "2025-01-32T00:00:00Z",           // day 32
           "2025-01-01T24:00:00Z",           // hour 24
           "2025-01-01T00:60:00Z",           // minute 60
           "2025-01-01T00:00:61Z",           // second 61
           "2025-01-01T12:00:60Z",           // 60 away from 23:59 UTC
           "1990-12-31T23:59:60+01:00",      // 22:59:60 UTC
           "2025-01-01T00:00:00",            // no offset (RFC 3339 4.4)
           "2025-01-01T00:00:00+24:00",      // offset hour 24
           "2025-01-01T00:00:00+01:60",      // offset minute 60
           "2025-01-01T00:00:00+0100",       // offset without ':'
           "2025-01-01T00:00:00+01",         // offset without minutes
           "2025-01-01T00:00:00.Z",          // fraction without digits
           "2025-01-01T00:00:00,5Z",         // decimal comma (a field separator here)
           "2025-01-01T00:00Z",              // no seconds
           "2025-01-01X00:00:00Z",           // separator
           "2025-1-01T00:00:00Z",            // one-digit month
           "25-01-01T00:00:00Z",             // two-digit year
           "2025-01-01T00:00:00ZZ",          // trailing text
           "2025-01-01T00:00:00Z+01:00",     // two offsets
           "2025-01-01",                     // a date alone
           "1969-12-31T23:59:59Z",           // before 1970
           "1970-01-01T00:59:59+01:00",      // 1969-12-31T23:59:59Z
           "9999-12-31T23:59:59-00:01",      // 10000-01-01T00:00:59Z
           "9999-12-31T23:59:60Z",           // maps to 10000-01-01T00:00:00Z
           "9999-12-31T23:59:59.99999999Z",  // its double rounds up to the limit
       }) {
    INFO("time: " << std::string(t));
    CHECK(parse_rejected("larkspur/line_b," + std::string(t) + ",1") == reject_reason::bad_time);
  }
}

TEST_CASE("RFC 3339 date-times at the edges of the range are accepted", "[daemon][wire]") {
  // 253402300799 = 10000-01-01T00:00:00Z minus one second; the Unix second of
  // 10000-01-01 is 2932897 days * 86400 (checked by Python below).
  struct edge {
    const char* text;
    double want;
  };
  const edge edges[] = {
      {"1970-01-01T00:00:00Z", 0.0},
      {"1970-01-01T01:00:00+01:00", 0.0},
      {"1969-12-31T23:00:00-01:00", 0.0},
      {"1969-12-31T23:59:60Z", 0.0},  // leap second mapped to the following second
      {"1969-12-31T23:59:60.25Z", 0.25},
      {"9999-12-31T23:59:59Z", 253402300799.0},
      {"2000-02-29T12:00:00Z", 951825600.0},  // 2000 is a leap year (divisible by 400)
      {"2024-02-29T00:00:00Z", 1709164800.0},
  };
  std::vector<std::string> texts;
  for (const auto& e : edges) {
    INFO("time: " << e.text);
    const auto r = parse_ok(std::string("larkspur/line_b,") + e.text + ",1");
    CHECK(bits_of(r.time) == bits_of(e.want));
    texts.emplace_back(e.text);
  }
  const json answer = run_python(script, json{{"date_times", texts}});
  for (std::size_t i = 0; i < texts.size(); ++i) {
    INFO("time: " << texts[i]);
    REQUIRE_FALSE(answer["date_times"][i].is_null());
    CHECK(answer["date_times"][i].get<uint64_t>() == bits_of(edges[i].want));
  }
}

TEST_CASE("long RFC 3339 fractions round once and correctly", "[daemon][wire]") {
  // 1 + 2^-53 is the midpoint between the doubles 1 and 1 + 2^-52; its
  // decimal expansion has exactly 53 fraction digits. On the midpoint, ties
  // round to even (to 1); a nonzero digit far beyond the 64th fraction digit
  // must still push it up, and one just below must keep it down (IEEE 754
  // roundTiesToEven). The same strings are checked by Python below.
  const std::string mid = "00000000000000011102230246251565404236316680908203125";
  const std::string below = "00000000000000011102230246251565404236316680908203124999999999";
  const std::vector<std::pair<std::string, double>> cases = {
      {"1970-01-01T00:00:01." + mid + "Z", 1.0},
      {"1970-01-01T00:00:01." + mid + std::string(40, '0') + "Z", 1.0},
      {"1970-01-01T00:00:01." + mid + std::string(40, '0') + "1Z", 1.0 + std::ldexp(1.0, -52)},
      {"1970-01-01T00:00:01." + below + std::string(40, '9') + "Z", 1.0},
      // The instant 0 + a tiny fraction: read in place, any length.
      {"1970-01-01T00:00:00." + std::string(330, '0') + "1Z", 0.0},
      {"1970-01-01T00:00:00." + std::string(300, '0') + "1Z", 1e-301},
  };
  std::vector<std::string> texts;
  for (const auto& [text, want] : cases) {
    INFO("time: " << text);
    const auto p = parse("larkspur/line_b," + text + ",1");
    REQUIRE(p.outcome.kind == line_kind::record);
    CHECK(bits_of(p.rec.time) == bits_of(want));
    texts.push_back(text);
  }
  const json answer = run_python(script, json{{"date_times", texts}});
  for (std::size_t i = 0; i < texts.size(); ++i) {
    INFO("time: " << texts[i]);
    REQUIRE_FALSE(answer["date_times"][i].is_null());
    CHECK(answer["date_times"][i].get<uint64_t>() == bits_of(cases[i].second));
  }
}

TEST_CASE("random RFC 3339 date-times convert as Python's datetime does", "[daemon][wire]") {
  // Reference: datetime.strptime and datetime arithmetic, plus Fraction for
  // the fraction, run live. The draw includes invalid calendar dates, clock
  // fields just out of range, leap seconds valid and not, offsets, long
  // fractions and both ends of the accepted range.
  rng g(3339);
  std::vector<std::string> texts;
  for (int i = 0; i < 4000; ++i) {
    unsigned year;
    switch (g.bounded(8)) {
      case 0:
        year = 1969 + g.bounded(2);
        break;
      case 1:
        year = 9998 + g.bounded(2);
        break;
      case 2:
        year = 1900 + 100 * g.bounded(5);
        break;  // century leap rules
      default:
        year = 1970 + g.bounded(200);
        break;
    }
    const unsigned month = g.bounded(20) == 0 ? 13 * g.bounded(2) : 1 + g.bounded(12);
    const unsigned day = g.bounded(4) == 0 ? 28 + g.bounded(4) : 1 + g.bounded(31);
    unsigned hour = g.bounded(30) == 0 ? 24 : g.bounded(24);
    unsigned minute = g.bounded(30) == 0 ? 60 : g.bounded(60);
    unsigned second = g.bounded(10) == 0 ? 60 : g.bounded(60);
    std::string offset;
    switch (g.bounded(5)) {
      case 0:
        offset = "Z";
        break;
      case 1:
        offset = "z";
        break;
      default: {
        const unsigned oh = g.bounded(40) == 0 ? 24 : g.bounded(24);
        const unsigned om = g.bounded(40) == 0 ? 60 : 15 * g.bounded(4) + (g.bounded(4) == 0);
        offset = (g.bounded(2) ? "+" : "-") + two(oh) + ":" + two(om);
      }
    }
    if (g.bounded(6) == 0) {  // aim at leap seconds that are valid in UTC
      hour = 23;
      minute = 59;
      second = 60;
      offset = "Z";
    }
    std::string t = std::to_string(year);
    t = std::string(4 - t.size(), '0') + t;
    const char seps[] = {'T', 't', ' '};
    t += "-" + two(month) + "-" + two(day) + seps[g.bounded(3)] + two(hour) + ":" + two(minute) +
         ":" + two(second);
    if (g.bounded(2)) t += "." + digits(g, 1 + g.bounded(g.bounded(4) == 0 ? 90 : 12));
    texts.push_back(t + offset);
  }
  const json answer = run_python(script, json{{"date_times", texts}});
  REQUIRE(answer["date_times"].size() == texts.size());
  int accepted = 0, refused = 0;
  for (std::size_t i = 0; i < texts.size(); ++i) {
    INFO("time: " << texts[i]);
    const auto& want = answer["date_times"][i];
    const auto p = parse("larkspur/line_b," + texts[i] + ",1");
    if (want.is_null()) {
      REQUIRE(p.outcome.kind == line_kind::rejected);
      CHECK(p.outcome.reason == reject_reason::bad_time);
      ++refused;
    } else {
      REQUIRE(p.outcome.kind == line_kind::record);
      CHECK(bits_of(p.rec.time) == want.get<uint64_t>());
      ++accepted;
    }
  }
  CHECK(accepted > 1500);
  CHECK(refused > 500);
}

// --------------------------------------------------------------- assembler --

struct collected {
  std::vector<std::string> lines;
  int overlong = 0;
};

// Feeds `chunks` in order, then finish().
collected assemble(wire::line_assembler& a, const std::vector<std::string_view>& chunks) {
  collected c;
  auto on_line = [&](std::string_view l) { c.lines.emplace_back(l); };
  auto on_overlong = [&] { ++c.overlong; };
  for (auto chunk : chunks)
    a.feed(chunk, on_line, on_overlong);
  a.finish(on_line, on_overlong);
  return c;
}

const std::string multi_record =
    "larkspur/line_b/fill_4,1764633600.25,502.13\r\n"
    "# shift change\n"
    "\n"
    "larkspur/line_b/fill_5,,501.9,502.0\n"
    "larkspur/pasteuriser_1/temp,1985-04-12T23:20:50.52Z,72.4\r\n"
    "bad name,1,2\n"
    "larkspur/line_a/torque_2,1764633601,+3.25,-0.0,1e-300\n"
    "larkspur/line_a/torque_3,1764633602,4";  // no final newline

TEST_CASE("lines split at every byte position reassemble as from one feed", "[daemon][wire]") {
  wire::line_assembler whole_asm(256);
  const auto whole = assemble(whole_asm, {multi_record});
  REQUIRE(whole.lines.size() == 8);
  CHECK(whole.overlong == 0);
  CHECK(whole.lines[0] == "larkspur/line_b/fill_4,1764633600.25,502.13\r");
  CHECK(whole.lines[7] == "larkspur/line_a/torque_3,1764633602,4");

  wire::line_assembler a(256);
  const std::string_view all = multi_record;
  // Two pieces, at every cut.
  for (std::size_t cut = 0; cut <= all.size(); ++cut) {
    INFO("cut at " << cut);
    const auto got = assemble(a, {all.substr(0, cut), all.substr(cut)});
    CHECK(got.lines == whole.lines);
    CHECK(got.overlong == 0);
  }
  // Three pieces, at every pair of cuts.
  for (std::size_t i = 0; i <= all.size(); ++i) {
    for (std::size_t j = i; j <= all.size(); ++j) {
      const auto got = assemble(a, {all.substr(0, i), all.substr(i, j - i), all.substr(j)});
      if (got.lines != whole.lines) FAIL("cuts at " << i << " and " << j);
    }
  }
  // Fixed chunk sizes, down to one byte at a time.
  for (std::size_t size = 1; size <= all.size(); ++size) {
    std::vector<std::string_view> chunks;
    for (std::size_t p = 0; p < all.size(); p += size)
      chunks.push_back(all.substr(p, size));
    INFO("chunk size " << size);
    CHECK(assemble(a, chunks).lines == whole.lines);
  }
  // And the records parse to the same values however they arrived.
  wire::record r;
  CHECK(wire::parse_line(whole.lines[6], r).kind == line_kind::record);
  CHECK(r.dim == 3);
  CHECK(std::signbit(r.values[1]));
}

TEST_CASE("lines inside one feed are views into the input, tails are copied", "[daemon][wire]") {
  wire::line_assembler a(64);
  const std::string input = "larkspur/a,1,2\nlarkspur/b,1,3\nlarkspur/c,";
  std::vector<std::string_view> views;
  auto on_line = [&](std::string_view l) { views.push_back(l); };
  auto on_overlong = [] { FAIL("no line is over-long"); };
  a.feed(input, on_line, on_overlong);
  REQUIRE(views.size() == 2);
  CHECK(views[0].data() == input.data());
  CHECK(views[1].data() == input.data() + 15);
  CHECK(a.pending_bytes() == 11);
  std::string rest = "1,4\n";
  std::string third;
  a.feed(
      rest,
      [&](std::string_view l) {
        third = std::string(l);
        CHECK(l.data() != rest.data());
      },
      on_overlong);
  CHECK(third == "larkspur/c,1,4");
  CHECK(a.pending_bytes() == 0);
}

TEST_CASE("over-long lines are dropped and counted while their neighbours survive",
          "[daemon][wire]") {
  const std::size_t cap = 32;
  const std::string fits(cap, 'a');          // exactly the limit: kept
  const std::string too_long(cap + 1, 'b');  // one over: dropped
  const std::string huge(1000, 'c');
  const std::string input = "first,1,2\n" + fits + "\n" + too_long + "\nmiddle,1,2\n" + huge +
                            "\n" + too_long + "\r\nlast,1,2\n" + std::string(cap, 'd') + "\r\n";
  wire::line_assembler one(cap);
  const auto whole = assemble(one, {input});
  const std::vector<std::string> expected = {"first,1,2", fits, "middle,1,2", "last,1,2"};
  CHECK(whole.lines == expected);
  // too_long, huge, too_long + CR, and cap 'd's + CR (the CR counts).
  CHECK(whole.overlong == 4);

  wire::line_assembler a(cap);
  const std::string_view all = input;
  for (std::size_t cut = 0; cut <= all.size(); ++cut) {
    const auto got = assemble(a, {all.substr(0, cut), all.substr(cut)});
    if (got.lines != expected || got.overlong != 4) FAIL("cut at " << cut);
  }
  for (std::size_t size = 1; size <= 40; ++size) {
    std::vector<std::string_view> chunks;
    for (std::size_t p = 0; p < all.size(); p += size)
      chunks.push_back(all.substr(p, size));
    const auto got = assemble(a, chunks);
    INFO("chunk size " << size);
    CHECK(got.lines == expected);
    CHECK(got.overlong == 4);
  }
}

TEST_CASE("an over-long line is reported once, before its end arrives", "[daemon][wire]") {
  wire::line_assembler a(16);
  int overlong = 0;
  std::vector<std::string> lines;
  auto on_line = [&](std::string_view l) { lines.emplace_back(l); };
  auto on_overlong = [&] { ++overlong; };
  const std::string chunk(10, 'x');
  a.feed(chunk, on_line, on_overlong);
  CHECK(overlong == 0);
  a.feed(chunk, on_line, on_overlong);  // 20 bytes > 16
  CHECK(overlong == 1);
  CHECK(a.discarding());
  for (int i = 0; i < 100; ++i)
    a.feed(chunk, on_line, on_overlong);
  CHECK(overlong == 1);
  a.feed(std::string_view("xx\nok,1,2\n"), on_line, on_overlong);
  CHECK(overlong == 1);
  CHECK_FALSE(a.discarding());
  CHECK(lines == std::vector<std::string>{"ok,1,2"});
  // An over-long unfinished line at the end is not delivered by finish().
  a.feed(std::string(40, 'y'), on_line, on_overlong);
  CHECK(overlong == 2);
  a.finish(on_line, on_overlong);
  CHECK(lines.size() == 1);
  CHECK_FALSE(a.discarding());
}

TEST_CASE("finish delivers the last line without a newline and reset forgets it",
          "[daemon][wire]") {
  wire::line_assembler a(64);
  std::vector<std::string> lines;
  auto on_line = [&](std::string_view l) { lines.emplace_back(l); };
  auto on_overlong = [] { FAIL("no line is over-long"); };
  a.feed(std::string_view("larkspur/a,1,2"), on_line, on_overlong);
  CHECK(lines.empty());
  a.finish(on_line, on_overlong);
  CHECK(lines == std::vector<std::string>{"larkspur/a,1,2"});
  a.finish(on_line, on_overlong);  // nothing left
  CHECK(lines.size() == 1);
  a.feed(std::string_view("larkspur/b,"), on_line, on_overlong);
  a.reset();
  CHECK(a.pending_bytes() == 0);
  a.feed(std::string_view("larkspur/c,1,3\n"), on_line, on_overlong);
  CHECK(lines == std::vector<std::string>{"larkspur/a,1,2", "larkspur/c,1,3"});
  // An input ending in a newline leaves nothing for finish().
  a.finish(on_line, on_overlong);
  CHECK(lines.size() == 2);
}

TEST_CASE("the assembler refuses line limits outside its range", "[daemon][wire]") {
  CHECK_THROWS_AS(wire::line_assembler(wire::min_line_bytes - 1), std::invalid_argument);
  CHECK_THROWS_AS(wire::line_assembler(wire::max_line_bytes_limit + 1), std::invalid_argument);
  CHECK(wire::line_assembler(wire::min_line_bytes).max_line_bytes() == wire::min_line_bytes);
  CHECK(wire::line_assembler().max_line_bytes() == wire::default_max_line_bytes);
}

TEST_CASE("datagram lines split as the assembler splits them", "[daemon][wire]") {
  const std::size_t cap = 48;
  auto via_datagram = [&](std::string_view d) {
    collected c;
    wire::for_each_line_in_datagram(
        d, cap, [&](std::string_view l) { c.lines.emplace_back(l); }, [&] { ++c.overlong; });
    return c;
  };
  const std::string long_line(cap + 1, 'z');
  for (std::string_view d :
       {std::string_view(multi_record), std::string_view("one,1,2"), std::string_view("one,1,2\n"),
        std::string_view("\n\n"), std::string_view(""), std::string_view("a,1,2\n\nb,1,3\r\n")}) {
    wire::line_assembler a(cap);
    const auto want = assemble(a, {d});
    const auto got = via_datagram(d);
    CHECK(got.lines == want.lines);
    CHECK(got.overlong == want.overlong);
  }
  const std::string with_long = "a,1,2\n" + long_line + "\nb,1,3";
  const auto got = via_datagram(with_long);
  CHECK(got.lines == std::vector<std::string>{"a,1,2", "b,1,3"});
  CHECK(got.overlong == 1);
  // A datagram ending in a newline has no empty line after it.
  CHECK(via_datagram("a,1,2\n").lines.size() == 1);
  CHECK(via_datagram("a,1,2\n\n").lines == std::vector<std::string>{"a,1,2", ""});
}

}  // namespace
