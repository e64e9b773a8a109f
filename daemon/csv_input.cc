// csv_input.cc: see csv_input.h. std::from_chars does the number parsing:
// locale-independent, exact (correctly rounded) and without allocation.
#include "daemon/csv_input.h"

#include <charconv>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <sstream>

namespace plumbline {

namespace {

std::string_view trim(std::string_view s) {
  while (!s.empty() && (s.front() == ' ' || s.front() == '\t')) s.remove_prefix(1);
  while (!s.empty() && (s.back() == ' ' || s.back() == '\t' || s.back() == '\r'))
    s.remove_suffix(1);
  return s;
}

std::vector<std::string_view> split_cells(std::string_view line) {
  std::vector<std::string_view> cells;
  std::size_t start = 0;
  for (;;) {
    const std::size_t comma = line.find(',', start);
    cells.push_back(trim(line.substr(start, comma - start)));
    if (comma == std::string_view::npos) break;
    start = comma + 1;
  }
  return cells;
}

std::string quoted(std::string_view cell) {
  std::string out = "\"";
  for (char c : cell.substr(0, 40)) out += (static_cast<unsigned char>(c) < 0x20) ? '?' : c;
  if (cell.size() > 40) out += "...";
  return out + "\"";
}

}  // namespace

bool parse_number(std::string_view cell, double& out) {
  cell = trim(cell);
  if (!cell.empty() && cell.front() == '+') {
    cell.remove_prefix(1);
    if (!cell.empty() && (cell.front() == '+' || cell.front() == '-')) return false;
  }
  if (cell.empty()) return false;
  const char* end = cell.data() + cell.size();
  const auto res = std::from_chars(cell.data(), end, out, std::chars_format::general);
  return res.ec == std::errc() && res.ptr == end;
}

expected<csv_sample> parse_csv_sample(std::string_view text, const std::string& source) {
  csv_sample s;
  s.source = source;
  bool seen_first = false;
  std::size_t line_no = 0;
  std::size_t pos = 0;
  while (pos < text.size()) {
    std::size_t eol = text.find('\n', pos);
    if (eol == std::string_view::npos) eol = text.size();
    const std::string_view raw = text.substr(pos, eol - pos);
    pos = eol + 1;
    ++line_no;
    const std::string_view line = trim(raw);
    if (line.empty() || line.front() == '#') continue;
    const std::string where = source + ":" + std::to_string(line_no) + ": ";
    if (line.find('\0') != std::string_view::npos)
      return make_error(where + "line holds a NUL byte (not a text file?)");
    const auto cells = split_cells(line);
    if (!seen_first) {
      seen_first = true;
      std::size_t numeric = 0;
      double v;
      for (auto c : cells) numeric += parse_number(c, v) ? 1 : 0;
      if (numeric == 0) {
        for (auto c : cells) s.header.emplace_back(c);
        s.width = cells.size();
        continue;
      }
    }
    if (s.width == 0) s.width = cells.size();
    if (cells.size() != s.width)
      return make_error(where + "row has " + std::to_string(cells.size()) +
                        (cells.size() == 1 ? " value" : " values") + ", but the first row has " +
                        std::to_string(s.width));
    for (std::size_t i = 0; i < cells.size(); ++i) {
      double v;
      if (!parse_number(cells[i], v))
        return make_error(where + "cell " + std::to_string(i + 1) + " (" + quoted(cells[i]) +
                          ") is not a number");
      if (!std::isfinite(v))
        return make_error(where + "cell " + std::to_string(i + 1) + " (" + quoted(cells[i]) +
                          ") is not a finite number");
      s.values.push_back(v);
    }
    if (s.values.size() > max_csv_values)
      return make_error(where + "more than " + std::to_string(max_csv_values) +
                        " values in one file");
  }
  if (s.values.empty()) return make_error(source + ": no values (the sample is empty)");
  return s;
}

expected<csv_sample> read_csv_sample(const std::string& path) {
  std::error_code ec;
  const auto status = std::filesystem::status(path, ec);
  if (ec || !std::filesystem::exists(status))
    return make_error(path + ": no such file");
  if (std::filesystem::is_directory(status)) return make_error(path + ": is a directory");
  const auto size = std::filesystem::file_size(path, ec);
  if (!ec && size > max_csv_bytes)
    return make_error(path + ": file is larger than " + std::to_string(max_csv_bytes >> 20) +
                      " MiB");
  std::ifstream in(path, std::ios::binary);
  if (!in) return make_error(path + ": cannot open the file for reading");
  std::ostringstream buf;
  buf << in.rdbuf();
  if (in.bad()) return make_error(path + ": read error");
  return parse_csv_sample(buf.str(), path);
}

}  // namespace plumbline
