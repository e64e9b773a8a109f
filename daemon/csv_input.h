// csv_input.h: reading samples from CSV files for the offline subcommands.
//
// Format. One sample per line: one value, or several comma-separated values
// for a multivariate row. Lines whose first non-blank character is '#' and
// blank lines are ignored. The first other line is a header when none of its
// cells is a number; after that every cell must be a finite number, and every
// row must have the width of the first. Numbers are read in the C locale
// (decimal point '.'), with optional surrounding spaces, an optional sign and
// an exponent. CRLF line endings are accepted.
//
// Errors name the file and the 1-based line: "ref.csv:12: cell 2 ("12,3x") is
// not a number". Nothing is skipped silently. Thread-safety: pure functions.
#pragma once

#include <cstddef>
#include <string>
#include <string_view>
#include <vector>

#include "core/status.h"

namespace plumbline {

// A sample read from CSV: `rows` x `width` values, row-major.
struct csv_sample {
  std::string source;            // file name as given, for messages
  std::vector<std::string> header;  // empty when the file has none
  std::vector<double> values;
  std::size_t width = 0;
  std::size_t rows() const { return width == 0 ? 0 : values.size() / width; }
};

// Largest sample a file may hold (values, all columns together).
inline constexpr std::size_t max_csv_values = 50'000'000;
// Largest file accepted, in bytes.
inline constexpr std::size_t max_csv_bytes = std::size_t{1} << 30;

// Parses `text` as the contents of `source`.
expected<csv_sample> parse_csv_sample(std::string_view text, const std::string& source);

// Reads and parses the file at `path`.
expected<csv_sample> read_csv_sample(const std::string& path);

// Parses one number cell (trimmed of spaces) in the C locale. False when the
// cell is not a complete number. Non-finite results are returned as such.
bool parse_number(std::string_view cell, double& out);

}  // namespace plumbline
