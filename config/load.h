// load.h: reading and validating the daemon's TOML configuration.
//
// Purpose. Turns a TOML file into a `daemon_config` (options.h), or into the
// complete list of what is wrong with it. Every key is read through the
// option table (option_table.h); keys not in it are errors, with the
// nearest known key suggested. After the keys, cross-field rules are checked
// (see load.cc for the list): a group must be evaluable, its reference
// source and its interval consistent, its windows within the engines'
// limits; group names unique, and no group hidden behind an earlier one.
//
// Errors. Each error carries the file and the 1-based line and column of
// the offending value, or of its key when the key itself is at fault; a
// cross-field error points at the key that is set (or, when neither is set,
// at the [[group]] header). Errors are sorted by position. A TOML syntax
// error stops parsing and is reported alone, with its position. At most
// `max_reported_errors` are kept; one more line then says that others were
// left out. When there are errors, `config` is empty: the daemon does not
// start on a configuration that is partly wrong.
//
// Files. A file larger than `max_config_bytes` is refused. Relative paths in
// the file (reference_file, api_token_file) are resolved against the
// directory of the file (for load_config_string: of `source_name`); the API
// token file is read during loading. CSV reference files are not read here
// (the daemon and `plumbline check-config` read them with daemon/csv_input.h).
//
// No [[group]] at all means the default group of default_config().
//
// Thread-safety: pure functions, except that they read files.
#pragma once

#include <cstddef>
#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <variant>
#include <vector>

#include "config/options.h"

namespace plumbline::config {

inline constexpr std::size_t max_config_bytes = std::size_t{1} << 20;
inline constexpr std::size_t max_reported_errors = 100;

struct config_error {
  std::string file;
  uint32_t line = 0;    // 1-based; 0 = the file as a whole
  uint32_t column = 0;  // 1-based
  std::string message;

  // "FILE:LINE:COLUMN: message", or "FILE: message" when line is 0.
  std::string str() const;
};

struct load_result {
  std::optional<daemon_config> config;  // set exactly when errors is empty
  std::vector<config_error> errors;
};

// The whole text of the file at `path`, at most max_config_bytes, or the
// one error that says why not: "PATH: cannot read: REASON" (a directory, a
// missing or unreadable file) or "PATH: too large (...)". Shared by every
// loader of TOML files (the daemon's configuration, the simulator's
// scenarios).
std::variant<std::string, config_error> read_config_text(const std::string& path);

// Reads and validates the file at `path`. An unreadable file gives one
// error, "PATH: cannot read: REASON".
load_result load_config_file(const std::string& path);

// Validates `text` as the contents of a file named `source_name`.
load_result load_config_string(std::string_view text, std::string_view source_name);

}  // namespace plumbline::config
