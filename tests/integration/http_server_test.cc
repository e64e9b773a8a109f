// http_server_test.cc: the daemon's HTTP/1.1 server (daemon/http_server.h)
// over real sockets on 127.0.0.1.
//
// Each case starts a server on 127.0.0.1:0 with its io_context running on
// background threads, and talks to it as a client would: through Beast's
// response parser (which shares no code with the server's request handling)
// for well-formed traffic, and through bytes written by hand for malformed
// traffic. What counts as correct comes from the standards, cited beside each
// check:
//   RFC 9110 (HTTP semantics): status codes 400 (15.5.1), 404 (15.5.5), 413
//     (15.5.14), 500 (15.6.1), 501 (15.6.2), 503 (15.6.4), 505 (15.6.6), 100
//     (15.2.1), 204 (15.3.5); HEAD (9.3.2); Content-Length (8.6); Date and
//     IMF-fixdate (6.6.1, 5.6.7); Retry-After (10.2.3); field values (5.5).
//   RFC 6585 section 5: 431 Request Header Fields Too Large.
//   RFC 9112 (HTTP/1.1 messages): persistence and pipelining (9.3, 9.3.2),
//     Host (3.2), absolute-form (3.2.2), chunked coding (7.1).
//   RFC 3986 section 2.1: percent-encoding, hex digits in either case.
// Every case is bounded in time: each client operation has a 3 s deadline,
// and timeouts under test are 0.3 s.
#include "daemon/http_server.h"  // includes daemon/asio.h

#include <catch2/catch.hpp>
#include <chrono>
#include <cmath>
#include <condition_variable>
#include <ctime>
#include <future>
#include <mutex>
#include <nlohmann/json.hpp>
#include <regex>
#include <stdexcept>
#include <string>
#include <thread>
#include <vector>

namespace {

namespace net = boost::asio;
namespace beast = boost::beast;
namespace bhttp = boost::beast::http;
using tcp = net::ip::tcp;
using namespace std::chrono_literals;
using Catch::Matchers::Contains;
using nlohmann::json;
using plumbline::http::request;
using plumbline::http::response;
using plumbline::http::server;
using plumbline::http::server_limits;
using clock_type = std::chrono::steady_clock;

using http_response = bhttp::response<bhttp::string_body>;

double seconds_since(clock_type::time_point t0) {
  return std::chrono::duration<double>(clock_type::now() - t0).count();
}

std::string field(const http_response& r, bhttp::field f) {
  const auto v = r[f];
  return std::string(v.data(), v.size());
}

std::string field(const http_response& r, const char* name) {
  const auto v = r[name];
  return std::string(v.data(), v.size());
}

// A running server on `address` port 0 (127.0.0.1 unless told), its
// io_context run by `threads` threads.
class live_server {
 public:
  explicit live_server(plumbline::http::handler h, server_limits limits = {}, int threads = 1,
                       const char* address = "127.0.0.1") {
    auto created = server::create(io_, tcp::endpoint(net::ip::make_address(address), 0),
                                  std::move(h), limits, [this](std::string_view line) {
                                    std::lock_guard<std::mutex> lock(mu_);
                                    log_.emplace_back(line);
                                  });
    if (!created.ok()) throw std::runtime_error(created.err().message);
    server_ = std::move(created.value());
    server_->start();
    for (int i = 0; i < threads; ++i)
      threads_.emplace_back([this] {
        io_.run();
        std::lock_guard<std::mutex> lock(mu_);
        ++finished_;
        cv_.notify_all();
      });
  }

  ~live_server() {
    if (!threads_.empty()) stop_and_join(3s);
  }

  // stop() from this (non-io) thread; true when every run() returned within
  // `limit`. Otherwise the io_context is stopped by force so the test ends.
  bool stop_and_join(std::chrono::milliseconds limit) {
    server_->stop();
    bool in_time;
    {
      std::unique_lock<std::mutex> lock(mu_);
      in_time = cv_.wait_for(lock, limit, [&] { return finished_ == threads_.size(); });
    }
    if (!in_time) io_.stop();
    for (auto& t : threads_)
      t.join();
    threads_.clear();
    return in_time;
  }

  unsigned short port() const { return server_->local_endpoint().port(); }
  server& srv() { return *server_; }

