// option_spec.h: the option table with its readers (internal to config/).
//
// Purpose. Each public `option_info` (option_table.h) is paired here with the
// function that reads its TOML value into a `parse_state`. The loader
// (load.cc) walks a parsed file, finds each key's `option_spec` and calls
// `apply`; cross-field checks run afterwards, in load.cc.
//
// Readers never throw. A value they reject leaves the target at its previous
// value and appends an `issue`: a phrase that follows the key ("must be
// between 16 and 1048576, got 8"), and optionally a position more precise
// than the value's own (an element of an array).
//
// Thread-safety: as option_table.h.
#pragma once

#include <filesystem>
#include <functional>
#include <map>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include "config/option_table.h"
#include "config/options.h"

// toml++: the Debian build is a shared library; its CMake target defines
// TOML_HEADER_ONLY=0.
#include <toml++/toml.h>

namespace plumbline::config::detail {

// One [[group]] being read. The drift interval is staged apart from the
// settings, so that `interval = "none"` and the interval_* keys can come in
// any order (toml++ visits keys in sorted order, not file order).
struct group_draft {
  stream_group group;
  interval_options interval;
  bool interval_none = false;
  // Keys present in the table, with their value positions.
  std::map<std::string, source_position, std::less<>> given;

  group_draft() {
    interval_none = !group.settings.interval.has_value();
    if (group.settings.interval) interval = *group.settings.interval;
  }
};

struct parse_state {
  daemon_config config;
  group_draft group;
  std::filesystem::path base_dir;  // relative paths are resolved against it
  // Section keys present, as "http.api_token", with their value positions.
  std::map<std::string, source_position, std::less<>> given;
  // Which of api_token and api_token_file supplied a (non-empty) token.
  bool token_inline = false;
  bool token_from_file = false;
};

struct issue {
  issue(std::string m, std::optional<source_position> a = std::nullopt)  // NOLINT: implicit
      : message(std::move(m)), at(a) {}
  std::string message;
  std::optional<source_position> at;
};

using apply_fn = std::function<void(const toml::node&, parse_state&, std::vector<issue>&)>;

struct option_spec {
  option_info info;
  apply_fn apply;
};

const std::vector<option_spec>& option_specs();
const option_spec* find_spec(option_section section, std::string_view key);

inline source_position position_of(const toml::source_region& r) {
  return source_position{r.begin.line, r.begin.column};
}

// "a string (\"x\")", "a float (1.5)", "an array", ...: for type errors.
std::string describe_value(const toml::node& v);

// TOML text of a string value, with quotes and escapes.
std::string toml_quote(std::string_view s);

// Shortest round-trip text of a finite double, always with a '.' or an
// exponent so that TOML reads it back as a float ("300.0", "0.005").
std::string toml_float(double v);

}  // namespace plumbline::config::detail
