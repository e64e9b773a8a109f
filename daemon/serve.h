// serve.h: `plumbline serve`, the long-running daemon.
//
//   plumbline serve [--config FILE] [--ingest HOST:PORT] [--http HOST:PORT]
//                   [--log-level LEVEL]
//
// Loads the configuration (built-in defaults without --config), binds the
// ingest listeners (TCP and UDP on the same port number; --ingest overrides
// both) and HTTP, prints one line to stdout once listening:
//
//   plumbline ready ingest_tcp=HOST:PORT ingest_udp=HOST:PORT http=HOST:PORT
//
// (a disabled listener shows "off"), and runs until SIGTERM or SIGINT. Then
// it stops accepting, reads what senders already sent for a short grace
// period, closes the connections, lets queued evaluations finish and exits 0.
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
};

CLI::App* add_serve_command(CLI::App& app, serve_args& args);
int run_serve(const serve_args& args, const std::string& version);

}  // namespace plumbline
