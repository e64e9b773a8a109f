// http_server.h: the daemon's HTTP/1.1 server, on Boost.Beast.
//
// Purpose. A small, generic server that reads requests from TCP connections,
// calls ONE handler per request, and writes its response. It knows nothing
// about the daemon's routes: the handler decides everything about the answer,
// and the server takes care of the protocol and of misbehaving clients.
//
// Protocol (RFC 9110 semantics, RFC 9112 message syntax).
// * HTTP/1.1 connections stay open between requests unless the client sends
//   "Connection: close". Pipelined requests are read and answered one at a
//   time, in order: the next request is not read before the previous answer
//   has been written. HTTP/1.0 requests are answered (as HTTP/1.1, with
//   "Connection: close", RFC 9110 section 6.2) and the connection is closed.
// * HEAD is handled as GET: the handler sees method GET with `head` set, and
//   the server sends the GET answer's header (Content-Length included)
//   without its body (RFC 9110 section 9.3.2).
// * "Expect: 100-continue" is answered with 100 Continue before the body is
//   read, unless the header alone already fails (RFC 9110 section 10.1.1).
// * Every response carries Content-Length, except 204 and 304, which must
//   have no body (RFC 9110 sections 8.6, 15.3.5, 15.4.5), plus Date (RFC 9110
//   section 6.6.1) and Server: plumbline/<version>.
// * Request targets in origin-form ("/path?query"), absolute-form
//   ("http://host/path?query", RFC 9112 section 3.2.2) and "*" are accepted.
//   `path` is the percent-decoded path; `query` is the raw query, undecoded
//   (use percent_decode on its parts). "." and ".." segments are not
//   resolved: the handler matches paths, it serves no files.
//
// Answers the server gives on its own, without calling the handler. Their
// bodies are short fixed texts that never echo the request.
//   400  malformed request (request line, header fields, framing), bad percent
//        escape or encoded NUL in the path, an HTTP/1.1 request with no Host
//        or several (RFC 9112 section 3.2), a target in no accepted form
//   413  body longer than max_body_bytes (RFC 9110 section 15.5.14)
//   431  request line and header fields longer than max_header_bytes
//        (RFC 6585 section 5)
//   500  the handler threw, or returned an invalid response (bad status,
//        header name or value, a body with 204 or 304, a header the server
//        owns). The cause is logged; the client gets no detail. The
//        connection stays usable.
//   501  request method unknown to the server (RFC 9110 section 15.6.2)
//   503  connection beyond max_connections (see Limits)
//   505  a major HTTP version other than 1 (RFC 9110 section 15.6.6); a minor
//        version other than 0 and 1 (HTTP/1.2) gets 400
// A 400 for the target or path of a well-formed request, and a 500, leave the
// connection open. After every other answer above the connection is closed:
// the server shuts its sending side, then reads and discards what the client
// still sends (at most 1 MiB, for at most min(request_timeout, 2 s)) before
// closing, so the client sees the answer instead of a reset (RFC 9112
// section 9.6). So does any answer to "Connection: close" or to HTTP/1.0.
//
// Limits. Every resource a client can make the server hold is bounded:
// * max_connections connections are served at once. A further connection is
//   accepted, answered 503 with "Connection: close" and "Retry-After: 1"
//   without its request being read, and closed as above. While
//   max_connections connections are being turned away like this, any further
//   connection is closed at once.
// * max_header_bytes bounds the request line and header fields, and the
//   read buffer holds at most that plus 16 KiB (so pipelined requests queue
//   in the kernel, not in the server). max_body_bytes bounds the body,
//   whether sent with Content-Length or chunked.
// * request_timeout_seconds: once the first byte of a request has arrived,
//   the whole request must arrive within this time, or the connection is
//   closed (no answer is sent). Writing a response has the same allowance.
// * idle_timeout_seconds: an open connection with no request in progress is
//   closed after this time (RFC 9112 section 9.5).
// Handler responses have no size limit: they are the daemon's own.
//
// Thread-safety. The server runs on the io_context passed to create(). Each
// connection has its own strand, so one connection's requests are handled
// one at a time, in order. The handler (and the log sink) is called on a
// thread running io_context::run(); when run() is called from several
// threads, different connections call the handler concurrently, so it must
// be thread-safe. A handler that blocks holds up its connection, and a
// thread of the io_context. start(), stop(), local_endpoint(), connections()
// and requests_total() may be called from any thread.
//
// Life cycle. create() binds and listens; start() begins accepting (call it
// before io_context::run(), or run() may return at once for lack of work).
// stop() closes the listening socket and every connection, at once, without
// waiting for answers in progress; once a handler running at that moment
// returns, nothing of the server is left in the io_context and run() returns
// (if nothing else is queued there). The destructor calls stop(). REQUIRES:
// the io_context outlives the server.
#pragma once

