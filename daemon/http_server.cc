// http_server.cc: the HTTP/1.1 server of http_server.h.
//
// Design note. One class per role, all sharing one `shared_state` (handler,
// limits, counters, the registry of live connections) through a shared_ptr,
// so nothing dangles when the `server` object goes before the io_context's
// queued work does.
// * `listener` owns the acceptor, on a strand of its own. Each accepted socket
//   gets a new strand (make_strand) and a `session`. It also decides, from two
//   atomic counters, whether a connection is served, turned away with 503, or
//   closed at once. Failed accepts (EMFILE and the like) are retried every
//   100 ms instead of in a busy loop, and logged once per run of failures.
// * `session` is one connection, kept alive by shared_from_this() in each
//   pending completion handler. Its loop, on its strand:
//     wait for a first byte (idle timeout) -> read the header (request
//     timeout, counted from that byte) -> [100 Continue] -> read the body
//     (same deadline) -> call the handler -> write the answer (request
//     timeout) -> back to the wait, or a lingering close.
//   Only one request is in flight per connection, so pipelined requests are
//   answered in order; bytes of the next request simply wait in the read
//   buffer (bounded: max_header_bytes + 16 KiB) or in the kernel.
// * Timeouts are beast::tcp_stream's: expires_after() sets one deadline that
//   every later read and write keeps until it is set again, and a deadline
//   that passes closes the socket.
// * stop() flags the shared state and posts to the listener's strand: close
//   the acceptor, then post a close to the strand of every registered
//   session. The registry holds weak_ptrs under a mutex (sessions end on
//   their own strands, in any thread), and copies are taken under the lock
//   and used after it, so no session is destroyed while it is held.
// * Lingering close. After an answer that ends the connection, the session
//   shuts its sending side and reads and discards what the client still sends
//   (1 MiB at most, min(request timeout, 2 s) at most). Closing at once with
//   unread bytes in the kernel would make TCP send a reset, which can destroy
//   the answer before the client reads it (RFC 9112 section 9.6).
// * Dates are formatted by hand (IMF-fixdate, RFC 9110 section 5.6.7), not with
//   strftime, whose day and month names depend on the locale.
#include "daemon/http_server.h"

#include <array>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <ctime>
#include <exception>
#include <iostream>
#include <mutex>
#include <optional>
#include <unordered_map>

#ifndef PLUMBLINE_VERSION
#define PLUMBLINE_VERSION "0.0.0"
#endif

