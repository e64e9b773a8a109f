// check_config.h: the `plumbline check-config` subcommand.
//
// Validates a daemon configuration file (config/load.h) the way the daemon
// would read it at start-up, and also reads every group's reference_file
// with the CSV reader (csv_input.h), checking it against the group (rows of
// the group's dimension, at least 2 rows, the energy test's pooled limit).
//
// Output. On success "FILE: ok" and a short summary on stdout (listeners,
// groups in the order they are tried, each group's pattern, tests and
// interval), exit code 0. On failure one line per error on stderr,
// "FILE:LINE:COLUMN: message", then "FILE: N errors", exit code 2. With
// --defaults it prints the option table instead (every key with its default,
// accepted values and help) and needs no file.
//
// Thread-safety: run once from main.
#pragma once

#include <CLI/CLI.hpp>
#include <string>
#include <vector>

#include "config/load.h"

namespace plumbline {

struct check_config_args {
  std::string file;
  bool defaults = false;
};

// Declares the subcommand's options on `app`, writing into `args`.
CLI::App* add_check_config_command(CLI::App& app, check_config_args& args);

// Runs the subcommand; returns the process exit code (0 ok, 2 errors).
int run_check_config(const check_config_args& args);

// Reads each reference_file of `config` (groups with reference = "file") and
// returns what is wrong with them, positioned at the reference_file value.
// The daemon runs the same check at start-up.
std::vector<config::config_error> check_reference_files(const config::daemon_config& config);

// The option table as text, grouped by section (what --defaults prints).
std::string format_option_table();

}  // namespace plumbline
