// support/daemon.h: a real `plumbline serve` process for integration tests.
//
// daemon_process starts the built binary with the given arguments (port 0
// everywhere, so tests never collide), waits for its ready line, and parses
// the ports from it. The clients below use plain POSIX sockets, so the tests
// exercise the daemon from the outside, as any sender or scraper would.
// Every wait is bounded; a daemon that does not stop on SIGTERM within the
// limit is killed and the test fails.
#pragma once

#include <arpa/inet.h>
#include <fcntl.h>
#include <netinet/in.h>
#include <netinet/tcp.h>
#include <poll.h>
#include <signal.h>
#include <sys/socket.h>
#include <sys/wait.h>
#include <unistd.h>

#include <catch2/catch.hpp>
#include <chrono>
#include <cmath>
#include <cstring>
#include <functional>
#include <stdexcept>
#include <string>
#include <thread>
#include <vector>

#include "support/cli.h"

namespace plumbline::testing {

struct host_port_text {
  std::string host;
  uint16_t port = 0;
};

// "127.0.0.1:4242" -> {host, port}; "off" -> port 0.
inline host_port_text split_host_port(const std::string& s) {
  if (s == "off") return {};
  const std::size_t colon = s.rfind(':');
  if (colon == std::string::npos) throw std::runtime_error("bad address " + s);
  return {s.substr(0, colon), static_cast<uint16_t>(std::stoi(s.substr(colon + 1)))};
}

inline int connect_loopback(uint16_t port, int type = SOCK_STREAM) {
  const int fd = ::socket(AF_INET, type, 0);
  if (fd < 0) throw std::runtime_error("socket failed");
  sockaddr_in addr{};
  addr.sin_family = AF_INET;
  addr.sin_port = htons(port);
  addr.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  if (::connect(fd, reinterpret_cast<sockaddr*>(&addr), sizeof addr) != 0) {
    ::close(fd);
    throw std::runtime_error("connect to port " + std::to_string(port) +
                             " failed: " + std::strerror(errno));
  }
  return fd;
}

inline void write_all(int fd, const std::string& data) {
  std::size_t off = 0;
  while (off < data.size()) {
    const ssize_t n = ::send(fd, data.data() + off, data.size() - off, MSG_NOSIGNAL);
    if (n <= 0) throw std::runtime_error(std::string("send failed: ") + std::strerror(errno));
    off += static_cast<std::size_t>(n);
  }
}

// Reads until the peer closes or `timeout_s` passes.
inline std::string read_all(int fd, double timeout_s = 10) {
  std::string out;
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::duration<double>(timeout_s);
  char buf[65536];
  for (;;) {
    const auto left = std::chrono::duration_cast<std::chrono::milliseconds>(
        deadline - std::chrono::steady_clock::now());
    if (left.count() <= 0) break;
    pollfd p{fd, POLLIN, 0};
    if (::poll(&p, 1, static_cast<int>(left.count())) <= 0) break;
    const ssize_t n = ::recv(fd, buf, sizeof buf, 0);
    if (n <= 0) break;
    out.append(buf, static_cast<std::size_t>(n));
  }
  return out;
}

struct http_reply {
  int status = 0;
  std::string headers;
  std::string body;
};

// One HTTP/1.1 request with "Connection: close".
inline http_reply http_request(uint16_t port, const std::string& method, const std::string& target,
                               const std::vector<std::string>& extra_headers = {},
                               const std::string& body = "") {
  const int fd = connect_loopback(port);
  std::string req = method + " " + target + " HTTP/1.1\r\nHost: 127.0.0.1\r\nConnection: close\r\n";
  for (const auto& h : extra_headers)
    req += h + "\r\n";
  if (!body.empty() || method == "POST")
    req += "Content-Length: " + std::to_string(body.size()) + "\r\n";
  req += "\r\n" + body;
  write_all(fd, req);
  const std::string raw = read_all(fd);
  ::close(fd);
  http_reply r;
  const std::size_t sp = raw.find(' ');
  if (sp == std::string::npos) return r;
  r.status = std::atoi(raw.c_str() + sp + 1);
  const std::size_t end = raw.find("\r\n\r\n");
  if (end != std::string::npos) {
    r.headers = raw.substr(0, end);
    r.body = raw.substr(end + 4);
  }
  return r;
}

inline void send_udp(uint16_t port, const std::string& datagram) {
  const int fd = connect_loopback(port, SOCK_DGRAM);
  ::send(fd, datagram.data(), datagram.size(), 0);
  ::close(fd);
}

// Polls `pred` every 20 ms until it holds or `timeout_s` passes.
inline bool wait_until(const std::function<bool()>& pred, double timeout_s = 20) {
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::duration<double>(timeout_s);
  while (std::chrono::steady_clock::now() < deadline) {
    if (pred()) return true;
    std::this_thread::sleep_for(std::chrono::milliseconds(20));
  }
  return pred();
}

class daemon_process {
 public:
  // Starts `plumbline serve` with args (plus --ingest/--http on port 0 unless
  // given) and waits up to 20 s for the ready line.
  daemon_process(const temp_dir& dir, std::vector<std::string> args, bool add_ports = true)
      : err_path_(dir.file("daemon-stderr-" + std::to_string(++counter()) + ".txt")) {
    std::vector<std::string> argv = {PLUMBLINE_BINARY, "serve"};
    if (add_ports) {
      argv.insert(argv.end(), {"--ingest", "127.0.0.1:0", "--http", "127.0.0.1:0"});
    }
    argv.insert(argv.end(), args.begin(), args.end());
    int out_pipe[2];
    if (::pipe(out_pipe) != 0) throw std::runtime_error("pipe failed");
    pid_ = ::fork();
    if (pid_ < 0) throw std::runtime_error("fork failed");
    if (pid_ == 0) {
      ::dup2(out_pipe[1], STDOUT_FILENO);
      const int err = ::open(err_path_.c_str(), O_WRONLY | O_CREAT | O_TRUNC, 0644);
      if (err >= 0) ::dup2(err, STDERR_FILENO);
      const int null = ::open("/dev/null", O_RDONLY);
      if (null >= 0) ::dup2(null, STDIN_FILENO);
      ::close(out_pipe[0]);
      std::vector<char*> cargv;
      for (auto& s : argv)
        cargv.push_back(s.data());
      cargv.push_back(nullptr);
      ::execv(cargv[0], cargv.data());
      ::_exit(127);
    }
    ::close(out_pipe[1]);
    out_fd_ = out_pipe[0];
    ready_line_ = read_line(20);
    if (ready_line_.rfind("plumbline ready ", 0) != 0) {
      const int code = stop();
      throw std::runtime_error("daemon did not get ready (exit " + std::to_string(code) +
                               "); stdout: " + ready_line_ + "; stderr: " + stderr_text());
    }
    for (const std::string key : {"ingest_tcp=", "ingest_udp=", "http="}) {
      const std::size_t at = ready_line_.find(key);
      if (at == std::string::npos) throw std::runtime_error("no " + key + " in " + ready_line_);
      const std::size_t end = ready_line_.find(' ', at);
      const std::string value = ready_line_.substr(
          at + key.size(), end == std::string::npos ? std::string::npos : end - at - key.size());
      const uint16_t port = split_host_port(value).port;
      if (key == "ingest_tcp=") tcp_port = port;
      if (key == "ingest_udp=") udp_port = port;
      if (key == "http=") http_port = port;
    }
  }

