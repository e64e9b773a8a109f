// reload.h: loading the daemon's configuration, and re-reading it while the
// daemon runs (SIGHUP, POST /api/reload).
//
// Purpose. prepare_config() is the one way `plumbline serve` gets a
// configuration, at start and at every reload: the TOML file (or the
// built-in defaults), the command-line overrides, and the reference files of
// the file-policy groups, read into stream_group::reference_sample. A
// configuration with any error is refused whole; the errors say FILE:LINE:
// COLUMN where they are.
//
// apply_config() moves the running streams to a prepared configuration
// (README, "Reload"):
//   * streams are never dropped, and new streams take the new groups;
//   * each stream takes the settings of the first group of the new
//     configuration that matches its name; the windows follow the rules of
//     stream_monitor::apply_settings (core/monitor.h): unchanged sizes keep
//     their samples, a changed size keeps the newest samples that fit, a
//     changed reference policy empties them (a rebaseline); a stream that now
//     matches a different group is treated exactly the same way, by the
//     settings it gets;
//   * a file-policy stream whose reference file now holds other samples
//     takes them as its reference;
//   * a stream that matches no group any more, or whose new group fixes a
//     different dimension, keeps its old settings (and the old configuration
//     stays alive for it); each such stream is named in the outcome.
// Only [[group]] and [log] take effect. [ingest], [http], [evaluation],
// [state] and the listener addresses keep their start-up values: a
// difference is reported by restart_only_changes() and needs a restart.
//
// Thread-safety. prepare_config() is pure but for reading files.
// apply_config() may run while ingest and evaluations run (it locks each
// stream in turn); the caller runs one reload at a time.
#pragma once

#include <cstddef>
#include <memory>
#include <string>
#include <vector>

#include "config/options.h"
#include "daemon/stream_table.h"

namespace plumbline {

// Command-line settings that override the file.
struct config_overrides {
  std::string ingest;    // HOST:PORT for TCP and UDP, or empty
  std::string http;      // HOST:PORT, or empty
  std::string data_dir;  // or empty
};

struct prepared_config {
  std::shared_ptr<config::daemon_config> config;  // null when errors is not empty
  std::vector<std::string> errors;                // "FILE:LINE:COLUMN: message" lines
};

// path empty = the built-in defaults.
prepared_config prepare_config(const std::string& path, const config_overrides& overrides);

// One line per setting that differs and that only a restart applies.
std::vector<std::string> restart_only_changes(const config::daemon_config& running,
                                              const config::daemon_config& next);

struct reload_outcome {
  std::size_t streams = 0;    // streams seen
  std::size_t regrouped = 0;  // streams now in a group of another name
  std::size_t emptied = 0;    // streams whose windows a policy change emptied
  std::size_t kept_old = 0;   // streams that kept their old settings
  std::vector<std::string> notes;  // one line per stream that kept old settings, and per problem
};

// At most this many notes are kept (a count of the rest is added).
inline constexpr std::size_t max_reload_notes = 100;

// Moves every stream of `streams` to `next` (see the header comment) and
// makes `next` the configuration of new streams. `now` is Unix seconds.
reload_outcome apply_config(stream_table& streams, std::shared_ptr<const config::daemon_config> next,
                            double now);

}  // namespace plumbline
