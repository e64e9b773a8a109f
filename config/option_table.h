// option_table.h: every configuration key, declared once.
//
// Purpose. One table lists each key of the TOML file with its section, its
// type, its built-in default, the values it accepts and a line of help. The
// loader (load.h) reads keys through this table alone, `plumbline
// check-config --defaults` prints it, and the tests check
// config/plumbline.example.toml against it, so the three cannot disagree.
// Defaults are not written in the table: they are formatted from the member
// initialisers of options.h and core/monitor_settings.h.
//
// Thread-safety: the table is built once, on first use (a function-local
// static), and read-only after that.
#pragma once

#include <string>
#include <string_view>
#include <vector>

namespace plumbline::config {

enum class option_section { ingest, http, evaluation, state, log, group };

inline constexpr option_section all_sections[] = {
    option_section::ingest, option_section::http, option_section::evaluation,
    option_section::state,  option_section::log,  option_section::group};

// The TOML key of the section: "ingest", "http", "evaluation", "state", "log",
// "group".
std::string_view section_key(option_section s);
// As written in a file: "[ingest]", ..., "[[group]]".
std::string_view section_header(option_section s);

struct option_info {
  option_section section = option_section::ingest;
  std::string_view key;
  std::string_view type;        // "integer", "float", "string", "array of strings", ...
  std::string default_value;    // TOML text of the built-in default; empty when there is none
  std::string_view no_default;  // when default_value is empty: "(required)" or "(unset)"
  std::string bounds;           // the accepted values, e.g. "16 .. 1048576"
  std::string_view help;
};

// All keys, in the order of the example file: [ingest], [http],
// [evaluation], [state], [log], then [[group]].
const std::vector<option_info>& option_table();

// The key's entry, or nullptr when the section has no such key.
const option_info* find_option(option_section section, std::string_view key);

}  // namespace plumbline::config