  std::vector<std::string> log() {
    std::lock_guard<std::mutex> lock(mu_);
    return log_;
  }

  // Polls until connections() == n or 2 s pass.
  bool wait_for_connections(std::size_t n) {
    const auto t0 = clock_type::now();
    while (server_->connections() != n) {
      if (seconds_since(t0) > 2.0) return false;
      std::this_thread::sleep_for(5ms);
    }
    return true;
  }

 private:
  net::io_context io_;
  std::unique_ptr<server> server_;
  std::vector<std::thread> threads_;
  std::mutex mu_;
  std::condition_variable cv_;
  std::size_t finished_ = 0;
  std::vector<std::string> log_;
};

// A client with its own io_context; every operation has a deadline. Safe to
// use from one thread (each worker thread of a test has its own).
class client {
 public:
  explicit client(unsigned short port, const char* address = "127.0.0.1") {
    connect_error_ = run(
        [&](auto done) {
          stream_.async_connect(tcp::endpoint(net::ip::make_address(address), port),
                                [done](beast::error_code ec) { done(ec); });
        },
        3s);
  }

  bool connected() const { return !connect_error_; }

  beast::error_code send(std::string_view bytes) {
    return run(
        [&](auto done) {
          net::async_write(stream_, net::buffer(bytes.data(), bytes.size()),
                           [done](beast::error_code ec, std::size_t) { done(ec); });
        },
        3s);
  }

  // Reads one response (for a HEAD request, `head` tells the parser that no
  // body follows even though Content-Length is set, RFC 9110 section 9.3.2).
  beast::error_code read(http_response& out, bool head = false) {
    bhttp::response_parser<bhttp::string_body> parser;
    parser.body_limit(std::uint64_t{1} << 24);
    if (head) parser.skip(true);
    const auto ec = run(
        [&](auto done) {
          bhttp::async_read(stream_, buffer_, parser,
                            [done](beast::error_code e, std::size_t) { done(e); });
        },
        3s);
    if (!ec) out = parser.release();
    return ec;
  }

  // Sends `bytes`, then reads one response; fails the test on a socket error.
  http_response exchange(std::string_view bytes, bool head = false) {
    REQUIRE_FALSE(send(bytes));
    http_response r;
    const auto ec = read(r, head);
    INFO("read: " << ec.message());
    REQUIRE_FALSE(ec);
    return r;
  }

  // True when the server closes the connection (EOF or reset) within `limit`
  // and sends nothing more before that.
  bool closed_within(std::chrono::milliseconds limit) {
    if (buffer_.size() > 0) return false;
    std::array<char, 256> scratch{};
    std::size_t got = 0;
    const auto ec = run(
        [&](auto done) {
          stream_.async_read_some(net::buffer(scratch),
                                  [&got, done](beast::error_code e, std::size_t n) {
                                    got = n;
                                    done(e);
                                  });
        },
        limit);
    return got == 0 && (ec == net::error::eof || ec == net::error::connection_reset);
  }

  void close() { stream_.close(); }

 private:
  template <class Start>
  beast::error_code run(Start start, std::chrono::milliseconds limit) {
    beast::error_code result = net::error::would_block;
    stream_.expires_after(limit);
    start([&result](beast::error_code ec) { result = ec; });
    io_.restart();
    io_.run();
    return result;
  }

  net::io_context io_;
  beast::tcp_stream stream_{io_};
  beast::flat_buffer buffer_;
  beast::error_code connect_error_;
};

std::string get_request(const std::string& target, const std::string& extra = "",
                        const char* method = "GET") {
  return std::string(method) + " " + target + " HTTP/1.1\r\nHost: 127.0.0.1\r\n" + extra + "\r\n";
}

// The test handler: describes the request it saw as JSON, or acts out a
// route. Counts its calls.
struct test_routes {
  std::atomic<int> calls{0};

