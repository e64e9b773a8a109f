// serve.h: `plumbline serve`, the long-running daemon.
//
//   plumbline serve [--config FILE] [--ingest HOST:PORT] [--http HOST:PORT]
//                   [--log-level LEVEL] [--data-dir DIR]
//
// Loads the configuration (built-in defaults without --config), binds the
// ingest listeners (TCP and UDP on the same port number; --ingest overrides
// both) and HTTP, prints one line to stdout once listening:
//
//   plumbline ready ingest_tcp=HOST:PORT ingest_udp=HOST:PORT http=HOST:PORT
//
// (a disabled listener shows "off"), and runs until SIGTERM or SIGINT. Then
// it stops accepting, reads what senders already sent for a short grace
// period, closes the connections, lets queued evaluations finish, writes a
// last snapshot (when a data directory is set) and exits 0.
//
// With a data directory (--data-dir or [state] data_dir) it restores the
// newest valid snapshot before the ready line and writes one every
// snapshot_interval_seconds and on POST /api/snapshot (daemon/snapshot.h).
// SIGHUP and POST /api/reload re-read the configuration (daemon/reload.h).
//
// Exit codes: 0 after a clean stop, 2 for a bad command line or configuration,
// 1 when a listener cannot be bound or the daemon fails at run time.
#pragma once

#include <CLI/CLI.hpp>
#include <string>

namespace plumbline {

struct serve_args {
  std::string config;
  std::string ingest;
  std::string http;
  std::string log_level;
  std::string data_dir;
};

CLI::App* add_serve_command(CLI::App& app, serve_args& args);
int run_serve(const serve_args& args, const std::string& version);

}  // namespace plumbline
