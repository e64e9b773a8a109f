// net.cc: TCP/UDP sending and the HTTP GET client. See net.h.
#include "simulator/net.h"

#include <arpa/inet.h>
#include <netdb.h>
#include <netinet/in.h>
#include <poll.h>
#include <sys/socket.h>
#include <unistd.h>

#include <cerrno>
#include <chrono>
#include <cstdio>
#include <cstring>
#include <thread>

#include "simulator/generate.h"

namespace plumbline::sim {

namespace {

using steady = std::chrono::steady_clock;

double unix_now() {
  using namespace std::chrono;
  return duration<double>(system_clock::now().time_since_epoch()).count();
}

class socket_fd {
 public:
  socket_fd() = default;
  explicit socket_fd(int fd) : fd_(fd) {}
  ~socket_fd() {
    if (fd_ >= 0) ::close(fd_);
  }
  socket_fd(socket_fd&& o) noexcept : fd_(o.fd_) { o.fd_ = -1; }
  socket_fd& operator=(socket_fd&& o) noexcept {
    std::swap(fd_, o.fd_);
    return *this;
  }
  int get() const { return fd_; }

 private:
  int fd_ = -1;
};

expected<socket_fd> connect_to(const host_port& at, int type, double timeout_seconds) {
  addrinfo hints{};
  hints.ai_family = AF_UNSPEC;
  hints.ai_socktype = type;
  addrinfo* res = nullptr;
  const std::string port = std::to_string(at.port);
  if (const int rc = ::getaddrinfo(at.host.c_str(), port.c_str(), &hints, &res); rc != 0)
    return make_error("cannot resolve " + at.host + ": " + ::gai_strerror(rc));
  std::string why = "no address";
  for (addrinfo* a = res; a; a = a->ai_next) {
    socket_fd fd(::socket(a->ai_family, a->ai_socktype, a->ai_protocol));
    if (fd.get() < 0) {
      why = std::strerror(errno);
      continue;
    }
    timeval tv{};
    tv.tv_sec = static_cast<time_t>(timeout_seconds);
    tv.tv_usec = static_cast<suseconds_t>((timeout_seconds - static_cast<double>(tv.tv_sec)) * 1e6);
    ::setsockopt(fd.get(), SOL_SOCKET, SO_SNDTIMEO, &tv, sizeof tv);
    ::setsockopt(fd.get(), SOL_SOCKET, SO_RCVTIMEO, &tv, sizeof tv);
    if (::connect(fd.get(), a->ai_addr, a->ai_addrlen) == 0) {
      ::freeaddrinfo(res);
      return fd;
    }
    why = std::strerror(errno);
  }
  ::freeaddrinfo(res);
  return make_error("cannot connect to " + at.host + ":" + port + ": " + why);
}

// True when the peer has closed (EOF or reset) or sent something, which the
// daemon's ingest never does.
bool peer_closed(int fd) {
  pollfd p{fd, POLLIN | POLLRDHUP, 0};
  if (::poll(&p, 1, 0) <= 0) return false;
  if (p.revents & (POLLRDHUP | POLLHUP | POLLERR)) return true;
  char c;
  const ssize_t n = ::recv(fd, &c, 1, MSG_DONTWAIT | MSG_PEEK);
  return n == 0 || (n < 0 && errno != EAGAIN && errno != EWOULDBLOCK);
}

}  // namespace

expected<host_port> parse_host_port(const std::string& text) {
  const std::size_t colon = text.rfind(':');
  if (colon == std::string::npos || colon == 0 || colon + 1 == text.size())
    return make_error("'" + text + "' is not HOST:PORT");
  std::string host = text.substr(0, colon);
  if (host.size() >= 2 && host.front() == '[' && host.back() == ']')
    host = host.substr(1, host.size() - 2);
  const std::string port = text.substr(colon + 1);
  unsigned long p = 0;
  for (char c : port) {
    if (c < '0' || c > '9' || p > 65535) return make_error("'" + text + "': bad port");
    p = p * 10 + static_cast<unsigned long>(c - '0');
  }
  if (p == 0 || p > 65535) return make_error("'" + text + "': port must be 1 to 65535");
  return host_port{host, static_cast<uint16_t>(p)};
}

expected<send_report> run_send(const scenario& s, const send_options& o, std::ostream& progress,
                               truth* clock) {
  auto fd_or = connect_to(o.to, o.udp ? SOCK_DGRAM : SOCK_STREAM, send_timeout_seconds);
  if (!fd_or.ok()) return fd_or.err();
  socket_fd fd = std::move(fd_or.value());
  const std::string where =
      std::string(o.udp ? "udp " : "tcp ") + o.to.host + ":" + std::to_string(o.to.port);

  send_report rep;
  std::string buf;
  const std::size_t flush_at = o.udp ? max_datagram_bytes : std::size_t{64} << 10;
  buf.reserve(flush_at + 512);
  std::string record;
  double last_offset_in_buf = 0;
  const auto t0 = steady::now();
  double last_point = 0, last_progress = 0;
  if (clock) add_clock_point(*clock, unix_now(), 0);

  auto fail = [&](const std::string& why) {
    return make_error(where + ": " + why + " (after " + std::to_string(rep.records) + " records, " +
                      std::to_string(rep.simulated_seconds) + " simulated s)");
  };
  // Writes buf; returns an error message or "".
  auto flush = [&]() -> std::string {
    if (buf.empty()) return "";
    if (!o.udp && peer_closed(fd.get())) return "the daemon closed the connection";
    std::size_t off = 0;
    while (off < buf.size()) {
      const ssize_t n = ::send(fd.get(), buf.data() + off, buf.size() - off, MSG_NOSIGNAL);
      if (n < 0) {
        if (errno == EINTR) continue;
        if (errno == EAGAIN || errno == EWOULDBLOCK)
          return "the daemon accepted no data for " + std::to_string(int(send_timeout_seconds)) +
                 " s";
        if (errno == EPIPE || errno == ECONNRESET)
          return std::string("the daemon closed the connection (") + std::strerror(errno) + ")";
        if (errno == ECONNREFUSED) return "datagrams refused: nothing listens on that UDP port";
        return std::string("send failed: ") + std::strerror(errno);
      }
      off += static_cast<std::size_t>(n);
    }
    rep.bytes += buf.size();
    if (o.udp) ++rep.datagrams;
    buf.clear();
    rep.simulated_seconds = last_offset_in_buf;
    return "";
  };
  auto elapsed = [&] { return std::chrono::duration<double>(steady::now() - t0).count(); };
  auto tick = [&](double now) {
    if (clock && now - last_point >= 0.25) {
      add_clock_point(*clock, unix_now(), rep.simulated_seconds);
      last_point = now;
    }
    if (o.progress && now - last_progress >= 1) {
      char line[256];
      std::snprintf(line, sizeof line,
                    "send: %.1f of %.1f simulated s (%.1f%%), %llu records, %.0f records/s\n",
                    rep.simulated_seconds, o.duration, 100 * rep.simulated_seconds / o.duration,
                    static_cast<unsigned long long>(rep.records),
                    rep.records / std::max(now, 1e-9));
      progress << line << std::flush;
      last_progress = now;
    }
  };

  timeline tl(s, o.seed, o.duration);
  std::size_t sensor;
  sample smp;
  uint64_t pending = 0;  // records in buf
  while (tl.next(sensor, smp)) {
    if (o.stop && o.stop->load()) {
      rep.stopped = true;
      break;
    }
    if (!smp.present) {
      ++rep.dropped;
      continue;
    }
    const double due = smp.offset / o.speed;
    double now = elapsed();
    if (due > now) {
      if (auto e = flush(); !e.empty()) return fail(e);
      rep.records += pending;
      pending = 0;
      tick(now);
      std::this_thread::sleep_for(std::chrono::duration<double>(due - now));
    }
    record.clear();
    append_record(record, s.sensors[sensor], o.epoch, smp);
    if (buf.size() + record.size() >= flush_at) {
      if (auto e = flush(); !e.empty()) return fail(e);
      rep.records += pending;
      pending = 0;
      tick(elapsed());
    }
    buf += record;
    ++pending;
    last_offset_in_buf = smp.offset;
  }
  if (auto e = flush(); !e.empty()) return fail(e);
  rep.records += pending;
  if (!o.udp) {
    // Half-close, then wait for the daemon to read everything and close.
    ::shutdown(fd.get(), SHUT_WR);
    const auto deadline = steady::now() + std::chrono::duration<double>(send_timeout_seconds);
    char tmp[256];
    for (;;) {
      const auto left =
          std::chrono::duration_cast<std::chrono::milliseconds>(deadline - steady::now()).count();
      if (left <= 0) return fail("the daemon did not close the connection after the last record");
      pollfd p{fd.get(), POLLIN, 0};
      if (::poll(&p, 1, static_cast<int>(left)) <= 0) continue;
      const ssize_t n = ::recv(fd.get(), tmp, sizeof tmp, 0);
      if (n <= 0) break;
    }
  }
  rep.wall_seconds = elapsed();
  if (clock) add_clock_point(*clock, unix_now(), rep.simulated_seconds);
  return rep;
}

expected<http_answer> http_get(const host_port& at, const std::string& target,
                               double timeout_seconds) {
  auto fd_or = connect_to(at, SOCK_STREAM, timeout_seconds);
  if (!fd_or.ok()) return fd_or.err();
  socket_fd fd = std::move(fd_or.value());
  const std::string req = "GET " + target + " HTTP/1.1\r\nHost: " + at.host +
                          "\r\nAccept: application/json\r\nConnection: close\r\n\r\n";
  std::size_t off = 0;
  while (off < req.size()) {
    const ssize_t n = ::send(fd.get(), req.data() + off, req.size() - off, MSG_NOSIGNAL);
    if (n <= 0) return make_error("GET " + target + ": send failed: " + std::strerror(errno));
    off += static_cast<std::size_t>(n);
  }
  std::string raw;
  char buf[65536];
  for (;;) {
    const ssize_t n = ::recv(fd.get(), buf, sizeof buf, 0);
    if (n == 0) break;
    if (n < 0) {
      if (errno == EINTR) continue;
      return make_error("GET " + target + ": no complete answer: " + std::strerror(errno));
    }
    raw.append(buf, static_cast<std::size_t>(n));
    if (raw.size() > max_http_body + 65536)
      return make_error("GET " + target + ": answer too large");
  }
  const std::size_t head_end = raw.find("\r\n\r\n");
  if (raw.rfind("HTTP/1.", 0) != 0 || head_end == std::string::npos)
    return make_error("GET " + target + ": not an HTTP answer");
  http_answer a;
  a.status = std::atoi(raw.c_str() + raw.find(' ') + 1);
  std::string head = raw.substr(0, head_end);
  for (char& c : head)
    c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  if (head.find("transfer-encoding: chunked") != std::string::npos)
    return make_error("GET " + target + ": chunked answers are not supported");
  a.body = raw.substr(head_end + 4);
  if (const std::size_t cl = head.find("content-length:"); cl != std::string::npos) {
    const std::size_t len = std::strtoull(head.c_str() + cl + 15, nullptr, 10);
    if (a.body.size() < len) return make_error("GET " + target + ": answer cut short");
    a.body.resize(len);
  }
  return a;
}

}  // namespace plumbline::sim