  plumbline::http::handler handler() {
    return [this](const request& r) -> response {
      ++calls;
      if (r.path == "/boom") throw std::runtime_error("sensor bus for line 3 lost");
      if (r.path == "/missing")
        return response{404,
                        "text/plain; charset=utf-8",
                        "no stream of that name\n",
                        {{"X-Stream-Hint", "larkspur.line3.fill_weight"}}};
      if (r.path == "/empty") return response{204, "", "", {}};
      if (r.path == "/injected")
        return response{200, "text/plain", "x", {{"X-Note", "a\r\nSet-Cookie: y=1"}}};
      if (r.path == "/owned") return response{200, "text/plain", "x", {{"Content-Length", "9"}}};
      json j = {{"method", std::string(bhttp::to_string(r.method))},
                {"head", r.head},
                {"version", r.version},
                {"target", r.target},
                {"path", r.path},
                {"query", r.query},
                {"authorization", r.authorization},
                {"content_type", r.content_type},
                {"body", r.body},
                {"remote", r.remote.to_string()},
                {"loopback", r.remote_is_loopback}};
      return response{200, "application/json", j.dump() + "\n", {}};
    };
  }
};

json body_json(const http_response& r) {
  return json::parse(r.body());
}

// Content-Length is present and matches the body (RFC 9110 section 8.6).
void check_length(const http_response& r) {
  INFO("status " << r.result_int());
  REQUIRE(r.count(bhttp::field::content_length) == 1);
  CHECK(field(r, bhttp::field::content_length) == std::to_string(r.body().size()));
}

TEST_CASE("GET is answered and HEAD gets the same header without the body", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  client c(s.port());
  REQUIRE(c.connected());

  const http_response get = c.exchange(get_request("/api/streams"));
  CHECK(get.result_int() == 200);
  CHECK(get.version() == 11);
  check_length(get);
  CHECK(field(get, bhttp::field::content_type) == "application/json");
  CHECK(body_json(get)["method"] == "GET");
  CHECK(body_json(get)["head"] == false);
  CHECK(field(get, bhttp::field::server).rfind("plumbline/", 0) == 0);

  // RFC 9110 section 9.3.2: HEAD gets the GET header fields, Content-Length
  // included, and no content. The next request on the connection must parse
  // cleanly, which fails if body bytes were sent anyway.
  const http_response head = c.exchange(get_request("/api/streams", "", "HEAD"), true);
  CHECK(head.result_int() == 200);
  CHECK(head.body().empty());
  // The JSON body differs only in "head":true (4 chars) vs "head":false (5).
  CHECK(field(head, bhttp::field::content_length) == std::to_string(get.body().size() - 1));

  const http_response again = c.exchange(get_request("/api/streams"));
  CHECK(again.result_int() == 200);
  CHECK(again.body() == get.body());
}

TEST_CASE("the Date field is an IMF-fixdate of the current time", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  client c(s.port());
  const http_response r = c.exchange(get_request("/"));
  const std::string date = field(r, bhttp::field::date);
  // RFC 9110 section 5.6.7: IMF-fixdate, e.g. "Sun, 06 Nov 1994 08:49:37 GMT".
  const std::regex fixdate(
      "(Mon|Tue|Wed|Thu|Fri|Sat|Sun), [0-9]{2} "
      "(Jan|Feb|Mar|Apr|May|Jun|Jul|Aug|Sep|Oct|Nov|Dec) [0-9]{4} [0-9]{2}:[0-9]{2}:[0-9]{2} GMT");
  INFO(date);
  REQUIRE(std::regex_match(date, fixdate));
  std::tm tm{};
  REQUIRE(strptime(date.c_str(), "%a, %d %b %Y %H:%M:%S GMT", &tm) != nullptr);
  const std::time_t sent = timegm(&tm);
  CHECK(std::abs(std::difftime(std::time(nullptr), sent)) < 60);
}

TEST_CASE("one keep-alive connection carries several requests", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  client c(s.port());
  // RFC 9112 section 9.3: HTTP/1.1 connections persist by default.
  for (int i = 0; i < 5; ++i) {
    const http_response r = c.exchange(get_request("/n/" + std::to_string(i)));
    CHECK(r.result_int() == 200);
    CHECK(r.keep_alive());
    CHECK(body_json(r)["path"] == "/n/" + std::to_string(i));
  }
  CHECK(s.srv().connections() == 1);
  CHECK(s.srv().requests_total() == 5);
  CHECK(routes.calls == 5);
}

TEST_CASE("pipelined requests are answered in order", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  client c(s.port());
  // RFC 9112 section 9.3.2: responses to pipelined requests come in the
  // order of the requests. All three go out in one write; the last one asks
  // to close.
  REQUIRE_FALSE(c.send(get_request("/p/1") + get_request("/p/2") +
                       get_request("/p/3", "Connection: close\r\n")));
  for (int i = 1; i <= 3; ++i) {
    http_response r;
    REQUIRE_FALSE(c.read(r));
    CHECK(body_json(r)["path"] == "/p/" + std::to_string(i));
    CHECK(r.keep_alive() == (i < 3));
  }
  CHECK(c.closed_within(3000ms));
}

TEST_CASE("the path is percent-decoded and the query is passed raw", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  client c(s.port());
  // RFC 3986 section 2.1: %2F is '/', and hex digits may be either case.
  const http_response r =
      c.exchange(get_request("/api/streams/line3%2Ffill%2fweight%20g?window=recent&x=%41"));
  CHECK(r.result_int() == 200);
  const json j = body_json(r);
  CHECK(j["path"] == "/api/streams/line3/fill/weight g");
  CHECK(j["query"] == "window=recent&x=%41");
  CHECK(j["target"] == "/api/streams/line3%2Ffill%2fweight%20g?window=recent&x=%41");

  // RFC 9112 section 3.2.2: a server accepts the absolute-form.
  const http_response a = c.exchange(get_request("http://127.0.0.1/healthz?probe=1"));
  CHECK(a.result_int() == 200);
  CHECK(body_json(a)["path"] == "/healthz");
  CHECK(body_json(a)["query"] == "probe=1");
}

TEST_CASE("a bad percent escape in the path is answered 400 without the handler", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  client c(s.port());
  for (const char* target : {"/api/%zz", "/api/%4", "/api/%", "/api/%00end", "/a%2"}) {
    INFO(target);
    const http_response r = c.exchange(get_request(target));
    CHECK(r.result_int() == 400);  // RFC 9110 section 15.5.1
    check_length(r);
    CHECK(r.keep_alive());                 // the message itself was well formed
    CHECK_THAT(r.body(), !Contains("%"));  // the input is not echoed
  }
  CHECK(routes.calls == 0);
  // The connection still serves well-formed requests.
  CHECK(c.exchange(get_request("/ok")).result_int() == 200);
}

TEST_CASE("percent_decode follows RFC 3986 section 2.1", "[http]") {
  using plumbline::http::percent_decode;
  REQUIRE(percent_decode("a%2Fb%2fc").ok());
  CHECK(percent_decode("a%2Fb%2fc").value() == "a/b/c");
  CHECK(percent_decode("%E2%82%AC").value() == "\xE2\x82\xAC");  // UTF-8 of U+20AC
  CHECK(percent_decode("a+b").value() == "a+b");                 // '+' means space only in forms
  CHECK(percent_decode("").value().empty());
  CHECK_THAT(percent_decode("ab%g1").err().message, Contains("offset 2"));
  CHECK_THAT(percent_decode("ab%").err().message, Contains("two hex digits"));
  CHECK_THAT(percent_decode("%00").err().message, Contains("NUL"));
}

TEST_CASE("a 404 from the handler passes through with its body and fields", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  client c(s.port());
  const http_response r = c.exchange(get_request("/missing"));
  CHECK(r.result_int() == 404);  // RFC 9110 section 15.5.5
  CHECK(r.body() == "no stream of that name\n");
  CHECK(field(r, "X-Stream-Hint") == "larkspur.line3.fill_weight");
  check_length(r);
  CHECK(r.keep_alive());
  CHECK(c.exchange(get_request("/after")).result_int() == 200);
}

TEST_CASE("204 from the handler carries no Content-Length and no body", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  client c(s.port());
  // RFC 9110 section 8.6: no Content-Length in a 204 response.
  const http_response r = c.exchange(get_request("/empty"));
  CHECK(r.result_int() == 204);
  CHECK(r.count(bhttp::field::content_length) == 0);
  CHECK(r.body().empty());
  CHECK(c.exchange(get_request("/after")).result_int() == 200);
}

TEST_CASE("header fields over max_header_bytes are answered 431 and the connection closed",
          "[http]") {
  test_routes routes;
  server_limits limits;
  limits.max_header_bytes = 1024;
  live_server s(routes.handler(), limits);
  {
    // Well under the limit: served.
    client c(s.port());
    CHECK(c.exchange(get_request("/", "X-Batch: " + std::string(600, 'b') + "\r\n")).result_int() ==
          200);
  }
  client c(s.port());
  const http_response r =
      c.exchange(get_request("/", "X-Batch: " + std::string(2000, 'b') + "\r\n"));
  CHECK(r.result_int() == 431);  // RFC 6585 section 5
  check_length(r);
  CHECK_FALSE(r.keep_alive());
  CHECK_THAT(r.body(), !Contains("bbbb"));
  CHECK(c.closed_within(3000ms));
  CHECK(routes.calls == 1);
}

TEST_CASE("a body over max_body_bytes is answered 413 and the connection closed", "[http]") {
  test_routes routes;
  server_limits limits;
  limits.max_body_bytes = 1024;
  live_server s(routes.handler(), limits);
  SECTION("a body at the limit is served") {
    client c(s.port());
    const std::string body(1024, 'w');
    const http_response r = c.exchange(
        "POST /api/streams/line3/rebaseline HTTP/1.1\r\nHost: 127.0.0.1\r\n"
        "Content-Type: text/plain\r\nAuthorization: Bearer larkspur-qa\r\nContent-Length: 1024\r\n"
        "\r\n" +
        body);
    CHECK(r.result_int() == 200);
    const json j = body_json(r);
    CHECK(j["method"] == "POST");
    CHECK(j["body"] == body);
    CHECK(j["content_type"] == "text/plain");
    CHECK(j["authorization"] == "Bearer larkspur-qa");
  }
  SECTION("Content-Length over the limit") {
    client c(s.port());
    const http_response r =
        c.exchange("POST /api/x HTTP/1.1\r\nHost: 127.0.0.1\r\nContent-Length: 4096\r\n\r\n" +
                   std::string(4096, 'w'));
    CHECK(r.result_int() == 413);  // RFC 9110 section 15.5.14
    check_length(r);
    CHECK_FALSE(r.keep_alive());
    CHECK(c.closed_within(3000ms));
    CHECK(routes.calls == 0);
  }
  SECTION("a chunked body that grows over the limit") {
    // RFC 9112 section 7.1: chunk sizes in hex; 0x300 = 768 bytes each.
    std::string chunked =
        "POST /api/x HTTP/1.1\r\nHost: 127.0.0.1\r\nTransfer-Encoding: chunked\r\n\r\n";
    for (int i = 0; i < 3; ++i)
      chunked += "300\r\n" + std::string(768, 'w') + "\r\n";
    chunked += "0\r\n\r\n";
    client c(s.port());
    const http_response r = c.exchange(chunked);
    CHECK(r.result_int() == 413);
    CHECK(c.closed_within(3000ms));
    CHECK(routes.calls == 0);
  }
}

TEST_CASE("a malformed request line is answered 400 and the connection closed", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  for (const char* bad : {"this is not http\r\n\r\n", "GET /\r\nHost: x\r\n\r\n",
                          "GET / HTTP/1.1\r\nHost: 127.0.0.1\r\nBad Field: <script>\r\n\r\n",
                          "GET / HTTP/1.1\r\nHost: 127.0.0.1\r\nContent-Length: 12x\r\n\r\n"}) {
    INFO(bad);
    client c(s.port());
    const http_response r = c.exchange(bad);
    CHECK(r.result_int() == 400);  // RFC 9110 section 15.5.1
    check_length(r);
    CHECK_THAT(r.body(), !Contains("<script>"));
    CHECK(c.closed_within(3000ms));
  }
  CHECK(routes.calls == 0);
}

TEST_CASE("an HTTP/1.1 request without exactly one Host is answered 400", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  // RFC 9112 section 3.2: a server MUST answer 400 to an HTTP/1.1 request
  // that lacks Host, or to any request with more than one.
  for (const char* bad :
       {"GET / HTTP/1.1\r\n\r\n", "GET / HTTP/1.1\r\nHost: a.example\r\nHost: b.example\r\n\r\n"}) {
    client c(s.port());
    CHECK(c.exchange(bad).result_int() == 400);
    CHECK(c.closed_within(3000ms));
  }
  CHECK(routes.calls == 0);
}

TEST_CASE("an unknown method is answered 501 and a major version 2 with 505", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  {
    client c(s.port());
    CHECK(c.exchange("CALIBRATE / HTTP/1.1\r\nHost: 127.0.0.1\r\n\r\n").result_int() ==
          501);  // RFC 9110 section 15.6.2
  }
  {
    client c(s.port());
    CHECK(c.exchange("GET / HTTP/2.0\r\nHost: 127.0.0.1\r\n\r\n").result_int() ==
          505);  // RFC 9110 section 15.6.6
  }
  CHECK(routes.calls == 0);
}

TEST_CASE("HTTP/1.0 requests are answered and the connection closed", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  client c(s.port());
  // Even with keep-alive asked for, HTTP/1.0 connections are closed; the
  // answer says so (RFC 9112 section 9.6, "Connection: close").
  const http_response r = c.exchange("GET /legacy HTTP/1.0\r\nConnection: keep-alive\r\n\r\n");
  CHECK(r.result_int() == 200);
  CHECK(body_json(r)["version"] == 10);
  CHECK(field(r, bhttp::field::connection) == "close");
  check_length(r);
  CHECK(c.closed_within(3000ms));
}

TEST_CASE("Expect 100-continue gets an interim 100 before the body is sent", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  client c(s.port());
  // RFC 9110 section 10.1.1: the client waits for 100 (Continue) before it
  // sends the content.
  const http_response interim = c.exchange(
      "POST /api/x HTTP/1.1\r\nHost: 127.0.0.1\r\nExpect: 100-continue\r\nContent-Length: "
      "5\r\n\r\n");
  CHECK(interim.result_int() == 100);  // RFC 9110 section 15.2.1
  const http_response r = c.exchange("12.75");
  CHECK(r.result_int() == 200);
  CHECK(body_json(r)["body"] == "12.75");
  // The interim answer is not counted as a response.
  CHECK(s.srv().requests_total() == 1);
}

TEST_CASE("a handler that throws gives 500 and later requests still work", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  client c(s.port());
  const http_response r = c.exchange(get_request("/boom"));
  CHECK(r.result_int() == 500);  // RFC 9110 section 15.6.1
  check_length(r);
  CHECK_THAT(r.body(), !Contains("sensor bus"));  // no detail for the client
  // The same connection survives, and a new one works.
  CHECK(c.exchange(get_request("/after")).result_int() == 200);
  client fresh(s.port());
  CHECK(fresh.exchange(get_request("/fresh")).result_int() == 200);
  const auto log = s.log();
  REQUIRE(log.size() == 1);
  CHECK_THAT(log[0], Contains("GET /boom") && Contains("sensor bus for line 3 lost"));
}

TEST_CASE("an invalid handler response gives 500 and is logged", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  client c(s.port());
  // A CR LF in a field value would let the handler inject header fields
  // (RFC 9110 section 5.5 forbids CR and LF in field values).
  const http_response r = c.exchange(get_request("/injected"));
  CHECK(r.result_int() == 500);
  CHECK(r.count("Set-Cookie") == 0);
  // Content-Length is the server's.
  const http_response owned = c.exchange(get_request("/owned"));
  CHECK(owned.result_int() == 500);
  check_length(owned);
  const auto log = s.log();
  REQUIRE(log.size() == 2);
  CHECK_THAT(log[0], Contains("control character"));
  CHECK_THAT(log[1], Contains("set by the server"));
}

TEST_CASE("connections over max_connections are answered 503 and closed", "[http]") {
  test_routes routes;
  server_limits limits;
  limits.max_connections = 2;
  live_server s(routes.handler(), limits);
  auto c1 = std::make_unique<client>(s.port());
  client c2(s.port());
  CHECK(c1->exchange(get_request("/1")).result_int() == 200);
  CHECK(c2.exchange(get_request("/2")).result_int() == 200);
  CHECK(s.srv().connections() == 2);

  client c3(s.port());
  const http_response r = c3.exchange(get_request("/3"));
  CHECK(r.result_int() == 503);                       // RFC 9110 section 15.6.4
  CHECK(field(r, bhttp::field::retry_after) == "1");  // RFC 9110 section 10.2.3
  CHECK_FALSE(r.keep_alive());
  check_length(r);
  CHECK(c3.closed_within(3000ms));
  CHECK(s.srv().connections() == 2);

  // Once a served connection ends, a new one is served again.
  c1.reset();
  REQUIRE(s.wait_for_connections(1));
  client c4(s.port());
  CHECK(c4.exchange(get_request("/4")).result_int() == 200);
  CHECK(routes.calls == 3);
}

TEST_CASE("an idle connection is closed after idle_timeout_seconds", "[http]") {
  test_routes routes;
  server_limits limits;
  limits.idle_timeout_seconds = 0.3;
  live_server s(routes.handler(), limits);
  SECTION("after a request") {
    client c(s.port());
    CHECK(c.exchange(get_request("/")).result_int() == 200);
    const auto t0 = clock_type::now();
    CHECK(c.closed_within(3000ms));
    CHECK(seconds_since(t0) >= 0.2);
    CHECK(seconds_since(t0) < 2.0);
  }
  SECTION("without any request") {
    const auto t0 = clock_type::now();
    client c(s.port());
    CHECK(c.closed_within(3000ms));
    CHECK(seconds_since(t0) >= 0.2);
    CHECK(seconds_since(t0) < 2.0);
  }
  REQUIRE(s.wait_for_connections(0));
}

TEST_CASE("a request that stalls is cut off after request_timeout_seconds", "[http]") {
  test_routes routes;
  server_limits limits;
  limits.idle_timeout_seconds = 10;
  limits.request_timeout_seconds = 0.3;
  live_server s(routes.handler(), limits);
  client c(s.port());
  const auto t0 = clock_type::now();
  REQUIRE_FALSE(c.send("GET /slowloris HTTP/1.1\r\nHost: 127.0.0.1\r\nX-Part: "));
  CHECK(c.closed_within(3000ms));
  CHECK(seconds_since(t0) >= 0.2);
  CHECK(seconds_since(t0) < 2.0);
  CHECK(routes.calls == 0);
}

TEST_CASE("stop with open connections returns promptly and run exits", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  client idle(s.port());
  CHECK(idle.exchange(get_request("/")).result_int() == 200);
  client partial(s.port());
  REQUIRE_FALSE(partial.send("GET / HTTP/1.1\r\nHo"));
  client silent(s.port());
  REQUIRE(s.wait_for_connections(3));

  const auto t0 = clock_type::now();
  REQUIRE(s.stop_and_join(2000ms));
  CHECK(seconds_since(t0) < 1.0);
  CHECK(idle.closed_within(1000ms));
  CHECK(partial.closed_within(1000ms));
  CHECK(silent.closed_within(1000ms));
  CHECK(s.srv().connections() == 0);
  // The listening socket is closed too.
  client late(s.port());
  CHECK_FALSE(late.connected());
}

TEST_CASE("stop waits for a running handler and then run exits", "[http]") {
  std::promise<void> entered;
  std::promise<void> release;
  std::shared_future<void> released = release.get_future().share();
  std::atomic<bool> done{false};
  live_server s([&](const request&) {
    entered.set_value();
    released.wait_for(3s);
    done = true;
    return response{200, "text/plain", "late\n", {}};
  });
  client c(s.port());
  REQUIRE_FALSE(c.send(get_request("/slow")));
  REQUIRE(entered.get_future().wait_for(3s) == std::future_status::ready);
  std::thread releaser([&] {
    std::this_thread::sleep_for(100ms);
    release.set_value();
  });
  const auto t0 = clock_type::now();
  const bool in_time = s.stop_and_join(2000ms);
  releaser.join();
  CHECK(in_time);
  CHECK(done);
  CHECK(seconds_since(t0) >= 0.05);  // it did wait for the handler
  CHECK(seconds_since(t0) < 1.5);
}

TEST_CASE("the handler sees 127.0.0.1 as a loopback peer", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  client c(s.port());
  const json j = body_json(c.exchange(get_request("/")));
  CHECK(j["remote"] == "127.0.0.1");
  CHECK(j["loopback"] == true);  // RFC 1122 section 3.2.1.3: 127.0.0.0/8 is loopback
}

TEST_CASE("an IPv6 loopback peer is seen as loopback and named in brackets", "[http]") {
  test_routes routes;
  live_server s(routes.handler(), server_limits{}, 1, "::1");
  client c(s.port(), "::1");
  const json j = body_json(c.exchange(get_request("/v6")));
  CHECK(j["remote"] == "::1");
  CHECK(j["loopback"] == true);  // RFC 4291 section 2.5.3: ::1 is the loopback address
  // The port is taken: the message writes the IPv6 address in brackets, as
  // RFC 3986 section 3.2.2 writes IPv6 literals before a port.
  net::io_context io;
  auto second =
      server::create(io, tcp::endpoint(net::ip::make_address("::1"), s.port()), routes.handler());
  REQUIRE_FALSE(second.ok());
  CHECK(second.err().message ==
        "cannot listen on [::1]:" + std::to_string(s.port()) + ": Address already in use");
}

TEST_CASE("fifty concurrent clients of twenty requests each are all answered", "[http]") {
  test_routes routes;
  live_server s(routes.handler(), server_limits{}, 2);  // run() on two threads
  constexpr int clients = 50;
  constexpr int per_client = 20;
  std::atomic<int> answered{0};
  std::mutex failures_mu;
  std::vector<std::string> failures;
  std::vector<std::thread> workers;
  for (int t = 0; t < clients; ++t)
    workers.emplace_back([&, t] {
      const auto fail = [&](std::string what) {
        std::lock_guard<std::mutex> lock(failures_mu);
        failures.push_back("client " + std::to_string(t) + ": " + what);
      };
      client c(s.port());
      if (!c.connected()) return fail("cannot connect");
      for (int i = 0; i < per_client; ++i) {
        const std::string path = "/c/" + std::to_string(t) + "/" + std::to_string(i);
        if (auto ec = c.send(get_request(path))) return fail("send: " + ec.message());
        http_response r;
        if (auto ec = c.read(r)) return fail("read: " + ec.message());
        if (r.result_int() != 200) return fail("status " + std::to_string(r.result_int()));
        const json j = json::parse(r.body(), nullptr, false);
        if (j.is_discarded() || j["path"] != path) return fail("answer to another request");
        ++answered;
      }
    });
  for (auto& w : workers)
    w.join();
  INFO((failures.empty() ? std::string() : failures.front()));
  CHECK(failures.empty());
  CHECK(answered == clients * per_client);
  CHECK(routes.calls == clients * per_client);
  CHECK(s.srv().requests_total() == static_cast<uint64_t>(clients * per_client));
}

TEST_CASE("a port already in use is reported with its address", "[http]") {
  test_routes routes;
  live_server s(routes.handler());
  net::io_context io;
  auto second = server::create(io, tcp::endpoint(net::ip::make_address("127.0.0.1"), s.port()),
                               routes.handler());
  REQUIRE_FALSE(second.ok());
  // "Address already in use" is the C library's text for EADDRINUSE (POSIX).
  CHECK(second.err().message ==
        "cannot listen on 127.0.0.1:" + std::to_string(s.port()) + ": Address already in use");
}

TEST_CASE("limits out of range and a missing handler are refused by create", "[http]") {
  net::io_context io;
  const tcp::endpoint ep(net::ip::make_address("127.0.0.1"), 0);
  test_routes routes;
  const auto refused = [&](server_limits l) {
    auto r = server::create(io, ep, routes.handler(), l);
    REQUIRE_FALSE(r.ok());
    return r.err().message;
  };
  server_limits l;
  l.max_connections = 0;
  CHECK_THAT(refused(l), Contains("max_connections"));
  l = {};
  l.max_header_bytes = 10;
  CHECK_THAT(refused(l), Contains("max_header_bytes"));
  l = {};
  l.idle_timeout_seconds = std::nan("");
  CHECK_THAT(refused(l), Contains("idle_timeout_seconds"));
  l = {};
  l.request_timeout_seconds = 0;
  CHECK_THAT(refused(l), Contains("request_timeout_seconds"));
  auto none = server::create(io, ep, plumbline::http::handler{});
  REQUIRE_FALSE(none.ok());
  CHECK_THAT(none.err().message, Contains("handler"));
}

}  // namespace
