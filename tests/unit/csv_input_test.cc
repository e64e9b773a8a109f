// csv_input_test.cc: the CSV sample reader of daemon/csv_input.h.
//
// The format rules of the header (one value or comma-separated values per
// line, '#' comments, blank lines, an optional all-text header line, CRLF,
// C-locale numbers with sign and exponent) are checked one by one, and so is
// every error: each must name the file and the 1-based line of the fault.
// Expected numbers are the correctly rounded doubles of the decimal text
// (compared with the compiler's own reading of the same literal), since the
// header promises exact, locale-independent parsing.
#include "daemon/csv_input.h"

#include <unistd.h>

#include <catch2/catch.hpp>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <string>
#include <vector>

namespace {

using Catch::Matchers::Contains;
using Catch::Matchers::Equals;
using Catch::Matchers::StartsWith;
using plumbline::csv_sample;
using plumbline::parse_csv_sample;
using plumbline::parse_number;

csv_sample parse_ok(std::string_view text, const std::string& source = "line_b.csv") {
  auto r = parse_csv_sample(text, source);
  INFO((r.ok() ? std::string("ok") : r.err().message));
  REQUIRE(r.ok());
  return r.value();
}

std::string parse_error(std::string_view text, const std::string& source = "line_b.csv") {
  auto r = parse_csv_sample(text, source);
  REQUIRE_FALSE(r.ok());
  return r.err().message;
}

bool number(std::string_view cell, double& out) {
  return parse_number(cell, out);
}

}  // namespace

TEST_CASE("A single column of numbers is read in order", "[daemon][csv]") {
  const csv_sample s = parse_ok("125.9\n124.6\n126.2\n", "filler_head_4.csv");
  CHECK(s.source == "filler_head_4.csv");
  CHECK(s.header.empty());
  CHECK(s.width == 1);
  CHECK(s.rows() == 3);
  CHECK_THAT(s.values, Equals(std::vector<double>{125.9, 124.6, 126.2}));
  // No newline at the end of the last line.
  CHECK_THAT(parse_ok("1\n2").values, Equals(std::vector<double>{1, 2}));
  // Surrounding spaces and tabs are trimmed.
  CHECK_THAT(parse_ok("  1.5 \n\t2.5\t\n").values, Equals(std::vector<double>{1.5, 2.5}));
}

TEST_CASE("A first line without any number is a header", "[daemon][csv]") {
  SECTION("one column") {
    const csv_sample s = parse_ok("fill_weight_g\n125.9\n124.6\n");
    CHECK_THAT(s.header, Equals(std::vector<std::string>{"fill_weight_g"}));
    CHECK(s.width == 1);
    CHECK_THAT(s.values, Equals(std::vector<double>{125.9, 124.6}));
  }
  SECTION("two columns, cells trimmed") {
    const csv_sample s = parse_ok("cap_torque_nm , label_offset_mm\n2.24,1.1\n2.10,-0.2\n");
    CHECK_THAT(s.header, Equals(std::vector<std::string>{"cap_torque_nm", "label_offset_mm"}));
    CHECK(s.width == 2);
    CHECK(s.rows() == 2);
  }
  SECTION("after comments and blank lines") {
    const csv_sample s = parse_ok("# line B, head 4 (invented)\n\nweight\n1\n");
    CHECK_THAT(s.header, Equals(std::vector<std::string>{"weight"}));
    CHECK_THAT(s.values, Equals(std::vector<double>{1}));
  }
  SECTION("a first line of numbers is data, not a header") {
    const csv_sample s = parse_ok("1,2\n3,4\n");
    CHECK(s.header.empty());
    CHECK_THAT(s.values, Equals(std::vector<double>{1, 2, 3, 4}));
  }
  SECTION("a first line with one number among text is data, so the text is an error") {
    CHECK_THAT(parse_error("torque,2.5\n1,2\n"), StartsWith("line_b.csv:1: cell 1"));
  }
  SECTION("only the first line can be a header") {
    CHECK_THAT(parse_error("weight\n1\nweight\n2\n"),
               StartsWith("line_b.csv:3: cell 1 (\"weight\") is not a number"));
  }
}