namespace plumbline::http {

namespace net = boost::asio;
namespace beast = boost::beast;
namespace bhttp = boost::beast::http;
using tcp = net::ip::tcp;

namespace {

constexpr std::size_t read_slack_bytes = 16 * 1024;
constexpr std::size_t first_read_bytes = 4096;
constexpr std::size_t linger_max_bytes = std::size_t{1} << 20;
constexpr double linger_max_seconds = 2.0;
constexpr auto accept_retry_delay = std::chrono::milliseconds(100);
constexpr std::size_t log_excerpt_chars = 200;
constexpr const char* server_field = "plumbline/" PLUMBLINE_VERSION;

void default_log(std::string_view line) {
  static std::mutex mu;
  std::lock_guard<std::mutex> lock(mu);
  std::cerr << "plumbline: http: " << line << '\n';
}

std::string endpoint_text(const tcp::endpoint& ep) {
  const net::ip::address a = ep.address();
  std::string host = a.to_string();
  if (a.is_v6()) host = "[" + host + "]";
  return host + ":" + std::to_string(ep.port());
}

// A printable, bounded excerpt of untrusted text for a log line: bytes outside
// printable ASCII (and the backslash) become \xNN.
std::string excerpt(std::string_view s) {
  std::string out;
  for (const char c : s) {
    if (out.size() >= log_excerpt_chars) {
      out += "...";
      break;
    }
    const auto u = static_cast<unsigned char>(c);
    if (u >= 0x20 && u < 0x7f && c != '\\') {
      out += c;
    } else {
      char buf[8];
      std::snprintf(buf, sizeof buf, "\\x%02x", u);
      out += buf;
    }
  }
  return out;
}

net::steady_timer::duration to_duration(double seconds) {
  return std::chrono::duration_cast<net::steady_timer::duration>(
      std::chrono::duration<double>(seconds));
}

// IMF-fixdate, e.g. "Sun, 06 Nov 1994 08:49:37 GMT" (RFC 9110 section 5.6.7).
std::string http_date(std::chrono::system_clock::time_point t) {
  static constexpr const char* days[] = {"Sun", "Mon", "Tue", "Wed", "Thu", "Fri", "Sat"};
  static constexpr const char* months[] = {"Jan", "Feb", "Mar", "Apr", "May", "Jun",
                                           "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"};
  const std::time_t tt = std::chrono::system_clock::to_time_t(t);
  std::tm tm{};
  gmtime_r(&tt, &tm);
  char buf[40];
  std::snprintf(buf, sizeof buf, "%s, %02d %s %04d %02d:%02d:%02d GMT", days[tm.tm_wday % 7],
                tm.tm_mday, months[tm.tm_mon % 12], tm.tm_year + 1900, tm.tm_hour, tm.tm_min,
                tm.tm_sec);
  return buf;
}

// ASCII case-insensitive equality (field names, schemes and tokens are ASCII).
bool iequals(std::string_view a, std::string_view b) {
  if (a.size() != b.size()) return false;
  for (std::size_t i = 0; i < a.size(); ++i) {
    char x = a[i];
    char y = b[i];
    if (x >= 'A' && x <= 'Z') x = static_cast<char>(x - 'A' + 'a');
    if (y >= 'A' && y <= 'Z') y = static_cast<char>(y - 'A' + 'a');
    if (x != y) return false;
  }
  return true;
}

std::string_view to_std(beast::string_view s) {
  return {s.data(), s.size()};
}

// tchar of RFC 9110 section 5.6.2.
bool is_tchar(char c) {
  if ((c >= '0' && c <= '9') || (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z')) return true;
  return std::string_view("!#$%&'*+-.^_`|~").find(c) != std::string_view::npos;
}

bool is_token(std::string_view s) {
  if (s.empty()) return false;
  for (const char c : s)
    if (!is_tchar(c)) return false;
  return true;
}

// A field value holds no control character but HTAB (RFC 9110 section 5.5).
bool is_field_value(std::string_view s) {
  for (const char c : s) {
    const auto u = static_cast<unsigned char>(c);
    if ((u < 0x20 && c != '\t') || u == 0x7f) return false;
  }
  return true;
}

bool is_server_owned(std::string_view name) {
  for (const char* owned :
       {"content-length", "transfer-encoding", "connection", "content-type", "date", "server"})
    if (iequals(name, owned)) return true;
  return false;
}

// Empty when `r` may be sent; otherwise what is wrong with it.
std::string response_problem(const response& r) {
  if (r.status < 200 || r.status > 599)
    return "status " + std::to_string(r.status) + " is not a final status (200..599)";
  if ((r.status == 204 || r.status == 304) && !r.body.empty())
    return "status " + std::to_string(r.status) + " must have no body";
  if (!is_field_value(r.content_type)) return "the content type holds a control character";
  for (const auto& [name, value] : r.headers) {
    if (!is_token(name)) return "header name \"" + excerpt(name) + "\" is not a token";
    if (is_server_owned(name)) return "header \"" + excerpt(name) + "\" is set by the server";
    if (!is_field_value(value))
      return "the value of header \"" + excerpt(name) + "\" holds a control character";
  }
  return {};
}

bool is_loopback(const net::ip::address& a) {
  if (a.is_v4()) return a.to_v4().is_loopback();
  const net::ip::address_v6 v6 = a.to_v6();
  if (v6.is_v4_mapped()) return net::ip::make_address_v4(net::ip::v4_mapped, v6).is_loopback();
  return v6.is_loopback();
}

int hex_value(char c) {
  if (c >= '0' && c <= '9') return c - '0';
  if (c >= 'a' && c <= 'f') return c - 'a' + 10;
  if (c >= 'A' && c <= 'F') return c - 'A' + 10;
  return -1;
}

// Splits a request-target into its raw path and query. False when the target
// is in none of origin-form, absolute-form (http or https) and "*".
bool split_target(std::string_view target, std::string_view& path, std::string_view& query) {
  query = {};
  if (target == "*") {
    path = target;
    return true;
  }
  std::string_view rest = target;
  if (rest.empty() || rest.front() != '/') {
    const std::size_t colon = rest.find("://");
    if (colon == std::string_view::npos) return false;
    const std::string_view scheme = rest.substr(0, colon);
    if (!iequals(scheme, "http") && !iequals(scheme, "https")) return false;
    rest.remove_prefix(colon + 3);
    const std::size_t authority_end = rest.find_first_of("/?#");
    if (authority_end == 0) return false;  // no host
    if (authority_end == std::string_view::npos) {
      path = "/";
      return true;
    }
    rest.remove_prefix(authority_end);
    if (rest.front() == '?') {
      path = "/";
      if (rest.find('#') != std::string_view::npos) return false;
      query = rest.substr(1);
      return true;
    }
  }
  if (rest.find('#') != std::string_view::npos) return false;  // no fragment on the wire
  const std::size_t q = rest.find('?');
  path = rest.substr(0, q);
  if (q != std::string_view::npos) query = rest.substr(q + 1);
  return true;
}

}  // namespace

expected<std::string> percent_decode(std::string_view text) {
  std::string out;
  out.reserve(text.size());
  for (std::size_t i = 0; i < text.size(); ++i) {
    const char c = text[i];
    if (c == '\0') return make_error("NUL byte at offset " + std::to_string(i));
    if (c != '%') {
      out += c;
      continue;
    }
    const int hi = i + 1 < text.size() ? hex_value(text[i + 1]) : -1;
    const int lo = i + 2 < text.size() ? hex_value(text[i + 2]) : -1;
    if (hi < 0 || lo < 0)
      return make_error("'%' at offset " + std::to_string(i) +
                        " is not followed by two hex digits");
    const int decoded = hi * 16 + lo;
    if (decoded == 0) return make_error("encoded NUL (%00) at offset " + std::to_string(i));
    out += static_cast<char>(decoded);
    i += 2;
  }
  return out;
}

namespace detail {

class session;

struct shared_state {
  handler handle;
  server_limits limits;
  log_sink log;
  net::steady_timer::duration idle_timeout{};
  net::steady_timer::duration request_timeout{};
  net::steady_timer::duration linger_timeout{};
  std::atomic<bool> stopping{false};
  std::atomic<std::size_t> serving{0};       // sessions in serve mode
  std::atomic<std::size_t> turning_away{0};  // sessions answering 503
  std::atomic<uint64_t> responses{0};
  std::mutex mu;
  std::unordered_map<uint64_t, std::weak_ptr<session>> sessions;  // guarded by mu
};

class session : public std::enable_shared_from_this<session> {
 public:
  enum class mode { serve, turn_away };

  // REQUIRES: the matching counter of `state` (serving or turning_away) has
  // already been incremented for this session; the destructor decrements it.
  session(std::shared_ptr<shared_state> state, tcp::socket socket, mode m, net::ip::address remote,
          uint64_t id)
      : state_(std::move(state)),
        stream_(std::move(socket)),
        buffer_(state_->limits.max_header_bytes + read_slack_bytes),
        remote_(std::move(remote)),
        mode_(m),
        id_(id) {}

  ~session() {
    {
      std::lock_guard<std::mutex> lock(state_->mu);
      state_->sessions.erase(id_);
    }
    if (mode_ == mode::serve)
      state_->serving.fetch_sub(1);
    else
      state_->turning_away.fetch_sub(1);
  }

  session(const session&) = delete;
  session& operator=(const session&) = delete;

  // Registers the session for stop() and begins its work on its strand.
  void start() {
    {
      std::lock_guard<std::mutex> lock(state_->mu);
      state_->sessions.emplace(id_, weak_from_this());
    }
    net::post(stream_.get_executor(),
              beast::bind_front_handler(&session::begin, shared_from_this()));
  }

  // Closes the connection at once. Called on the session's strand.
  void shutdown() { close(); }

  tcp::socket::executor_type executor() { return stream_.get_executor(); }

 private:
  void begin() {
    if (closed_) return;
    if (state_->stopping.load()) return close();
    if (mode_ == mode::turn_away) {
      response r{503,
                 "text/plain; charset=utf-8",
                 "service unavailable: too many connections\n",
                 {{"Retry-After", "1"}}};
      return send(std::move(r), false, false);
    }
    read_request();
  }

  void read_request() {
    if (closed_) return;
    if (state_->stopping.load()) return close();
    parser_.emplace();
    parser_->header_limit(static_cast<std::uint32_t>(state_->limits.max_header_bytes));
    parser_->body_limit(static_cast<std::uint64_t>(state_->limits.max_body_bytes));
    if (buffer_.size() > 0) {  // a pipelined request has begun already
      stream_.expires_after(state_->request_timeout);
      return read_header();
    }
    stream_.expires_after(state_->idle_timeout);
    const std::size_t n = std::min(first_read_bytes, buffer_.max_size());
    stream_.async_read_some(buffer_.prepare(n), beast::bind_front_handler(&session::on_first_bytes,
                                                                          shared_from_this()));
  }

  void on_first_bytes(beast::error_code ec, std::size_t n) {
    if (closed_) return;
    if (ec) return on_read_error(ec);
    buffer_.commit(n);
    stream_.expires_after(state_->request_timeout);
    read_header();
  }

  void read_header() {
    bhttp::async_read_header(stream_, buffer_, *parser_,
                             beast::bind_front_handler(&session::on_header, shared_from_this()));
  }

  void on_header(beast::error_code ec, std::size_t) {
    if (closed_) return;
    if (ec) return on_read_error(ec);
    const auto& req = parser_->get();
    if (req.method() == bhttp::verb::unknown)
      return send_own(501, "not implemented: unknown request method\n", false);
    const std::size_t hosts = req.count(bhttp::field::host);
    if (hosts > 1 || (hosts == 0 && req.version() >= 11))
      return send_own(400, "bad request: an HTTP/1.1 request needs exactly one Host field\n", false,
                      is_head());
    if (parser_->is_done()) return answer();
    // An HTTP/1.0 client cannot expect 100 Continue (RFC 9110 section 10.1.1).
    if (req.version() >= 11 && iequals(to_std(req[bhttp::field::expect]), "100-continue")) {
      continue_ = {};
      continue_.version(11);
      continue_.result(bhttp::status::continue_);
      return bhttp::async_write(
          stream_, continue_,
          beast::bind_front_handler(&session::on_continue_written, shared_from_this()));
    }
    read_body();
  }

  void on_continue_written(beast::error_code ec, std::size_t) {
    if (closed_) return;
    if (ec) return close();
    read_body();
  }

  void read_body() {
    bhttp::async_read(stream_, buffer_, *parser_,
                      beast::bind_front_handler(&session::on_body, shared_from_this()));
  }

  void on_body(beast::error_code ec, std::size_t) {
    if (closed_) return;
    if (ec) return on_read_error(ec);
    answer();
  }

  void on_read_error(beast::error_code ec) {
    if (ec == bhttp::error::header_limit || ec == bhttp::error::buffer_overflow)
      return send_own(431, "request header fields too large\n", false);
    if (ec == bhttp::error::body_limit)
      return send_own(413, "content too large\n", false, is_head());
    if (ec == bhttp::error::bad_version && other_major_version())
      return send_own(505, "HTTP version not supported\n", false);
    // Other parse errors. end_of_stream (the client closed between requests)
    // and partial_message (it closed mid-request) leave nobody to answer.
    const bool parse_error =
        ec.category() == bhttp::make_error_code(bhttp::error::bad_target).category();
    if (parse_error && ec != bhttp::error::end_of_stream && ec != bhttp::error::partial_message)
      return send_own(400, "bad request: malformed HTTP message\n", false);
    // eof, reset, timeout, operation_aborted: nothing to answer.
    close();
  }

  // Whether the request being read is a HEAD request, as far as known.
  bool is_head() const {
    return parser_ && parser_->is_header_done() && parser_->get().method() == bhttp::verb::head;
  }

  // True when the request line still in the buffer (the parser leaves the
  // bytes of a failed start line there) is well formed but for a major
  // version other than 1: "METHOD SP target SP HTTP/d.d CRLF". The parser
  // accepts only HTTP/1.0 and HTTP/1.1.
  bool other_major_version() const {
    const auto data = buffer_.data();
    const std::string_view text(static_cast<const char*>(data.data()), data.size());
    const std::size_t eol = text.find("\r\n");
    if (eol == std::string_view::npos) return false;
    const std::string_view line = text.substr(0, eol);
    const std::size_t sp = line.rfind(' ');
    if (sp == std::string_view::npos || line.find(' ') == sp) return false;
    const std::string_view version = line.substr(sp + 1);
    const auto digit = [](char c) { return c >= '0' && c <= '9'; };
    return version.size() == 8 && version.substr(0, 5) == "HTTP/" && digit(version[5]) &&
           version[6] == '.' && digit(version[7]) && version[5] != '1';
  }

  // A whole request is in parser_: decode it, call the handler, answer.
  void answer() {
    bhttp::request<bhttp::string_body> msg = parser_->release();
    parser_.reset();
    const bool head = msg.method() == bhttp::verb::head;
    const bool keep_alive = msg.version() >= 11 && msg.keep_alive() && !state_->stopping.load();

    request r;
    r.method = head ? bhttp::verb::get : msg.method();
    r.head = head;
    r.version = msg.version() >= 11 ? 11 : 10;
    r.target = std::string(to_std(msg.target()));
    std::string_view raw_path;
    std::string_view raw_query;
    if (!split_target(r.target, raw_path, raw_query))
      return send_own(400, "bad request: request target in no accepted form\n", keep_alive, head);
    expected<std::string> path = percent_decode(raw_path);
    if (!path.ok())
      return send_own(400, "bad request: malformed percent-encoding in the path\n", keep_alive,
                      head);
    r.path = std::move(path.value());
    r.query = std::string(raw_query);
    r.authorization = std::string(to_std(msg[bhttp::field::authorization]));
    r.content_type = std::string(to_std(msg[bhttp::field::content_type]));
    r.body = std::move(msg.body());
    r.remote = remote_;
    r.remote_is_loopback = is_loopback(remote_);

    const auto what = [&] {
      return std::string(to_std(msg.method_string())) + " " + excerpt(r.target);
    };
    response out;
    try {
      out = state_->handle(r);
    } catch (const std::exception& e) {
      state_->log("handler failed on " + what() + ": " + excerpt(e.what()));
      return send_own(500, "internal server error\n", keep_alive, head);
    } catch (...) {
      state_->log("handler failed on " + what() + ": unknown exception");
      return send_own(500, "internal server error\n", keep_alive, head);
    }
    const std::string problem = response_problem(out);
    if (!problem.empty()) {
      state_->log("handler gave an invalid response to " + what() + ": " + problem);
      return send_own(500, "internal server error\n", keep_alive, head);
    }
    send(std::move(out), head, keep_alive);
  }

  void send_own(unsigned status, const char* text, bool keep_alive, bool head = false) {
    send(response{status, "text/plain; charset=utf-8", text, {}}, head, keep_alive);
  }

  // REQUIRES: response_problem(out) is empty.
  void send(response out, bool head, bool keep_alive) {
    res_ = {};
    res_.version(11);
    res_.result(out.status);
    res_.set(bhttp::field::server, server_field);
    res_.set(bhttp::field::date, http_date(std::chrono::system_clock::now()));
    if (!out.content_type.empty()) res_.set(bhttp::field::content_type, out.content_type);
    for (const auto& [name, value] : out.headers)
      res_.insert(name, value);
    const bool bodiless = out.status == 204 || out.status == 304;
    if (!bodiless) res_.content_length(out.body.size());
    if (!head && !bodiless) res_.body() = std::move(out.body);
    res_.keep_alive(keep_alive);
    state_->responses.fetch_add(1);
    stream_.expires_after(state_->request_timeout);
    bhttp::async_write(
        stream_, res_,
        beast::bind_front_handler(&session::on_write, shared_from_this(), keep_alive));
  }

  void on_write(bool keep_alive, beast::error_code ec, std::size_t) {
    if (closed_) return;
    if (ec) return close();
    res_ = {};
    if (keep_alive) return read_request();
    linger();
  }

  void linger() {
    beast::error_code ec;
    stream_.socket().shutdown(tcp::socket::shutdown_send, ec);
    if (ec) return close();
    stream_.expires_after(state_->linger_timeout);
    drain();
  }

  void drain() {
    stream_.async_read_some(net::buffer(scratch_),
                            beast::bind_front_handler(&session::on_drain, shared_from_this()));
  }

  void on_drain(beast::error_code ec, std::size_t n) {
    if (closed_) return;
    lingered_ += n;
    if (ec || lingered_ >= linger_max_bytes) return close();
    drain();
  }

  void close() {
    if (closed_) return;
    closed_ = true;
    stream_.close();
  }

  std::shared_ptr<shared_state> state_;
  beast::tcp_stream stream_;
  beast::flat_buffer buffer_;
  std::optional<bhttp::request_parser<bhttp::string_body>> parser_;
  bhttp::response<bhttp::string_body> res_;
  bhttp::response<bhttp::empty_body> continue_;
  std::array<char, 4096> scratch_{};
  std::size_t lingered_ = 0;
  net::ip::address remote_;
  mode mode_;
  uint64_t id_;
  bool closed_ = false;
};

class listener : public std::enable_shared_from_this<listener> {
 public:
  listener(net::io_context& io, std::shared_ptr<shared_state> state)
      : io_(io),
        state_(std::move(state)),
        acceptor_(net::make_strand(io)),
        retry_timer_(acceptor_.get_executor()) {}

  // Binds and listens. Called once, before start(), on the creating thread.
  expected<tcp::endpoint> open(const tcp::endpoint& endpoint) {
    beast::error_code ec;
    const auto fail = [&] {
      return make_error("cannot listen on " + endpoint_text(endpoint) + ": " + ec.message());
    };
    if (acceptor_.open(endpoint.protocol(), ec); ec) return fail();
    if (acceptor_.set_option(net::socket_base::reuse_address(true), ec); ec) return fail();
    if (acceptor_.bind(endpoint, ec); ec) return fail();
    if (acceptor_.listen(net::socket_base::max_listen_connections, ec); ec) return fail();
    const tcp::endpoint local = acceptor_.local_endpoint(ec);
    if (ec) return fail();
    local_text_ = endpoint_text(local);
    return local;
  }

  void start() {
    net::post(acceptor_.get_executor(),
              beast::bind_front_handler(&listener::accept, shared_from_this()));
  }

  void stop() {
    net::post(acceptor_.get_executor(),
              beast::bind_front_handler(&listener::shut, shared_from_this()));
  }

 private:
  void accept() {
    if (state_->stopping.load()) return;
    acceptor_.async_accept(net::make_strand(io_),
                           beast::bind_front_handler(&listener::on_accept, shared_from_this()));
  }

  void on_accept(beast::error_code ec, tcp::socket socket) {
    if (ec == net::error::operation_aborted || state_->stopping.load()) return;
    if (ec) {
      if (!failing_)
        state_->log("accepting on " + local_text_ + " failed: " + ec.message() +
                    "; retrying every 100 ms");
      failing_ = true;
      retry_timer_.expires_after(accept_retry_delay);
      retry_timer_.async_wait(beast::bind_front_handler(&listener::on_retry, shared_from_this()));
      return;
    }
    if (failing_) state_->log("accepting on " + local_text_ + " again");
    failing_ = false;
    beast::error_code remote_ec;
    const tcp::endpoint remote = socket.remote_endpoint(remote_ec);
    if (remote_ec) return accept();  // the peer is gone already; the socket closes here
    const std::size_t limit = state_->limits.max_connections;
    session::mode m;
    if (state_->serving.load() < limit) {
      state_->serving.fetch_add(1);
      m = session::mode::serve;
    } else if (state_->turning_away.load() < limit) {
      state_->turning_away.fetch_add(1);
      m = session::mode::turn_away;
    } else {
      return accept();  // the socket closes here
    }
    std::make_shared<session>(state_, std::move(socket), m, remote.address(), next_id_++)->start();
    accept();
  }

  void on_retry(beast::error_code ec) {
    if (ec) return;  // cancelled by stop()
    accept();
  }

  void shut() {
    beast::error_code ec;
    acceptor_.close(ec);
    retry_timer_.cancel();
    std::vector<std::shared_ptr<session>> live;
    {
      std::lock_guard<std::mutex> lock(state_->mu);
      live.reserve(state_->sessions.size());
      for (const auto& entry : state_->sessions)
        if (auto s = entry.second.lock()) live.push_back(std::move(s));
    }
    for (auto& s : live)
      net::post(s->executor(), [s] { s->shutdown(); });
  }

  net::io_context& io_;
  std::shared_ptr<shared_state> state_;
  tcp::acceptor acceptor_;
  net::steady_timer retry_timer_;
  std::string local_text_;
  uint64_t next_id_ = 0;
  bool failing_ = false;
};

}  // namespace detail

namespace {

std::optional<std::string> limits_problem(const server_limits& l) {
  const auto seconds_ok = [](double s) { return std::isfinite(s) && s > 0 && s <= 86400; };
  if (l.max_connections < 1 || l.max_connections > 100000)
    return "max_connections must be between 1 and 100000 (got " +
           std::to_string(l.max_connections) + ")";
  if (l.max_header_bytes < 256 || l.max_header_bytes > (std::size_t{1} << 20))
    return "max_header_bytes must be between 256 and 1048576 (got " +
           std::to_string(l.max_header_bytes) + ")";
  if (l.max_body_bytes > (std::size_t{1} << 30))
    return "max_body_bytes must be at most 1073741824 (got " + std::to_string(l.max_body_bytes) +
           ")";
  if (!seconds_ok(l.idle_timeout_seconds))
    return "idle_timeout_seconds must be more than 0 and at most 86400 (got " +
           std::to_string(l.idle_timeout_seconds) + ")";
  if (!seconds_ok(l.request_timeout_seconds))
    return "request_timeout_seconds must be more than 0 and at most 86400 (got " +
           std::to_string(l.request_timeout_seconds) + ")";
  return std::nullopt;
}

}  // namespace

expected<std::unique_ptr<server>> server::create(net::io_context& io, const tcp::endpoint& endpoint,
                                                 handler handle, server_limits limits,
                                                 log_sink log) {
  if (!handle) return make_error("http server: no request handler given");
  if (auto problem = limits_problem(limits)) return make_error("http server: " + *problem);
  auto state = std::make_shared<detail::shared_state>();
  state->handle = std::move(handle);
  state->limits = limits;
  state->log = log ? std::move(log) : log_sink(default_log);
  state->idle_timeout = to_duration(limits.idle_timeout_seconds);
  state->request_timeout = to_duration(limits.request_timeout_seconds);
  state->linger_timeout = to_duration(std::min(limits.request_timeout_seconds, linger_max_seconds));
  auto l = std::make_shared<detail::listener>(io, state);
  expected<tcp::endpoint> local = l->open(endpoint);
  if (!local.ok()) return local.err();
  return std::unique_ptr<server>(new server(std::move(state), std::move(l), local.value()));
}

server::server(std::shared_ptr<detail::shared_state> state,
               std::shared_ptr<detail::listener> listener, tcp::endpoint local)
    : state_(std::move(state)), listener_(std::move(listener)), local_(local) {}

server::~server() {
  stop();
}

void server::start() {
  if (state_->stopping.load()) return;
  if (started_.exchange(true)) return;
  listener_->start();
}

void server::stop() {
  if (state_->stopping.exchange(true)) return;
  listener_->stop();
}

std::size_t server::connections() const {
  return state_->serving.load();
}

uint64_t server::requests_total() const {
  return state_->responses.load();
}

}  // namespace plumbline::http
