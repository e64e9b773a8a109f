// ingest.cc: see ingest.h.
//
// Design note. A TCP session owns its socket, a 64 KiB read buffer, a
// line_assembler (which reassembles records split across reads without
// copying the whole lines of a read) and an idle timer, all on one strand. It
// reads, hands every complete line to the sink, and reads again: a sender is
// slowed by TCP's own flow control when the daemon is busy, and nothing is
// queued without bound. The idle timer does not restart on every read (that
// would cost a timer operation per read): the session notes the time of its
// last read, and the timer, when it fires, either closes the connection or
// waits for the rest of the idle period. UDP uses one socket and one buffer
// of the largest datagram size; datagrams are independent, so no state
// passes from one to the next.
#include "daemon/ingest.h"

#include <chrono>

#include "daemon/log.h"

namespace plumbline {

namespace asio = boost::asio;
using tcp = asio::ip::tcp;
using udp = asio::ip::udp;

std::string endpoint_text(const asio::ip::address& a, uint16_t port) {
  if (a.is_v6()) return "[" + a.to_string() + "]:" + std::to_string(port);
  return a.to_string() + ":" + std::to_string(port);
}

void ingest_sink::consume(std::string_view line, double receipt_time) {
  consume_lines(std::span<const std::string_view>(&line, 1), receipt_time);
}

// Design note: the batched ingest path. With thousands of streams, a record's
// cost is dominated by cache misses, not by parsing: the table slot, the
// entry (its mutex and counters), the monitor's window objects and the window
// slot the value goes to are each in a different, cold cache line, and each
// address is known only once the one before it has arrived. Taken one record
// at a time those misses queue up. So records go through in groups of
// `group_size`: every line of the group is parsed and its slot prefetched;
// then each slot's entry is read and its hot lines prefetched; then each
// stream is found and its window slot prefetched; only then are the records
// appended, in their original order. The stages of different records
// overlap, and a group fits in the L1 cache. The effect is exactly that of
// taking the records one by one.
namespace {
constexpr std::size_t group_size = 16;
}  // namespace

void ingest_sink::consume_lines(std::span<const std::string_view> lines, double receipt_time) {
  struct item {
    wire::record rec;
    uint64_t hash = 0;
    stream_entry* entry = nullptr;
  };
  // Per thread, so the records (half a kilobyte each) are neither zeroed nor
  // on the stack per call.
  static thread_local std::array<item, group_size> items;
  uint64_t accepted = 0;
  for (std::size_t base = 0; base < lines.size(); base += group_size) {
    const std::size_t n = std::min(group_size, lines.size() - base);
    std::size_t m = 0;
    for (std::size_t i = 0; i < n; ++i) {
      item& it = items[m];
      const wire::parse_outcome out = wire::parse_line(lines[base + i], it.rec);
      if (out.kind == wire::line_kind::ignored) continue;
      if (out.kind == wire::line_kind::rejected) {
        reject(out.reason);
        continue;
      }
      it.hash = stream_name_hash(it.rec.stream);
      streams_.prefetch_slot(it.hash);
      ++m;
    }
    for (std::size_t j = 0; j < m; ++j) {
      if (const stream_entry* guess = streams_.first_probe(items[j].hash)) {
        __builtin_prefetch(&guess->hash);
        __builtin_prefetch(&guess->mu);
        guess->monitor.prefetch_state();
      }
    }
    for (std::size_t j = 0; j < m; ++j) {
      stream_entry* e = streams_.find(items[j].rec.stream, items[j].hash);
      items[j].entry = e;
      if (e != nullptr) e->monitor.prefetch_window();
    }
    for (std::size_t j = 0; j < m; ++j)
      if (deliver(items[j].rec, items[j].hash, items[j].entry, receipt_time)) ++accepted;
  }
  if (accepted != 0) counters_.records.fetch_add(accepted, std::memory_order_relaxed);
}

bool ingest_sink::deliver(const wire::record& rec, uint64_t hash, stream_entry* e,
                          double receipt_time) {
  if (e == nullptr) {
    const stream_table::lookup l = streams_.find_or_create(rec.stream, hash, rec.dim);
    if (l.entry == nullptr) {
      reject(l.reason);
      return false;
    }
    e = l.entry;
  }
  if (e->dimension != rec.dim) {
    reject(wire::reject_reason::wrong_dimension);
    return false;
  }
  bool trigger = false;
  {
    std::lock_guard lock(e->mu);
    if (!e->monitor.push(rec.value_span()).ok()) {
      // The parser admits only finite values of the record's count, and the
      // count was checked above; a refusal here would be a bug, but it is
      // still counted rather than lost silently.
      reject(wire::reject_reason::bad_value);
      return false;
    }
    e->last_sample_time = rec.has_time ? rec.time : receipt_time;
    // The first evaluation comes as soon as both windows are full, then
    // one every k samples.
    const uint64_t k = e->group->settings.every_samples;
    if (k != 0 && e->monitor.ready() && (!e->primed || ++e->since_trigger >= k)) {
      e->primed = true;
      e->since_trigger = 0;
      e->last_trigger_time = receipt_time;
      trigger = true;
    }
  }
  if (trigger) eval_.schedule(*e);
  return true;
}

namespace {

constexpr std::size_t read_buffer_bytes = 64 * 1024;
constexpr std::size_t max_datagram_bytes = 65536;

double steady_seconds() {
  return std::chrono::duration<double>(std::chrono::steady_clock::now().time_since_epoch()).count();
}

}  // namespace

class tcp_session;

struct ingest_server::impl {
  impl(asio::io_context& io_, const ingest_limits& limits_, ingest_sink& sink_,
       ingest_counters& counters_)
      : io(io_),
        limits(limits_),
        sink(sink_),
        counters(counters_),
        acceptor(io_),
        udp_socket(io_) {}

