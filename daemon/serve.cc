// serve.cc: see serve.h.
//
// Design note: threads. Three groups, so that no kind of work waits for
// another: ingest I/O threads run one io_context (TCP sessions on strands and
// the UDP socket), evaluation workers run the evaluator's queue, and one HTTP
// thread runs its own io_context (a slow scrape never delays ingest). The
// main thread runs a control io_context: signals and the timer that asks for
// time-based evaluations.
#include "daemon/serve.h"

#include <malloc.h>

#include <csignal>
#include <iostream>
#include <map>
#include <mutex>
#include <thread>

#include "config/load.h"
#include "config/options.h"
#include "daemon/api.h"
#include "daemon/asio.h"
#include "daemon/csv_input.h"
#include "daemon/evaluator.h"
#include "daemon/http_server.h"
#include "daemon/ingest.h"
#include "daemon/log.h"
#include "daemon/metrics.h"
#include "daemon/reload.h"
#include "daemon/snapshot.h"
#include "daemon/stream_table.h"

namespace plumbline {

namespace asio = boost::asio;

CLI::App* add_serve_command(CLI::App& app, serve_args& a) {
  CLI::App* cmd = app.add_subcommand(
      "serve", "Run the daemon: ingest streams, evaluate them, serve metrics and the API");
  cmd->add_option("--config", a.config, "TOML configuration file (default: built-in defaults)")
      ->check(CLI::ExistingFile);
  cmd->add_option("--ingest", a.ingest,
                  "HOST:PORT for the TCP and UDP ingest listeners (port 0 picks a free port)");
  cmd->add_option("--http", a.http, "HOST:PORT for metrics and the API (port 0 picks a free port)");
  cmd->add_option("--log-level", a.log_level, "debug, info, warn or error (overrides [log] level)")
      ->check(CLI::IsMember({"debug", "info", "warn", "error"}));
  cmd->add_option("--data-dir", a.data_dir,
                  "Directory for snapshots of the streams' state (overrides [state] data_dir)");
  return cmd;
}

namespace {

std::string listener_text(const std::optional<asio::ip::tcp::endpoint>& e) {
  return e ? endpoint_text(e->address(), e->port()) : "off";
}
std::string listener_text(const std::optional<asio::ip::udp::endpoint>& e) {
  return e ? endpoint_text(e->address(), e->port()) : "off";
}

// Resolves a configured host (an address or a name such as "localhost").
expected<asio::ip::address> resolve_host(const std::string& host) {
  boost::system::error_code ec;
  auto addr = asio::ip::make_address(host, ec);
  if (!ec) return addr;
  asio::io_context io;
  asio::ip::tcp::resolver resolver(io);
  auto results = resolver.resolve(host, "", ec);
  if (ec || results.empty())
    return make_error("cannot resolve host '" + host + "': " + ec.message());
  return results.begin()->endpoint().address();
}

constexpr const char* caution =
    "plumbline's alarms are advisory: they do not replace site quality procedures, inspection "
    "plans or a qualified engineer's judgement, and plumbline is no safety interlock";

// Memory. glibc serves an allocation of at least its mmap threshold (128 KiB
// at start) with its own mapping, returned to the system when freed, but
// raises the threshold to the size of each such block freed, up to 32 MiB.
// A scrape of 10,000 streams frees blocks of megabytes (the series, the
// text), so after a few scrapes those blocks would come from the heap and
// stay resident: about 10 MiB at 10,000 streams, a sixth of the windows'
// size (README, "The daemon: ingest and evaluation under load"). Fixing the
// threshold keeps large short-lived blocks in mappings of their own. Of the
// long-lived allocations only windows of more than 16,384 values get one
// too, which costs a page's rounding each.
void fix_mmap_threshold() {
#ifdef __GLIBC__
  mallopt(M_MMAP_THRESHOLD, 128 * 1024);
#endif
}

}  // namespace

int run_serve(const serve_args& a, const std::string& version) {
  fix_mmap_threshold();
  // Configuration.
  const config_overrides overrides{a.ingest, a.http, a.data_dir};
  prepared_config prepared = prepare_config(a.config, overrides);
  if (!prepared.config) {
    for (const auto& e : prepared.errors)
      std::cerr << (e.starts_with("--") ? "plumbline: " : "") << e << "\n";
    std::cerr << "plumbline: " << (a.config.empty() ? std::string() : a.config + ": ")
              << "configuration has " << prepared.errors.size()
              << (prepared.errors.size() == 1 ? " error" : " errors") << "; not starting\n";
    return 2;
  }
  const std::shared_ptr<const config::daemon_config> started = prepared.config;
  const config::daemon_config& cfg = *started;
  const std::string level_text = a.log_level.empty() ? cfg.log.level : a.log_level;
  log::set_threshold(log::parse_level(level_text).value_or(log::level::info));

  log::info("plumbline " + version + " starting; configuration: " +
            (a.config.empty() ? std::string("built-in defaults") : a.config) + "; " +
            std::to_string(cfg.groups.size()) + " stream group(s)");
  log::info(caution);

  // Addresses.
  std::optional<asio::ip::tcp::endpoint> tcp_at, http_at;
  std::optional<asio::ip::udp::endpoint> udp_at;
  for (auto* hp : {&cfg.ingest.tcp, &cfg.ingest.udp, &cfg.http.listen}) {
    if (!hp->enabled) continue;
    auto addr = resolve_host(hp->host);
    if (!addr) {
      log::error(addr.err().message);
      return 1;
    }
    if (hp == &cfg.ingest.tcp) tcp_at.emplace(addr.value(), hp->port);
    if (hp == &cfg.ingest.udp) udp_at.emplace(addr.value(), hp->port);
    if (hp == &cfg.http.listen) http_at.emplace(addr.value(), hp->port);
  }

  // State.
  ingest_counters counters;
  stream_table streams(started, cfg.ingest.max_streams, [](stream_entry& e) {
    if (e.group->settings.policy != reference_policy::file) return;
    auto ok = e.monitor.set_reference(e.group->reference_sample);
    if (!ok) log::error("stream " + e.name + ": reference file: " + ok.err().message);
  });
  snapshot::status state_status;
  std::unique_ptr<snapshot::snapshotter> snapshots;
  if (!cfg.state.data_dir.empty()) {
    snapshots = std::make_unique<snapshot::snapshotter>(
        cfg.state.data_dir, streams, cfg.evaluation.seed, state_status,
        [](int severity, const std::string& m) {
          if (severity >= 2) {
            log::error(m);
          } else if (severity == 1) {
            log::warn(m);
          } else {
            log::info(m);
          }
        });
    snapshots->restore(unix_now());
  } else {
    log::info("no data directory ([state] data_dir or --data-dir): snapshots are off");
  }
  daemon_metrics metrics(streams, counters, version);
  metrics.attach(state_status, snapshots != nullptr);
  const unsigned cores = std::max(1u, std::thread::hardware_concurrency());
  const unsigned eval_threads = cfg.evaluation.threads != 0 ? cfg.evaluation.threads : cores;
  evaluator eval(eval_threads, [&](stream_entry& e, double seconds, double latency,
                                   const std::optional<alarm_event>& event) {
    metrics.observe_evaluation(seconds, latency);
    if (!event) return;
    std::string msg = "stream " + e.name + ": alarm " + std::string(event_kind_name(event->kind));
    if (event->has_p_value) msg += "; p = " + std::to_string(event->p_value);
    if (event->has_interval) {
      msg += "; drift " + std::to_string(event->estimate) + " [" + std::to_string(event->lower) +
             ", " + std::to_string(event->upper) + "]";
    }
    msg += " (advisory)";
    if (event->kind == alarm_event_kind::raised) {
      log::warn(msg);
    } else {
      log::info(msg);
    }
  });
  metrics.attach(eval);
  ingest_sink sink(streams, eval, counters);

  // Listeners.
  asio::io_context ingest_io;
  asio::io_context http_io;
  ingest_limits limits;
  limits.max_line_bytes = cfg.ingest.max_line_bytes;
  limits.max_connections = cfg.ingest.max_connections;
  limits.idle_timeout_seconds = cfg.ingest.idle_timeout_seconds;
  auto ingest = ingest_server::create(ingest_io, tcp_at, std::nullopt, limits, sink, counters);
  if (!ingest) {
    log::error(ingest.err().message);
    eval.stop(false);
    return 1;
  }
  // UDP shares the TCP port number when the TCP port was picked freely.
  if (udp_at && tcp_at && udp_at->port() == 0 && tcp_at->port() == 0 &&
      ingest.value()->tcp_endpoint())
    udp_at->port(ingest.value()->tcp_endpoint()->port());
  std::unique_ptr<ingest_server> udp_server;
  if (udp_at) {
    auto u = ingest_server::create(ingest_io, std::nullopt, udp_at, limits, sink, counters);
    if (!u && cfg.ingest.udp.port == 0) {  // that port number is taken for UDP: pick another
      udp_at->port(0);
      u = ingest_server::create(ingest_io, std::nullopt, udp_at, limits, sink, counters);
    }
    if (!u) {
      log::error(u.err().message);
      eval.stop(false);
      return 1;
    }
    udp_server = std::move(u.value());
  }
  const bool http_loopback = http_at && http_at->address().is_loopback();
  // Reloads: SIGHUP on the control thread and POST /api/reload on the HTTP
  // thread, one at a time.
  std::mutex reload_mu;
  auto reload = [&](const std::string& why) -> api_actions::reload_result {
    std::lock_guard lock(reload_mu);
    api_actions::reload_result r;
    log::info(why + ": re-reading " +
              (a.config.empty() ? std::string("the built-in defaults") : a.config));
    prepared_config next = prepare_config(a.config, overrides);
    if (!next.config) {
      for (const auto& e : next.errors)
        log::error(e);
      log::error("reload refused: the new configuration has " +
                 std::to_string(next.errors.size()) +
                 (next.errors.size() == 1 ? " error" : " errors") +
                 "; still running on the previous one");
      state_status.reload_ok.store(0);
      r.errors = std::move(next.errors);
      return r;
    }
    for (const auto& m : restart_only_changes(cfg, *next.config))
      log::warn("reload: " + m);
    if (a.log_level.empty())
      log::set_threshold(log::parse_level(next.config->log.level).value_or(log::level::info));
    const reload_outcome out = apply_config(streams, next.config, unix_now());
    for (const auto& n : out.notes)
      log::warn("reload: " + n);
    state_status.reload_ok.store(1);
    r.ok = true;
    r.streams = out.streams;
    r.kept_old = out.kept_old;
    r.notes = out.notes;
    log::info("reload done: " + std::to_string(next.config->groups.size()) + " stream group(s); " +
              std::to_string(out.streams) + " stream(s), " + std::to_string(out.regrouped) +
              " in another group, " + std::to_string(out.emptied) +
              " emptied by a reference policy change, " + std::to_string(out.kept_old) +
              " kept their old settings");
    return r;
  };
  api_actions actions;
  actions.reload = [&] { return reload("POST /api/reload"); };
  if (snapshots) actions.snapshot = [&] { return snapshots->write_now(); };
  api routes(streams, metrics, cfg, http_loopback, actions);
  std::unique_ptr<http::server> web;
  if (http_at) {
    http::server_limits hl;
    hl.max_connections = cfg.http.max_connections;
    auto w = http::server::create(
        http_io, *http_at, [&routes](const http::request& r) { return routes.handle(r); }, hl);
    if (!w) {
      log::error(w.err().message);
      eval.stop(false);
      return 1;
    }
    web = std::move(w.value());
  }
  if (http_at && !http_loopback && cfg.http.api_token.empty()) {
    log::warn("HTTP listens on " + listener_text(web->local_endpoint()) +
              ", beyond loopback, without http.api_token: POST requests are refused");
  }

  // Control: signals and time-based evaluation. The signal handlers are in
  // place before the ready line, so a stop request right after it is seen.
  asio::io_context control;
  asio::signal_set signals(control, SIGINT, SIGTERM);
  // SIGHUP re-reads the configuration (reload.h).
  asio::signal_set hangup(control, SIGHUP);
  std::function<void()> arm_hangup = [&] {
    hangup.async_wait([&](boost::system::error_code ec, int) {
      if (ec) return;
      reload("received SIGHUP");
      arm_hangup();
    });
  };
  arm_hangup();
  std::signal(SIGPIPE, SIG_IGN);

  ingest.value()->start();
  if (udp_server) udp_server->start();
  if (web) web->start();

  auto ingest_guard = asio::make_work_guard(ingest_io);
  auto http_guard = asio::make_work_guard(http_io);
  const unsigned io_threads = std::min(cores, 4u);
  std::vector<std::thread> threads;
  for (unsigned i = 0; i < io_threads; ++i)
    threads.emplace_back([&] { ingest_io.run(); });
  std::thread http_thread([&] { http_io.run(); });

  const std::string tcp_text = listener_text(ingest.value()->tcp_endpoint());
  const std::string udp_text = udp_server ? listener_text(udp_server->udp_endpoint()) : "off";
  const std::string http_text =
      web ? listener_text(std::optional<asio::ip::tcp::endpoint>(web->local_endpoint())) : "off";
  log::info("listening: ingest_tcp=" + tcp_text + " ingest_udp=" + udp_text + " http=" + http_text +
            "; " + std::to_string(io_threads) + " ingest thread(s), " +
            std::to_string(eval_threads) + " evaluation worker(s)");
  std::cout << "plumbline ready ingest_tcp=" << tcp_text << " ingest_udp=" << udp_text
            << " http=" << http_text << std::endl;

  asio::steady_timer tick(control);
  bool stopping = false;
  std::function<void()> arm_tick = [&] {
    tick.expires_after(std::chrono::milliseconds(250));
    tick.async_wait([&](boost::system::error_code ec) {
      if (ec || stopping) return;
      const double now = unix_now();
      streams.for_each([&](stream_entry& e) {
        bool due = false;
        {
          std::lock_guard lock(e.mu);
          const double every = e.group->settings.every_seconds;
          if (every > 0 && e.monitor.ready() && now - e.last_trigger_time >= every) {
            e.last_trigger_time = now;
            e.since_trigger = 0;
            due = true;
          }
        }
        if (due) eval.schedule(e);
      });
      arm_tick();
    });
  };
  arm_tick();
  // Periodic snapshots, on this thread.
  asio::steady_timer snapshot_timer(control);
  std::function<void()> arm_snapshot = [&] {
    if (!snapshots || cfg.state.snapshot_interval_seconds <= 0) return;
    snapshot_timer.expires_after(std::chrono::duration_cast<std::chrono::steady_clock::duration>(
        std::chrono::duration<double>(cfg.state.snapshot_interval_seconds)));
    snapshot_timer.async_wait([&](boost::system::error_code ec) {
      if (ec || stopping) return;
      snapshots->write_now();
      arm_snapshot();
    });
  };
  arm_snapshot();
  signals.async_wait([&](boost::system::error_code ec, int signo) {
    if (ec) return;
    stopping = true;
    tick.cancel();
    snapshot_timer.cancel();
    hangup.cancel();
    log::info(std::string("received ") + (signo == SIGTERM ? "SIGTERM" : "SIGINT") +
              "; stopping: no new connections, draining what was sent");
    ingest.value()->stop_accepting();
    if (udp_server) udp_server->stop_accepting();
    // A short grace period for bytes already in flight, then close.
    auto grace = std::make_shared<asio::steady_timer>(control, std::chrono::milliseconds(300));
    grace->async_wait([&, grace](boost::system::error_code) { ingest.value()->close_all(); });
  });
  control.run();

  ingest_guard.reset();
  for (auto& t : threads)
    t.join();
  eval.stop(true);
  // Nothing is ingested or evaluated any more: this snapshot holds every
  // sample received, so a graceful stop loses nothing.
  if (snapshots) {
    auto written = snapshots->write_now();
    if (written) log::info("final snapshot written: " + written.value());
  }
  if (web) web->stop();
  http_guard.reset();
  http_thread.join();
  log::info("stopped: " + std::to_string(counters.records.load()) + " records accepted, " +
            std::to_string(eval.completed()) + " evaluations, " + std::to_string(eval.coalesced()) +
            " coalesced");
  return 0;
}

}  // namespace plumbline
