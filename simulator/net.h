// net.h: the simulator's sockets: `send` to the daemon's ingest, and a small
// HTTP/1.1 client for `score --daemon`.
//
// run_send() connects (TCP, or a connected UDP socket), then walks the
// scenario's timeline and writes each present sample as one wire-format
// record (daemon/wire.h). Pacing: a record of simulated offset t is sent no
// earlier than t / speed wall seconds after the start, so timestamps follow
// simulated time, in real time at speed 1. Records that are due are batched
// (TCP: up to 64 KiB per write; UDP: whole records per datagram, each
// datagram below max_datagram_bytes). A progress line goes to `progress`
// about once a second.
//
// Failures. A daemon that closes the connection (seen as EOF before a write,
// or as EPIPE / ECONNRESET), a write that makes no progress for
// send_timeout_seconds, or a UDP port that refuses datagrams ends the run with
// an error naming the records sent so far. After the last record, TCP shuts
// down its sending side and waits (up to send_timeout_seconds) for the daemon
// to close, so that everything sent was read.
//
// Thread-safety: blocking calls on the calling thread.
#pragma once

#include <atomic>
#include <cstdint>
#include <ostream>
#include <string>

#include "core/status.h"
#include "simulator/scenario.h"
#include "simulator/truth.h"

namespace plumbline::sim {

inline constexpr std::size_t max_datagram_bytes = 1400;  // datagrams are shorter than this
inline constexpr double send_timeout_seconds = 10;
inline constexpr std::size_t max_http_body = std::size_t{64} << 20;

struct host_port {
  std::string host;
  uint16_t port = 0;
};
// "HOST:PORT" (PORT 1..65535; HOST may be [v6]).
expected<host_port> parse_host_port(const std::string& text);

struct send_options {
  host_port to;
  bool udp = false;
  double speed = 1;     // simulated seconds per wall second
  double duration = 0;  // simulated seconds to send
  uint64_t seed = 1;
  double epoch = 0;
  bool progress = true;
  const std::atomic<bool>* stop = nullptr;  // set (by a signal) to stop early
};

struct send_report {
  uint64_t records = 0;  // records written
  uint64_t dropped = 0;  // samples not sent (dropout faults)
  uint64_t bytes = 0;
  uint64_t datagrams = 0;  // UDP only
  double wall_seconds = 0;
  double simulated_seconds = 0;  // offset of the last record sent
  bool stopped = false;          // stopped early by options.stop
};

// `clock` (may be null) receives the wall/simulated clock points (truth.h).
expected<send_report> run_send(const scenario& s, const send_options& options,
                               std::ostream& progress, truth* clock);

struct http_answer {
  int status = 0;
  std::string body;
};
// GET `target` with "Connection: close"; the body up to max_http_body.
expected<http_answer> http_get(const host_port& at, const std::string& target,
                               double timeout_seconds = 10);

}  // namespace plumbline::sim