  asio::io_context& io;
  ingest_limits limits;
  ingest_sink& sink;
  ingest_counters& counters;
  tcp::acceptor acceptor;
  udp::socket udp_socket;
  std::optional<tcp::endpoint> tcp_ep;
  std::optional<udp::endpoint> udp_ep;
  std::vector<char> datagram = std::vector<char>(max_datagram_bytes);
  udp::endpoint datagram_from;
  std::vector<std::string_view> udp_batch;  // lines of the current datagram

  std::mutex sessions_mu;
  std::set<std::shared_ptr<tcp_session>> sessions;  // guarded by sessions_mu
  bool closing = false;                             // guarded by sessions_mu

  void accept();
  void receive();
  void remove(const std::shared_ptr<tcp_session>& s);
};

class tcp_session : public std::enable_shared_from_this<tcp_session> {
 public:
  tcp_session(tcp::socket socket, ingest_server::impl& server)
      : socket_(std::move(socket)),
        timer_(socket_.get_executor()),
        server_(server),
        lines_(server.limits.max_line_bytes),
        buffer_(read_buffer_bytes) {}

  // Runs the session's first steps on its strand, like every later one, so
  // a read that completes at once cannot race the timer being armed.
  void start() {
    asio::dispatch(socket_.get_executor(), [self = shared_from_this()] {
      self->last_read_ = steady_seconds();
      self->arm_timer(self->server_.limits.idle_timeout_seconds);
      self->read();
    });
  }

  // Closes the connection from outside (shutdown); runs on the strand.
  void close() {
    asio::post(socket_.get_executor(), [self = shared_from_this()] { self->shutdown(); });
  }

 private:
  void read() {
    socket_.async_read_some(asio::buffer(buffer_),
                            [self = shared_from_this()](boost::system::error_code ec,
                                                        std::size_t n) { self->on_read(ec, n); });
  }

