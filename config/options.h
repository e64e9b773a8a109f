// options.h: the daemon's configuration as plain data.
//
// Purpose. `daemon_config` is what `plumbline serve` runs from: where it
// listens (ingest sockets, the HTTP endpoint), how many evaluation threads it
// uses, its log level, and the stream groups. A stream group maps stream
// names (by a glob pattern) to one `monitor_settings` (core/monitor_settings.h).
// The member initialisers here and in core/monitor_settings.h are the
// built-in defaults; load.h reads a TOML file over them and validates every
// value, and option_table.h documents each key.
//
// Stream-name patterns (glob.h): '*' matches any run of characters, '/'
// included; '?' matches one character; every other character matches itself.
// Groups are tried in file order and the first match wins; a stream that
// matches no group is rejected by the daemon.
//
// Thread-safety: plain value types; the functions are pure.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

#include "core/monitor_settings.h"
#include "core/status.h"

namespace plumbline::config {

// A listening address. `enabled` false means the listener is off; port 0
// asks the system for a free port (the daemon reports the one it got).
// IPv6 hosts are kept without brackets ("::1").
struct host_port {
  std::string host;
  uint16_t port = 0;
  bool enabled = true;
};

// Parses "HOST:PORT": an IPv4 address ("127.0.0.1:7301"), a bracketed IPv6
// address ("[::1]:7301") or a host name ("localhost:0"); port 0 .. 65535.
// "" and "off" give a disabled listener. Errors say what was expected.
expected<host_port> parse_host_port(std::string_view text);

// The inverse of parse_host_port: "127.0.0.1:7301", "[::1]:7301" or "off".
std::string format_host_port(const host_port& hp);

// Where a group or key was written in the configuration file; 0 = nowhere
// (built-in defaults). Lines and columns are 1-based.
struct source_position {
  uint32_t line = 0;
  uint32_t column = 0;
};

struct ingest_options {
  host_port tcp{"127.0.0.1", 7301};
  host_port udp{"127.0.0.1", 7301};
  std::size_t max_line_bytes = 4096;  // one measurement line, newline included
  std::size_t max_streams = 20000;    // streams tracked at once
  std::size_t max_connections = 256;  // concurrent TCP connections
  double idle_timeout_seconds = 300;  // a silent TCP connection is closed after this
};

struct http_options {
  host_port listen{"127.0.0.1", 7302};
  // Bearer token the HTTP API requires (RFC 6750); empty = no token. When
  // the file names `api_token_file`, this holds the token read from it.
  std::string api_token;
  std::string api_token_file;  // resolved path, or empty
  std::size_t max_connections = 64;
};

struct evaluation_options {
  unsigned threads = 0;  // 0 = one per core
  uint64_t seed = 1;     // every stream's generator derives from it
};

// Where the daemon keeps its snapshots (daemon/snapshot.h). An empty data_dir
// turns snapshots off.
struct state_options {
  std::string data_dir;                    // resolved path, or empty
  double snapshot_interval_seconds = 10;   // 0 = only on request and at a graceful stop
};

struct log_options {
  std::string level = "info";  // debug | info | warn | error
};

struct stream_group {
  std::string name;
  std::string match;  // glob over stream names (see above)
  std::string
      reference_file;  // policy == file only: CSV path, resolved against the config's directory
  monitor_settings settings;
  source_position position;                 // the [[group]] header
  source_position reference_file_position;  // the reference_file value
  // policy == file: the samples of reference_file, row-major, filled in by
  // the daemon when it reads the file (config/ does not read CSV files).
  std::vector<double> reference_sample;
};

struct daemon_config {
  std::string source = "built-in defaults";  // the file read, for messages
  ingest_options ingest;
  http_options http;
  evaluation_options evaluation;
  state_options state;
  log_options log;
  std::vector<stream_group> groups;
};

// Limits on what a configuration may hold.
inline constexpr std::size_t max_groups = 1000;
inline constexpr std::size_t max_group_name_bytes = 64;
inline constexpr std::size_t max_pattern_bytes = 1024;

// The configuration used without a file: the defaults above and one group
// "default" matching every stream ("*") with monitor_settings{}.
daemon_config default_config();

// The first group whose pattern matches `stream`, or nullptr when none does.
// The pointer is into `config.groups`.
const stream_group* find_group(const daemon_config& config, std::string_view stream);

}  // namespace plumbline::config