TEST_CASE("Comments and blank lines are skipped but still counted as lines", "[daemon][csv]") {
  const std::string text =
      "# Larkspur Dairy (invented), cup line B\n"
      "   # an indented comment\n"
      "\n"
      "   \t \n"
      "1.0\n"
      "# a comment between values\n"
      "2.0\n"
      "\n";
  CHECK_THAT(parse_ok(text).values, Equals(std::vector<double>{1.0, 2.0}));
  // The error on the 9th line is reported as line 9.
  CHECK_THAT(parse_error(text + "x\n"), StartsWith("line_b.csv:9: "));
  // '#' only starts a comment at the start of a line: elsewhere it is a bad cell.
  CHECK_THAT(parse_error("1\n2 # two\n"), StartsWith("line_b.csv:2: cell 1"));
}

TEST_CASE("CRLF line endings are accepted", "[daemon][csv]") {
  const csv_sample s = parse_ok("torque,offset\r\n2.24,1.1\r\n2.10,-0.2\r\n\r\n# end\r\n");
  CHECK_THAT(s.header, Equals(std::vector<std::string>{"torque", "offset"}));
  CHECK_THAT(s.values, Equals(std::vector<double>{2.24, 1.1, 2.10, -0.2}));
  CHECK_THAT(parse_error("1\r\n2\r\nbad\r\n"),
             Equals("line_b.csv:3: cell 1 (\"bad\") is not a number"));
}

TEST_CASE("Multi-column rows are stored row-major", "[daemon][csv]") {
  const csv_sample s = parse_ok("1,2,3\n4, 5 ,6\n7,8,9\n");
  CHECK(s.width == 3);
  CHECK(s.rows() == 3);
  CHECK_THAT(s.values, Equals(std::vector<double>{1, 2, 3, 4, 5, 6, 7, 8, 9}));
}

TEST_CASE("Numbers take a sign, an exponent and the C-locale decimal point", "[daemon][csv]") {
  const csv_sample s = parse_ok("+1.5\n-2\n1e3\n2.5E-2\n-1.25e+2\n.5\n5.\n-0\n+0.1\n");
  CHECK_THAT(s.values, Equals(std::vector<double>{1.5, -2, 1000, 0.025, -125, 0.5, 5, 0, 0.1}));
  CHECK(std::signbit(s.values[7]));
  double v = 0;
  // Correctly rounded: the same doubles as the compiler's reading.
  CHECK((number("0.1", v) && v == 0.1));
  CHECK((number("125.9", v) && v == 125.9));
  CHECK((number("2.2250738585072014e-308", v) && v == 2.2250738585072014e-308));
  CHECK((number("1.7976931348623157e308", v) && v == 1.7976931348623157e308));
  CHECK((number("  42  ", v) && v == 42));
  CHECK((number("\t-3.5\t", v) && v == -3.5));
}

TEST_CASE("parse_number rejects anything but one complete number", "[daemon][csv]") {
  double v = 0;
  for (const char* cell :
       {"",      " ",     "+",   "-",   "abc", "1.2.3", "1e",  "e5",  "1,5", "1 2", "0x10",
        "1_000", "12,3x", "++1", "- 1", "1-",  "--1",   "+-1", "-+1", "$5",  "5%"}) {
    INFO("cell \"" << cell << "\"");
    CHECK_FALSE(number(cell, v));
  }
  // Decimal commas are not numbers in the C locale.
  CHECK_FALSE(number("125,9", v));
}

TEST_CASE("parse_number returns non-finite values as such", "[daemon][csv]") {
  double v = 0;
  REQUIRE(number("nan", v));
  CHECK(std::isnan(v));
  REQUIRE(number("inf", v));
  CHECK(std::isinf(v));
  CHECK(v > 0);
  REQUIRE(number("-inf", v));
  CHECK(std::isinf(v));
  CHECK(v < 0);
  REQUIRE(number("+infinity", v));
  CHECK(std::isinf(v));
}