  void on_read(boost::system::error_code ec, std::size_t n) {
    if (closed_) return;
    const double now = unix_now();
    ingest_sink& sink = server_.sink;
    // Lines that lie in the read buffer are collected and consumed together
    // (ingest_sink::consume_lines); the buffer is not touched again until
    // the next read. A line the assembler put together from two reads lives
    // in the assembler's own buffer, which the end of this same feed() may
    // overwrite, so it is consumed at once: it is always the first line of
    // a read, so the order of records is kept.
    const char* const begin = buffer_.data();
    const char* const end = begin + n;
    auto flush = [&] {
      sink.consume_lines(batch_, now);
      batch_.clear();
    };
    auto on_line = [&](std::string_view line) {
      if (line.data() >= begin && line.data() + line.size() <= end) {
        batch_.push_back(line);
        if (batch_.size() == max_batch_lines) flush();
      } else {
        if (!batch_.empty()) flush();
        sink.consume(line, now);
      }
    };
    auto on_overlong = [&] { sink.overlong(); };
    if (n > 0) {
      last_read_ = steady_seconds();
      lines_.feed(std::span<const char>(buffer_.data(), n), on_line, on_overlong);
      if (!batch_.empty()) flush();
    }
    if (ec) {
      if (ec == asio::error::eof) {
        lines_.finish(on_line, on_overlong);  // a last record without newline
      } else if (ec != asio::error::operation_aborted) {
        log::debug("ingest connection " + peer_ + " ended: " + ec.message());
      }
      shutdown();
      return;
    }
    read();
  }

  void arm_timer(double seconds) {
    if (closed_) return;
    timer_.expires_after(std::chrono::duration_cast<std::chrono::steady_clock::duration>(
        std::chrono::duration<double>(seconds)));
    timer_.async_wait([self = shared_from_this()](boost::system::error_code ec) {
      if (ec || self->closed_) return;
      const double idle = steady_seconds() - self->last_read_;
      const double limit = self->server_.limits.idle_timeout_seconds;
      if (idle >= limit) {
        self->server_.counters.connections_idle_closed.fetch_add(1, std::memory_order_relaxed);
        log::info("closing ingest connection " + self->peer_ + ": idle for " +
                  std::to_string(static_cast<long long>(idle)) + " s");
        self->shutdown();
      } else {
        self->arm_timer(limit - idle);
      }
    });
  }

  void shutdown() {
    if (closed_) return;
    closed_ = true;
    boost::system::error_code ignored;
    timer_.cancel();
    socket_.shutdown(tcp::socket::shutdown_both, ignored);
    socket_.close(ignored);
    server_.counters.connections_open.fetch_sub(1, std::memory_order_relaxed);
    server_.remove(shared_from_this());
  }

 public:
  std::string peer_;