  ~daemon_process() {
    if (pid_ > 0) stop();
    if (out_fd_ >= 0) ::close(out_fd_);
  }
  daemon_process(const daemon_process&) = delete;
  daemon_process& operator=(const daemon_process&) = delete;

  // Sends `signo` and waits up to `timeout_s`; returns the exit code (or
  // 128 + signal when killed). A daemon still running after the limit is
  // killed with SIGKILL and -1 is returned.
  int stop(int signo = SIGTERM, double timeout_s = 15) {
    if (pid_ <= 0) return exit_code_;
    ::kill(pid_, signo);
    const auto deadline =
        std::chrono::steady_clock::now() + std::chrono::duration<double>(timeout_s);
    int status = 0;
    for (;;) {
      const pid_t r = ::waitpid(pid_, &status, WNOHANG);
      if (r == pid_) break;
      if (std::chrono::steady_clock::now() > deadline) {
        ::kill(pid_, SIGKILL);
        ::waitpid(pid_, &status, 0);
        pid_ = -1;
        exit_code_ = -1;
        return exit_code_;
      }
      std::this_thread::sleep_for(std::chrono::milliseconds(10));
    }
    pid_ = -1;
    exit_code_ = WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
    return exit_code_;
  }

  std::string stderr_text() const { return slurp(err_path_); }
  const std::string& ready_line() const { return ready_line_; }
  pid_t pid() const { return pid_; }

  http_reply get(const std::string& target) const { return http_request(http_port, "GET", target); }
  http_reply post(const std::string& target, const std::vector<std::string>& headers = {}) const {
    return http_request(http_port, "POST", target, headers);
  }

  // The value of the first sample line `series` (exact series text, e.g.
  // `plumbline_alarm{stream="a"}`) in /metrics, or NaN when absent.
  double metric(const std::string& series) const {
    const std::string text = get("/metrics").body;
    std::size_t at = 0;
    while ((at = text.find(series + " ", at)) != std::string::npos) {
      if (at == 0 || text[at - 1] == '\n') return std::stod(text.substr(at + series.size() + 1));
      at += series.size();
    }
    return std::nan("");
  }

  // Sends `text` over one new TCP connection and closes it.
  void send_tcp(const std::string& text) const {
    const int fd = connect_loopback(tcp_port);
    write_all(fd, text);
    ::shutdown(fd, SHUT_WR);
    read_all(fd, 5);  // until the daemon closes its side: everything was read
    ::close(fd);
  }

  uint16_t tcp_port = 0, udp_port = 0, http_port = 0;

 private:
  static int& counter() {
    static int n = 0;
    return n;
  }
  std::string read_line(double timeout_s) {
    std::string line;
    const auto deadline =
        std::chrono::steady_clock::now() + std::chrono::duration<double>(timeout_s);
    while (std::chrono::steady_clock::now() < deadline) {
      pollfd p{out_fd_, POLLIN, 0};
      if (::poll(&p, 1, 100) <= 0) continue;
      char c;
      const ssize_t n = ::read(out_fd_, &c, 1);
      if (n <= 0) break;
      if (c == '\n') return line;
      line += c;
    }
    return line;
  }

  std::string err_path_;
  pid_t pid_ = -1;
  int out_fd_ = -1;
  int exit_code_ = -1;
  std::string ready_line_;
};

}  // namespace plumbline::testing
