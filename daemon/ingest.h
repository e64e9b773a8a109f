// ingest.h: the daemon's measurement listeners (TCP and UDP, Boost.Asio).
//
// Purpose. Records in the wire format (wire.h) arrive on a TCP listener (one
// connection per sender, records split across reads as TCP likes) and on a
// UDP socket (one or more whole records per datagram). Each valid record is
// appended to its stream's windows; every invalid one is dropped and counted
// by reason, and never affects the records around it or any other
// connection.
//
// Roles (one class each): `ingest_sink` turns a line into a window update
// and is shared by all sockets; `ingest_server` owns the acceptor, the UDP
// socket and the TCP sessions (ingest.cc).
//
// Limits. max_connections (further connections are accepted and closed at
// once, counted as refused), max_line_bytes (longer lines are dropped as
// line_too_long), idle_timeout_seconds (a connection that sends nothing for
// that long is closed), and the stream table's max_streams.
//
// Thread-safety. The server's handlers may run on several threads calling
// the same io_context's run(); each TCP session runs on its own strand.
// ingest_sink::consume is thread-safe. Counters are atomics.
#pragma once

#include <array>
#include <atomic>
#include <cstdint>
#include <memory>
#include <mutex>
#include <optional>
#include <set>
#include <span>
#include <string>
#include <string_view>

#include "core/status.h"
#include "daemon/asio.h"
#include "daemon/evaluator.h"
#include "daemon/stream_table.h"
#include "daemon/wire.h"

namespace plumbline {

struct ingest_counters {
  std::array<std::atomic<uint64_t>, wire::reject_reason_count> rejected{};
  std::atomic<uint64_t> records{0};            // valid records appended
  std::atomic<uint64_t> connections_total{0};  // TCP connections accepted and served
  std::atomic<uint64_t> connections_refused{0};
  std::atomic<uint64_t> connections_idle_closed{0};
  std::atomic<uint64_t> datagrams{0};
  std::atomic<int64_t> connections_open{0};
};

class ingest_sink {
 public:
  ingest_sink(stream_table& streams, evaluator& eval, ingest_counters& counters)
      : streams_(streams), eval_(eval), counters_(counters) {}

  // One line of the wire format (without its newline). `receipt_time` is the
  // time used for records with an empty TIME field.
  void consume(std::string_view line, double receipt_time);
  // The same for many lines, in order, with the same effect as consume() on
  // each: done a group at a time, parsing the group first and then looking
  // its streams up with prefetches, so that the cache misses of different
  // streams overlap instead of queueing (ingest.cc). The views must stay
  // valid for the call only.
  void consume_lines(std::span<const std::string_view> lines, double receipt_time);
  // One over-long line was dropped.
  void overlong() { reject(wire::reject_reason::line_too_long); }

  void reject(wire::reject_reason r) {
    counters_.rejected[static_cast<std::size_t>(r)].fetch_add(1, std::memory_order_relaxed);
  }

 private:
  // Appends one parsed record to entry e (or the stream it names, when e is
  // null); returns whether it was accepted.
  bool deliver(const wire::record& rec, uint64_t hash, stream_entry* e, double receipt_time);

  stream_table& streams_;
  evaluator& eval_;
  ingest_counters& counters_;
};

struct ingest_limits {
  std::size_t max_line_bytes = 4096;
  std::size_t max_connections = 256;
  double idle_timeout_seconds = 300;
};

class ingest_server {
 public:
  // Binds the listeners that are given (either may be absent). Errors name the
  // address ("cannot listen on 127.0.0.1:7301 (tcp): Address already in use").
  static expected<std::unique_ptr<ingest_server>> create(
      boost::asio::io_context& io, const std::optional<boost::asio::ip::tcp::endpoint>& tcp,
      const std::optional<boost::asio::ip::udp::endpoint>& udp, const ingest_limits& limits,
      ingest_sink& sink, ingest_counters& counters);
  ~ingest_server();

  void start();
  // Stops accepting TCP connections and closes the UDP socket; connections
  // that are open keep being read.
  void stop_accepting();
  // Closes every open connection (their complete lines have been consumed;
  // a partial last line is dropped as the sender did not finish it).
  void close_all();

  std::optional<boost::asio::ip::tcp::endpoint> tcp_endpoint() const;
  std::optional<boost::asio::ip::udp::endpoint> udp_endpoint() const;

  struct impl;

 private:
  explicit ingest_server(std::unique_ptr<impl> p);
  std::unique_ptr<impl> impl_;
};

// "127.0.0.1:7301", "[::1]:7301".
std::string endpoint_text(const boost::asio::ip::address& a, uint16_t port);

}  // namespace plumbline