#include <atomic>
#include <cstddef>
#include <cstdint>
#include <functional>
#include <memory>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

#include "core/status.h"
#include "daemon/asio.h"  // Asio and Beast, after <utility> (see asio.h)

namespace plumbline::http {

// One request, as the handler sees it.
struct request {
  // The method. HEAD arrives as GET with `head` set (the server strips the
  // body from the answer). Never boost::beast::http::verb::unknown (501).
  boost::beast::http::verb method = boost::beast::http::verb::get;
  bool head = false;
  unsigned version = 11;            // 10 or 11, for HTTP/1.0 and HTTP/1.1
  std::string target;               // the raw request-target, as sent
  std::string path;                 // percent-decoded path, without the query
  std::string query;                // raw text after '?', not decoded; may be empty
  std::string authorization;        // the Authorization field, or empty
  std::string content_type;         // the Content-Type field, or empty
  std::string body;                 // at most max_body_bytes
  boost::asio::ip::address remote;  // the peer's address
  bool remote_is_loopback = false;  // 127.0.0.0/8, ::1 or ::ffff:127.0.0.0/104
};

// The handler's answer.
struct response {
  unsigned status = 200;                                   // a final status, 200..599
  std::string content_type = "text/plain; charset=utf-8";  // empty: no Content-Type
  std::string body;
  // Extra header fields. Names must be tokens and values must hold no CR, LF
  // or NUL (RFC 9110 section 5.5). Content-Length, Transfer-Encoding,
  // Connection, Content-Type, Date and Server belong to the server and may
  // not appear here.
  std::vector<std::pair<std::string, std::string>> headers;
};

using handler = std::function<response(const request&)>;

// Receives one line of text per event worth an operator's attention (a
// handler failure, failing accepts), without a trailing newline. The default
// writes "plumbline: http: <line>" to stderr.
using log_sink = std::function<void(std::string_view)>;

struct server_limits {
  std::size_t max_connections = 64;     // 1 .. 100000
  std::size_t max_header_bytes = 8192;  // 256 .. 1 MiB
  std::size_t max_body_bytes = 65536;   // 0 .. 1 GiB
  double idle_timeout_seconds = 30;     // (0, 86400]
  double request_timeout_seconds = 10;  // (0, 86400]
};

// Decodes %XX escapes (either case of hex digit). '+' is left as it is. An
// error names the fault: a '%' not followed by two hex digits, or a decoded
// NUL byte.
expected<std::string> percent_decode(std::string_view text);

namespace detail {
struct shared_state;
class listener;
}  // namespace detail

class server {
 public:
  // Binds and listens on `endpoint` (port 0: any free port; see
  // local_endpoint()). Errors: limits out of range, an empty handler, or the
  // socket calls failing, as in "cannot listen on 127.0.0.1:7302: Address
  // already in use". An empty `log` uses the default sink.
  static expected<std::unique_ptr<server>> create(boost::asio::io_context& io,
                                                  const boost::asio::ip::tcp::endpoint& endpoint,
                                                  handler handle, server_limits limits = {},
                                                  log_sink log = {});

  server(const server&) = delete;
  server& operator=(const server&) = delete;
  ~server();

  // Begins accepting connections. Idempotent; does nothing after stop().
  void start();
  // Closes the listening socket and every connection. Idempotent, and safe to
  // call from any thread (the work is posted to the io_context).
  void stop();

  // The address actually bound (the real port when 0 was asked for).
  boost::asio::ip::tcp::endpoint local_endpoint() const { return local_; }
  // Connections being served now (not counting those turned away with 503).
  std::size_t connections() const;
  // Responses the server has begun to write: the handler's answers and the
  // server's own (400, 413, 431, 500, 501, 503), but not 100 Continue.
  uint64_t requests_total() const;

 private:
  server(std::shared_ptr<detail::shared_state> state, std::shared_ptr<detail::listener> listener,
         boost::asio::ip::tcp::endpoint local);

  std::shared_ptr<detail::shared_state> state_;
  std::shared_ptr<detail::listener> listener_;
  boost::asio::ip::tcp::endpoint local_;
  std::atomic<bool> started_{false};
};

}  // namespace plumbline::http
