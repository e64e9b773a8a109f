// load.cc: the load sender (see load.h).
//
// Design. Everything that costs CPU per record (names, values, formatting) is
// done before the clock starts: each connection gets one rendered buffer that
// holds a whole number of rounds over its streams, and the sending threads
// only hand slices of it to the kernel. Every slice ends on a record boundary,
// so a connection never stops in the middle of a line (a cut line would reach
// the daemon as a shorter, still valid, number).
#include "simulator/load.h"

#include <netdb.h>
#include <netinet/in.h>
#include <netinet/tcp.h>
#include <sys/socket.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <cerrno>
#include <chrono>
#include <cmath>
#include <cstring>
#include <thread>
#include <vector>

#include "core/monitor.h"
#include "core/rng.h"
#include "core/special.h"

namespace plumbline::sim {
namespace {

using clock_type = std::chrono::steady_clock;

constexpr uint64_t max_streams = 10'000'000;
constexpr uint32_t max_connections = 1024;
constexpr uint32_t max_dimension = 64;
constexpr uint64_t max_buffer_records = uint64_t{1} << 26;
// Bytes handed to one send() call; small enough that the stop condition is
// checked often, large enough that the system call cost is negligible.
constexpr std::size_t slice_bytes = 256 * 1024;

// Appends v (already rounded to 0.001) as fixed-point text with three decimals.
void append_millis(std::string& out, int64_t millis) {
  if (millis < 0) {
    out.push_back('-');
    millis = -millis;
  }
  char digits[24];
  int n = 0;
  int64_t whole = millis / 1000;
  do {
    digits[n++] = static_cast<char>('0' + whole % 10);
    whole /= 10;
  } while (whole != 0);
  while (n > 0) out.push_back(digits[--n]);
  out.push_back('.');
  const int64_t frac = millis % 1000;
  out.push_back(static_cast<char>('0' + frac / 100));
  out.push_back(static_cast<char>('0' + frac / 10 % 10));
  out.push_back(static_cast<char>('0' + frac % 10));
}

}  // namespace

namespace {

// One record of stream `index` with values from gen.
void append_record(std::string& out, const load_options& o, uint64_t index, rng& gen) {
  out.append(o.prefix);
  out.append(std::to_string(index));
  out.append(",,");
  for (uint32_t d = 0; d < o.dimension; ++d) {
    if (d != 0) out.push_back(',');
    double u;
    do u = gen.next_double();
    while (u == 0);
    const double x = 100.0 + normal_quantile(u);
    append_millis(out, std::llround(x * 1000.0));
  }
  out.push_back('\n');
}

// Connection c's stagger records (see load_options::stagger): stream i gets
// floor(stagger * i / streams) of them, in rounds.
std::string render_stagger(const load_options& o, uint32_t c, uint64_t& count) {
  std::string out;
  count = 0;
  if (o.stagger == 0) return out;
  rng gen(stream_seed(o.seed, "load.stagger." + std::to_string(c)));
  for (uint64_t round = 0;; ++round) {
    bool any = false;
    for (uint64_t i = c; i < o.streams; i += o.connections) {
      // stagger <= 10^6 and i < 10^7: the product fits in 64 bits.
      const uint64_t extra = o.stagger * i / o.streams;
      if (round >= extra) continue;
      append_record(out, o, i, gen);
      ++count;
      any = true;
    }
    if (!any) break;
  }
  return out;
}

}  // namespace

// Connection c's buffer: rounds over its streams c, c + C, c + 2C, ...
rendered_records render_records(const load_options& o, uint32_t c) {
  const uint64_t per_round = (o.streams - c + o.connections - 1) / o.connections;
  const uint64_t rounds = std::max<uint64_t>(1, (o.buffer_records + per_round - 1) / per_round);
  rendered_records r;
  r.ends.reserve(per_round * rounds);
  r.bytes.reserve(per_round * rounds * (o.prefix.size() + 10 + 9 * o.dimension));
  // One generator per connection, from the seed and the connection number.
  rng gen(stream_seed(o.seed, "load.connection." + std::to_string(c)));
  for (uint64_t round = 0; round < rounds; ++round) {
    for (uint64_t k = 0; k < per_round; ++k) {
      append_record(r.bytes, o, c + k * o.connections, gen);
      r.ends.push_back(r.bytes.size());
    }
  }
  return r;
}

namespace {

expected<int> connect_to(const load_options& o) {
  addrinfo hints{};
  hints.ai_family = AF_UNSPEC;
  hints.ai_socktype = SOCK_STREAM;
  addrinfo* found = nullptr;
  const std::string port = std::to_string(o.port);
  if (const int rc = ::getaddrinfo(o.host.c_str(), port.c_str(), &hints, &found); rc != 0)
    return make_error("load: cannot resolve " + o.host + ": " + ::gai_strerror(rc));
  std::string last = "no address";
  for (addrinfo* a = found; a != nullptr; a = a->ai_next) {
    const int fd = ::socket(a->ai_family, a->ai_socktype | SOCK_CLOEXEC, a->ai_protocol);
    if (fd < 0) {
      last = std::strerror(errno);
      continue;
    }
    if (::connect(fd, a->ai_addr, a->ai_addrlen) == 0) {
      ::freeaddrinfo(found);
      return fd;
    }
    last = std::strerror(errno);
    ::close(fd);
  }
  ::freeaddrinfo(found);
  return make_error("load: cannot connect to " + o.host + ":" + port + ": " + last);
}

expected<bool> check(const load_options& o) {
  if (o.port == 0) return make_error("load: --to needs a port between 1 and 65535");
  if (o.streams < 1 || o.streams > max_streams)
    return make_error("load: streams must be between 1 and 10000000");
  if (o.connections < 1 || o.connections > max_connections)
    return make_error("load: connections must be between 1 and 1024");
  if (o.connections > o.streams)
    return make_error("load: connections must not exceed streams (each stream has one sender)");
  if (!(o.duration_seconds > 0) || !std::isfinite(o.duration_seconds))
    return make_error("load: duration must be a positive number of seconds");
  if (!(o.rate >= 0) || !std::isfinite(o.rate))
    return make_error("load: rate must be a number of records per second, 0 for no limit");
  if (o.stagger > 1'000'000) return make_error("load: stagger must be between 0 and 1000000");
  if (o.dimension < 1 || o.dimension > max_dimension)
    return make_error("load: dimension must be between 1 and 64");
  if (o.buffer_records < 1 || o.buffer_records > max_buffer_records)
    return make_error("load: buffer records must be between 1 and 67108864");
  if (o.prefix.empty() || o.prefix.size() > 180)
    return make_error("load: the stream prefix must have 1 to 180 characters");
  for (const char ch : o.prefix) {
    const bool ok = (ch >= 'a' && ch <= 'z') || (ch >= 'A' && ch <= 'Z') ||
                    (ch >= '0' && ch <= '9') || ch == '_' || ch == '.' || ch == ':' ||
                    ch == '/' || ch == '-';
    if (!ok) return make_error("load: the stream prefix may hold letters, digits and _ . : / - only");
  }
  return true;
}

struct sender_state {
  std::atomic<uint64_t> records{0};
  std::atomic<uint64_t> bytes{0};
  std::atomic<bool> failed{false};  // set after error is written
  clock_type::time_point last_write{};
  std::string error;
};

// Sends buf round and round on fd until `quota` records are sent (0 = no
// quota) or `stop` is set; always stops on a record boundary.
// `rate` > 0 paces the connection to that many records per second (from
// `start`), in slices of about 5 ms of records.
void send_loop(int fd, const rendered_records& buf, uint64_t quota, double rate,
               clock_type::time_point start, const std::atomic<bool>& stop, sender_state& st) {
  const uint64_t paced_slice =
      rate > 0 ? std::max<uint64_t>(1, static_cast<uint64_t>(rate / 200)) : UINT64_MAX;
  const uint64_t per_buffer = buf.ends.size();
  const uint64_t size = buf.bytes.size();
  uint64_t sent_records = 0;
  uint64_t pos = 0;   // byte offset within buf
  uint64_t next = 0;  // index of the record that ends first after pos
  while (true) {
    if (quota != 0 && sent_records == quota) break;
    // Each slice below is sent whole, so pos is on a record boundary here.
    if (stop.load(std::memory_order_relaxed)) break;
    // The slice: from pos up to the last record boundary within slice_bytes
    // (at least one record), capped by the quota.
    uint64_t want_end_record = next;
    const uint64_t limit = pos + slice_bytes;
    while (want_end_record < per_buffer && buf.ends[want_end_record] <= limit) ++want_end_record;
    if (want_end_record == next) want_end_record = next + 1;
    if (paced_slice < want_end_record - next) want_end_record = next + paced_slice;
    if (quota != 0) want_end_record = std::min(want_end_record, next + (quota - sent_records));
    const uint64_t end = buf.ends[want_end_record - 1];
    while (pos < end) {
      const ssize_t n = ::send(fd, buf.bytes.data() + pos, end - pos, MSG_NOSIGNAL);
      if (n < 0) {
        if (errno == EINTR) continue;
        st.error = std::string("load: send failed: ") + std::strerror(errno);
        st.failed.store(true, std::memory_order_release);
        return;
      }
      pos += static_cast<uint64_t>(n);
      st.bytes.fetch_add(static_cast<uint64_t>(n), std::memory_order_relaxed);
    }
    st.last_write = clock_type::now();
    sent_records += want_end_record - next;
    st.records.store(sent_records, std::memory_order_relaxed);
    next = want_end_record;
    if (rate > 0) {
      std::this_thread::sleep_until(
          start + std::chrono::duration_cast<clock_type::duration>(
                      std::chrono::duration<double>(static_cast<double>(sent_records) / rate)));
    }
    if (pos == size) {
      pos = 0;
      next = 0;
    }
  }
}

}  // namespace

expected<load_report> run_load(const load_options& o,
                               const std::function<void(const load_progress&)>& progress) {
  if (auto ok = check(o); !ok) return ok.err();
  std::vector<int> fds;
  auto close_all = [&] {
    for (const int fd : fds) ::close(fd);
  };
  for (uint32_t c = 0; c < o.connections; ++c) {
    auto fd = connect_to(o);
    if (!fd) {
      close_all();
      return fd.err();
    }
    fds.push_back(fd.value());
  }
  std::vector<rendered_records> bufs;
  bufs.reserve(o.connections);
  for (uint32_t c = 0; c < o.connections; ++c) bufs.push_back(render_records(o, c));

  // The stagger records, before the clock starts, one connection after the
  // other (each stream's records stay on its own connection).
  uint64_t staggered = 0;
  for (uint32_t c = 0; c < o.connections && o.stagger != 0; ++c) {
    uint64_t count = 0;
    const std::string extra = render_stagger(o, c, count);
    std::size_t pos = 0;
    while (pos < extra.size()) {
      const ssize_t n = ::send(fds[c], extra.data() + pos, extra.size() - pos, MSG_NOSIGNAL);
      if (n < 0 && errno == EINTR) continue;
      if (n < 0) {
        close_all();
        return make_error(std::string("load: send failed: ") + std::strerror(errno));
      }
      pos += static_cast<std::size_t>(n);
    }
    staggered += count;
  }

  // Quotas: connection c sends records/C, the first records % C one more.
  std::vector<uint64_t> quota(o.connections, 0);
  if (o.records != 0) {
    for (uint32_t c = 0; c < o.connections; ++c)
      quota[c] = o.records / o.connections + (c < o.records % o.connections ? 1 : 0);
  }
  std::vector<sender_state> states(o.connections);
  std::atomic<bool> stop{false};
  std::vector<std::thread> threads;
  // Each connection carries its share of the rate (its share of the streams).
  auto share = [&](uint32_t c) {
    const double streams_of_c =
        static_cast<double>((o.streams - c + o.connections - 1) / o.connections);
    return o.rate * streams_of_c / static_cast<double>(o.streams);
  };
  const auto start = clock_type::now();
  for (uint32_t c = 0; c < o.connections; ++c) {
    states[c].last_write = start;
    if (o.records != 0 && quota[c] == 0) continue;
    threads.emplace_back(
        [&, c] { send_loop(fds[c], bufs[c], quota[c], share(c), start, stop, states[c]); });
  }
  auto sent = [&] {
    uint64_t n = 0;
    for (const auto& s : states) n += s.records.load(std::memory_order_relaxed);
    return n;
  };
  const auto deadline = start + std::chrono::duration_cast<clock_type::duration>(
                                    std::chrono::duration<double>(o.duration_seconds));
  auto next_report = start + std::chrono::seconds(1);
  while (true) {
    const uint64_t n = sent();
    const auto now = clock_type::now();
    if ((o.records != 0 && n >= o.records) || now >= deadline) break;
    bool failed = false;
    for (const auto& s : states) failed = failed || s.failed.load(std::memory_order_acquire);
    if (failed) break;
    if (progress && now >= next_report) {
      progress({n, std::chrono::duration<double>(now - start).count()});
      next_report += std::chrono::seconds(1);
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(5));
  }
  stop.store(true, std::memory_order_relaxed);
  for (auto& t : threads) t.join();
  close_all();

  load_report r;
  r.stagger_records = staggered;
  auto last = start;
  for (const auto& s : states) {
    if (!s.error.empty()) return make_error(s.error);
    r.records_sent += s.records.load();
    r.bytes_sent += s.bytes.load();
    last = std::max(last, s.last_write);
  }
  r.seconds = std::chrono::duration<double>(last - start).count();
  if (progress) progress({r.records_sent, r.seconds});
  return r;
}

}  // namespace plumbline::sim