TEST_CASE("Bad cells are errors naming file, line and cell", "[daemon][csv]") {
  SECTION("a non-numeric cell") {
    CHECK_THAT(parse_error("1,2\n3,12,3x\n", "ref.csv"),
               Equals("ref.csv:2: row has 3 values, but the first row has 2"));
    CHECK_THAT(parse_error("1,2\n3,12.3x\n", "ref.csv"),
               Equals("ref.csv:2: cell 2 (\"12.3x\") is not a number"));
  }
  SECTION("an empty cell") {
    CHECK_THAT(parse_error("1,2\n3,\n", "ref.csv"),
               Equals("ref.csv:2: cell 2 (\"\") is not a number"));
    CHECK_THAT(parse_error("1,2,\n", "ref.csv"),
               Equals("ref.csv:1: cell 3 (\"\") is not a number"));
  }
  SECTION("NaN") {
    CHECK_THAT(parse_error("1\n2\nNaN\n", "ref.csv"),
               Equals("ref.csv:3: cell 1 (\"NaN\") is not a finite number"));
    // Also as the first line (a number, so not a header).
    CHECK_THAT(parse_error("nan\n1\n", "ref.csv"), StartsWith("ref.csv:1: cell 1"));
  }
  SECTION("infinity") {
    CHECK_THAT(parse_error("1,2\n3,-inf\n", "rec.csv"),
               Equals("rec.csv:2: cell 2 (\"-inf\") is not a finite number"));
    CHECK_THAT(parse_error("1\ninfinity\n", "rec.csv"), Contains("rec.csv:2:"));
  }
  SECTION("out of range") {
    CHECK_THAT(parse_error("1\n1e400\n", "rec.csv"), StartsWith("rec.csv:2: cell 1"));
  }
  SECTION("long and control-character cells are quoted shortened and printable") {
    const std::string long_cell(60, 'x');
    const std::string message = parse_error("1\n" + long_cell + "\n", "rec.csv");
    CHECK_THAT(message, Contains("\"" + std::string(40, 'x') + "...\""));
    CHECK_THAT(parse_error("1\n2\x01\n", "rec.csv"), Contains("(\"2?\")"));
  }
  SECTION("a NUL byte") {
    CHECK_THAT(parse_error(std::string("1\n2\0\n", 5), "rec.csv"),
               Equals("rec.csv:2: line holds a NUL byte (not a text file?)"));
  }
}

TEST_CASE("Rows of unequal width are errors naming the line", "[daemon][csv]") {
  CHECK_THAT(parse_error("1,2\n3,4\n5\n", "capper.csv"),
             Equals("capper.csv:3: row has 1 value, but the first row has 2"));
  CHECK_THAT(parse_error("a,b\n1,2\n3,4,5\n", "capper.csv"),
             Equals("capper.csv:3: row has 3 values, but the first row has 2"));
  // The header sets the width.
  CHECK_THAT(parse_error("a,b\n1\n", "capper.csv"),
             Equals("capper.csv:2: row has 1 value, but the first row has 2"));
}

TEST_CASE("A file without values is an error naming the file", "[daemon][csv]") {
  const std::string empty_message = "ref.csv: no values (the sample is empty)";
  CHECK_THAT(parse_error("", "ref.csv"), Equals(empty_message));
  CHECK_THAT(parse_error("\n\n  \n", "ref.csv"), Equals(empty_message));
  CHECK_THAT(parse_error("# only a comment\n", "ref.csv"), Equals(empty_message));
  CHECK_THAT(parse_error("fill_weight_g\n", "ref.csv"), Equals(empty_message));
  CHECK_THAT(parse_error("a,b\r\n# nothing else\r\n", "ref.csv"), Equals(empty_message));
}

TEST_CASE("read_csv_sample reads files and names missing ones and directories", "[daemon][csv]") {
  namespace fs = std::filesystem;
  const fs::path dir =
      fs::temp_directory_path() / ("plumbline-csv-test-" + std::to_string(::getpid()));
  fs::create_directories(dir);
  const std::string file = (dir / "head_4.csv").string();
  {
    std::ofstream out(file, std::ios::binary);
    out << "fill_weight_g\r\n125.9\r\n124.6\r\n";
  }
  auto ok = plumbline::read_csv_sample(file);
  REQUIRE(ok.ok());
  CHECK(ok->source == file);
  CHECK_THAT(ok->values, Equals(std::vector<double>{125.9, 124.6}));

  auto missing = plumbline::read_csv_sample((dir / "absent.csv").string());
  REQUIRE_FALSE(missing.ok());
  CHECK_THAT(missing.err().message, Equals((dir / "absent.csv").string() + ": no such file"));

  auto directory = plumbline::read_csv_sample(dir.string());
  REQUIRE_FALSE(directory.ok());
  CHECK_THAT(directory.err().message, Equals(dir.string() + ": is a directory"));

  {
    std::ofstream out(file, std::ios::binary | std::ios::trunc);
    out << "1\n2\nx\n";
  }
  auto bad = plumbline::read_csv_sample(file);
  REQUIRE_FALSE(bad.ok());
  CHECK_THAT(bad.err().message, StartsWith(file + ":3: "));
  fs::remove_all(dir);
}