 private:
  tcp::socket socket_;
  asio::steady_timer timer_;
  ingest_server::impl& server_;
  wire::line_assembler lines_;
  std::vector<char> buffer_;
  static constexpr std::size_t max_batch_lines = 1024;
  std::vector<std::string_view> batch_ = [] {
    std::vector<std::string_view> v;
    v.reserve(max_batch_lines);
    return v;
  }();
  double last_read_ = 0;
  bool closed_ = false;
};

void ingest_server::impl::remove(const std::shared_ptr<tcp_session>& s) {
  std::lock_guard lock(sessions_mu);
  sessions.erase(s);
}

void ingest_server::impl::accept() {
  acceptor.async_accept(
      asio::make_strand(io), [this](boost::system::error_code ec, tcp::socket socket) {
        if (ec == asio::error::operation_aborted || !acceptor.is_open()) return;
        if (ec) {
          // Out of descriptors and the like: report, and keep accepting.
          log::warn("ingest accept failed: " + ec.message());
          accept();
          return;
        }
        std::string peer;
        {
          boost::system::error_code e2;
          const tcp::endpoint remote = socket.remote_endpoint(e2);
          peer = e2 ? std::string("(unknown)") : endpoint_text(remote.address(), remote.port());
        }
        std::shared_ptr<tcp_session> s;
        {
          std::lock_guard lock(sessions_mu);
          if (closing) return;
          if (sessions.size() >= limits.max_connections) {
            counters.connections_refused.fetch_add(1, std::memory_order_relaxed);
            boost::system::error_code ignored;
            socket.close(ignored);
          } else {
            s = std::make_shared<tcp_session>(std::move(socket), *this);
            s->peer_ = peer;
            sessions.insert(s);
            counters.connections_open.fetch_add(1, std::memory_order_relaxed);
            counters.connections_total.fetch_add(1, std::memory_order_relaxed);
          }
        }
        if (s) {
          log::debug("ingest connection from " + peer);
          s->start();
        } else {
          log::warn("refused ingest connection from " + peer + ": " +
                    std::to_string(limits.max_connections) + " connections are open (the limit)");
        }
        accept();
      });
}

void ingest_server::impl::receive() {
  udp_socket.async_receive_from(
      asio::buffer(datagram), datagram_from, [this](boost::system::error_code ec, std::size_t n) {
        if (ec == asio::error::operation_aborted || !udp_socket.is_open()) return;
        if (!ec) {
          counters.datagrams.fetch_add(1, std::memory_order_relaxed);
          const double now = unix_now();
          // The datagram buffer stays as it is until the next receive, so
          // its lines are consumed together.
          udp_batch.clear();
          wire::for_each_line_in_datagram(
              std::string_view(datagram.data(), n), limits.max_line_bytes,
              [&](std::string_view line) { udp_batch.push_back(line); },
              [&] { sink.overlong(); });
          sink.consume_lines(udp_batch, now);
        } else {
          log::debug("udp receive: " + ec.message());
        }
        receive();
      });
}

ingest_server::ingest_server(std::unique_ptr<impl> p) : impl_(std::move(p)) {}
// REQUIRES: the io_context has stopped running handlers of this server.
ingest_server::~ingest_server() {
  boost::system::error_code ignored;
  impl_->acceptor.close(ignored);
  impl_->udp_socket.close(ignored);
}

expected<std::unique_ptr<ingest_server>> ingest_server::create(
    asio::io_context& io, const std::optional<tcp::endpoint>& tcp_at,
    const std::optional<udp::endpoint>& udp_at, const ingest_limits& limits, ingest_sink& sink,
    ingest_counters& counters) {
  auto p = std::make_unique<impl>(io, limits, sink, counters);
  boost::system::error_code ec;
  if (tcp_at) {
    const std::string where = endpoint_text(tcp_at->address(), tcp_at->port()) + " (tcp)";
    p->acceptor.open(tcp_at->protocol(), ec);
    if (!ec) p->acceptor.set_option(asio::socket_base::reuse_address(true), ec);
    if (!ec) p->acceptor.bind(*tcp_at, ec);
    if (!ec) p->acceptor.listen(asio::socket_base::max_listen_connections, ec);
    if (ec) return make_error("cannot listen on " + where + ": " + ec.message());
    p->tcp_ep = p->acceptor.local_endpoint(ec);
  }
  if (udp_at) {
    udp::endpoint at = *udp_at;
    const std::string where = endpoint_text(at.address(), at.port()) + " (udp)";
    p->udp_socket.open(at.protocol(), ec);
    if (!ec) p->udp_socket.set_option(asio::socket_base::receive_buffer_size(4 << 20), ec);
    ec.clear();  // a smaller kernel buffer is not an error
    p->udp_socket.bind(at, ec);
    if (ec) return make_error("cannot listen on " + where + ": " + ec.message());
    p->udp_ep = p->udp_socket.local_endpoint(ec);
  }
  return std::unique_ptr<ingest_server>(new ingest_server(std::move(p)));
}

void ingest_server::start() {
  if (impl_->acceptor.is_open()) impl_->accept();
  if (impl_->udp_socket.is_open()) impl_->receive();
}

void ingest_server::stop_accepting() {
  asio::post(impl_->io, [p = impl_.get()] {
    boost::system::error_code ignored;
    p->acceptor.close(ignored);
    p->udp_socket.close(ignored);
  });
}

void ingest_server::close_all() {
  std::set<std::shared_ptr<tcp_session>> open;
  {
    std::lock_guard lock(impl_->sessions_mu);
    impl_->closing = true;
    open = impl_->sessions;
  }
  for (const auto& s : open)
    s->close();
}

std::optional<tcp::endpoint> ingest_server::tcp_endpoint() const {
  return impl_->tcp_ep;
}
std::optional<udp::endpoint> ingest_server::udp_endpoint() const {
  return impl_->udp_ep;
}

}  // namespace plumbline
