// main.cc: the `plumbline-sim` command line: send, write, score, load, keys.
// Exit codes: 0 done, 1 a run-time failure (connection, file), 2 a bad
// command line or scenario. Exceptions are caught only here.
#include <CLI/CLI.hpp>
#include <algorithm>
#include <atomic>
#include <csignal>
#include <cstdio>
#include <exception>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <nlohmann/json.hpp>
#include <optional>

#include "simulator/generate.h"
#include "simulator/load.h"
#include "simulator/net.h"
#include "simulator/scenario.h"
#include "simulator/score.h"
#include "simulator/truth.h"

#ifndef PLUMBLINE_VERSION
#define PLUMBLINE_VERSION "0.0.0"
#endif

namespace {

using namespace plumbline;
using namespace plumbline::sim;
using nlohmann::json;

std::atomic<bool> stop_requested{false};
extern "C" void on_signal(int) {
  stop_requested.store(true);
}

struct common_args {
  std::string scenario;
  std::optional<uint64_t> seed;
  std::optional<double> duration;
  std::string epoch;  // "", "now" or Unix seconds
};

void add_common(CLI::App* cmd, common_args& a) {
  cmd->add_option("--scenario", a.scenario, "scenario file (TOML; see simulator/README.md)")
      ->required();
  cmd->add_option("--seed", a.seed, "seed of every generator (default: the scenario's seed)");
  cmd->add_option("--duration", a.duration,
                  "simulated seconds (default: the scenario's duration_seconds)")
      ->check(CLI::Range(1e-3, 31622400.0));
  cmd->add_option("--epoch", a.epoch,
                  "Unix time of the first sample, or 'now' (default: the scenario's epoch)");
}

// The scenario with the command line's overrides, or an exit code.
std::optional<scenario> load(const common_args& a, int& code) {
  scenario_result r = load_scenario_file(a.scenario);
  if (!r.value) {
    for (const auto& e : r.errors)
      std::cerr << e.str() << "\n";
    std::cerr << r.errors.size() << " error" << (r.errors.size() == 1 ? "" : "s") << " in "
              << a.scenario << "\n";
    code = 2;
    return std::nullopt;
  }
  scenario s = std::move(*r.value);
  if (a.seed) s.seed = *a.seed;
  if (a.duration) s.duration = *a.duration;
  if (a.epoch == "now") {
    s.epoch = std::floor(
        std::chrono::duration<double>(std::chrono::system_clock::now().time_since_epoch()).count());
  } else if (!a.epoch.empty()) {
    char* end = nullptr;
    const double e = std::strtod(a.epoch.c_str(), &end);
    if (end == a.epoch.c_str() || *end != '\0' || !(e >= 0)) {
      std::cerr << "plumbline-sim: --epoch must be Unix seconds or 'now', got '" << a.epoch
                << "'\n";
      code = 2;
      return std::nullopt;
    }
    s.epoch = e;
  }
  if (s.epoch + s.duration >= 253402300800.0) {
    std::cerr << "plumbline-sim: epoch + duration must be before the year 10000\n";
    code = 2;
    return std::nullopt;
  }
  return s;
}

// ---- send ------------------------------------------------------------------

struct send_args {
  common_args common;
  std::string to;
  bool udp = false;
  double speed = 1;
  std::string truth;
  bool quiet = false;
};

int run_send_command(const send_args& a) {
  int code = 0;
  auto s = load(a.common, code);
  if (!s) return code;
  auto to = parse_host_port(a.to);
  if (!to.ok()) {
    std::cerr << "plumbline-sim: --to: " << to.err().message << "\n";
    return 2;
  }
  send_options o;
  o.to = to.value();
  o.udp = a.udp;
  o.speed = a.speed;
  o.duration = s->duration;
  o.seed = s->seed;
  o.epoch = s->epoch;
  o.progress = !a.quiet;
  o.stop = &stop_requested;
  std::signal(SIGINT, on_signal);
  std::signal(SIGTERM, on_signal);
  truth t = make_truth(*s, s->seed, s->duration);
  auto rep = run_send(*s, o, std::cerr, a.truth.empty() ? nullptr : &t);
  if (!a.truth.empty()) {
    // Also after a failure or an early stop: the truth covers what was sent
    // (the newest clock point is the offset of the newest record sent).
    if (rep.ok() && rep.value().stopped)
      clip_truth(t, *s, rep.value().simulated_seconds);
    else if (!rep.ok())
      clip_truth(t, *s, t.clock.empty() ? 0 : t.clock.back().second);
    if (auto w = write_truth(t, a.truth); !w.ok()) {
      std::cerr << "plumbline-sim: " << w.err().message << "\n";
      return 1;
    }
  }
  if (!rep.ok()) {
    std::cerr << "plumbline-sim: send: " << rep.err().message << "\n";
    return 1;
  }
  char line[256];
  std::snprintf(
      line, sizeof line,
      "send: %s %llu records (%llu samples dropped by faults) in %.2f s, %.1f "
      "simulated s\n",
      rep->stopped ? "stopped early after" : "done:", static_cast<unsigned long long>(rep->records),
      static_cast<unsigned long long>(rep->dropped), rep->wall_seconds, rep->simulated_seconds);
  std::cerr << line;
  return rep->stopped ? 1 : 0;
}

// ---- write -----------------------------------------------------------------

struct write_args {
  common_args common;
  std::string out;
  std::string wire;
};

int run_write_command(const write_args& a) {
  int code = 0;
  auto s = load(a.common, code);
  if (!s) return code;
  namespace fs = std::filesystem;
  std::error_code ec;
  fs::create_directories(a.out, ec);
  if (ec) {
    std::cerr << "plumbline-sim: " << a.out << ": cannot create: " << ec.message() << "\n";
    return 1;
  }
  // One sensor at a time: each sensor's values do not depend on the others.
  std::string text;
  for (std::size_t i = 0; i < s->sensors.size(); ++i) {
    const sensor_spec& spec = s->sensors[i];
    const std::string path = (fs::path(a.out) / (spec.stream + ".csv")).string();
    std::ofstream out(path, std::ios::binary | std::ios::trunc);
    if (!out) {
      std::cerr << "plumbline-sim: " << path << ": cannot write\n";
      return 1;
    }
    out << "time,value\n";
    sensor_stream st(*s, i, s->seed);
    char buf[32];
    for (;;) {
      const sample smp = st.next();
      if (smp.offset >= s->duration) break;
      if (!smp.present) continue;
      text.append(buf, format_time(s->epoch, smp.offset, buf));
      text += ',';
      text.append(buf, format_value(spec, smp, buf));
      text += '\n';
      if (text.size() >= (1u << 20)) {
        out << text;
        text.clear();
      }
    }
    out << text;
    text.clear();
    if (!out) {
      std::cerr << "plumbline-sim: " << path << ": write failed\n";
      return 1;
    }
  }
  if (!a.wire.empty()) {
    std::ofstream out(a.wire, std::ios::binary | std::ios::trunc);
    if (!out) {
      std::cerr << "plumbline-sim: " << a.wire << ": cannot write\n";
      return 1;
    }
    timeline tl(*s, s->seed, s->duration);
    std::size_t sensor;
    sample smp;
    while (tl.next(sensor, smp)) {
      if (!smp.present) continue;
      append_record(text, s->sensors[sensor], s->epoch, smp);
      if (text.size() >= (1u << 20)) {
        out << text;
        text.clear();
      }
    }
    out << text;
    if (!out) {
      std::cerr << "plumbline-sim: " << a.wire << ": write failed\n";
      return 1;
    }
  }
  const truth t = make_truth(*s, s->seed, s->duration);
  if (auto w = write_truth(t, (fs::path(a.out) / "truth.json").string()); !w.ok()) {
    std::cerr << "plumbline-sim: " << w.err().message << "\n";
    return 1;
  }
  return 0;
}

// ---- score -----------------------------------------------------------------

struct score_args {
  std::string truth;
  std::string daemon;
  std::string alarms;
  std::string save_alarms;
  std::optional<double> grace;
  bool json_out = false;
};

int run_score_command(const score_args& a) {
  auto t = read_truth(a.truth);
  if (!t.ok()) {
    std::cerr << "plumbline-sim: " << t.err().message << "\n";
    return 2;
  }
  alarm_histories alarms;
  json saved = json::object();
  if (!a.alarms.empty()) {
    std::ifstream in(a.alarms, std::ios::binary);
    if (!in) {
      std::cerr << "plumbline-sim: " << a.alarms << ": cannot read\n";
      return 2;
    }
    json j;
    try {
      j = json::parse(in);
    } catch (const json::exception& e) {
      std::cerr << "plumbline-sim: " << a.alarms << ": not valid JSON: " << e.what() << "\n";
      return 2;
    }
    auto h = parse_alarms(j, a.alarms);
    if (!h.ok()) {
      std::cerr << "plumbline-sim: " << h.err().message << "\n";
      return 2;
    }
    alarms = std::move(h.value());
  } else {
    auto at = parse_host_port(a.daemon);
    if (!at.ok()) {
      std::cerr << "plumbline-sim: --daemon: " << at.err().message << "\n";
      return 2;
    }
    for (const truth_stream& s : t->streams) {
      auto r = http_get(at.value(), "/api/streams/" + s.spec.stream);
      if (!r.ok()) {
        std::cerr << "plumbline-sim: " << r.err().message << "\n";
        return 1;
      }
      if (r->status == 404) {
        stream_alarms none;
        none.known = false;
        alarms[s.spec.stream] = none;
        continue;
      }
      if (r->status != 200) {
        std::cerr << "plumbline-sim: GET /api/streams/" << s.spec.stream << ": status " << r->status
                  << "\n";
        return 1;
      }
      try {
        json detail = json::parse(r->body);
        auto h = parse_stream_alarms(detail);
        if (!h.ok()) {
          std::cerr << "plumbline-sim: " << s.spec.stream << ": " << h.err().message << "\n";
          return 1;
        }
        alarms[s.spec.stream] = std::move(h.value());
        if (!a.save_alarms.empty()) saved[s.spec.stream] = std::move(detail);
      } catch (const json::exception& e) {
        std::cerr << "plumbline-sim: " << s.spec.stream << ": bad JSON: " << e.what() << "\n";
        return 1;
      }
    }
    if (!a.save_alarms.empty()) {
      std::ofstream out(a.save_alarms, std::ios::binary | std::ios::trunc);
      out << saved.dump(1) << "\n";
      if (!out) {
        std::cerr << "plumbline-sim: " << a.save_alarms << ": write failed\n";
        return 1;
      }
    }
  }
  const score_report r = score(t.value(), alarms, a.grace ? *a.grace : t->grace);
  if (a.json_out)
    std::cout << score_json(r).dump(2) << "\n";
  else
    std::cout << score_table(r);
  return 0;
}

// ---- load ------------------------------------------------------------------

struct load_args {
  std::string to;
  load_options o;
  bool json_out = false;
  bool quiet = false;
};

int run_load_command(load_args& a) {
  auto to = parse_host_port(a.to);
  if (!to.ok()) {
    std::cerr << "plumbline-sim: --to: " << to.err().message << "\n";
    return 2;
  }
  a.o.host = to->host;
  a.o.port = to->port;
  std::function<void(const load_progress&)> progress;
  if (!a.quiet)
    progress = [](const load_progress& p) {
      char line[160];
      std::snprintf(line, sizeof line, "load: %llu records in %.1f s\n",
                    static_cast<unsigned long long>(p.records_sent), p.seconds);
      std::cerr << line;
    };
  auto r = run_load(a.o, progress);
  if (!r.ok()) {
    std::cerr << "plumbline-sim: " << r.err().message << "\n";
    return 1;
  }
  if (a.json_out) {
    std::cout << json{{"records_sent", r->records_sent},
                      {"bytes_sent", r->bytes_sent},
                      {"stagger_records", r->stagger_records},
                      {"seconds", r->seconds},
                      {"records_per_second", r->records_per_second()}}
                     .dump(2)
              << "\n";
  } else {
    char line[256];
    std::snprintf(line, sizeof line, "records sent  %llu\nseconds       %.3f\nrecords/s     %.0f\n",
                  static_cast<unsigned long long>(r->records_sent), r->seconds,
                  r->records_per_second());
    std::cout << line;
  }
  return 0;
}

// ---- keys ------------------------------------------------------------------

int run_keys_command() {
  std::string section;
  for (const scenario_key& k : scenario_keys()) {
    if (k.section != section) {
      section = std::string(k.section);
      std::cout << (section == "scenario" ? "[scenario]" : "[[" + section + "]]") << "\n";
    }
    std::cout << "  " << k.key << " (" << k.type << ") default " << k.default_value << "; "
              << k.bounds << "\n      " << k.help << "\n";
  }
  return 0;
}

}  // namespace

int main(int argc, char** argv) {
  CLI::App app{
      "plumbline-sim: invented production lines for plumbline, with ground truth and "
      "scoring"};
  app.set_version_flag("--version", std::string("plumbline-sim ") + PLUMBLINE_VERSION);
  app.require_subcommand(1);

  send_args send;
  CLI::App* send_cmd = app.add_subcommand("send", "send a scenario's records to a daemon");
  add_common(send_cmd, send.common);
  send_cmd->add_option("--to", send.to, "the daemon's ingest address HOST:PORT")->required();
  send_cmd->add_flag("--udp", send.udp, "send UDP datagrams (several records each) instead of TCP");
  send_cmd->add_option("--speed", send.speed, "simulated seconds per wall second (default 1)")
      ->check(CLI::Range(1e-3, 1e9));
  send_cmd->add_option("--truth", send.truth, "also write the ground truth to FILE");
  send_cmd->add_flag("--quiet", send.quiet, "no progress lines");

  write_args write;
  CLI::App* write_cmd =
      app.add_subcommand("write", "write CSV files per stream and DIR/truth.json");
  add_common(write_cmd, write.common);
  write_cmd->add_option("--out", write.out, "output directory")->required();
  write_cmd->add_option("--wire", write.wire,
                        "also write every record, in time order, in the wire format to FILE");

  score_args sc;
  CLI::App* score_cmd =
      app.add_subcommand("score", "compare the daemon's alarm history with the ground truth");
  score_cmd->add_option("--truth", sc.truth, "truth file, or a directory holding truth.json")
      ->required();
  auto* d = score_cmd->add_option("--daemon", sc.daemon,
                                  "the daemon's HTTP address HOST:PORT (GET /api/streams/...)");
  auto* al = score_cmd->add_option("--alarms", sc.alarms,
                                   "saved JSON: {stream: GET /api/streams/{stream} answer}");
  d->excludes(al);
  al->excludes(d);
  score_cmd->add_option("--save-alarms", sc.save_alarms,
                        "with --daemon: save the answers to FILE (for --alarms)");
  score_cmd->add_option("--grace", sc.grace, "grace seconds (default: the truth's)")
      ->check(CLI::Range(0.0, 86400.0));
  score_cmd->add_flag("--json", sc.json_out, "JSON instead of a table");

  load_args ld;
  CLI::App* load_cmd = app.add_subcommand("load", "send as fast as the daemon accepts");
  load_cmd->add_option("--to", ld.to, "the daemon's TCP ingest address HOST:PORT")->required();
  load_cmd->add_option("--streams", ld.o.streams, "streams (default 10000)")
      ->check(CLI::Range(uint64_t{1}, uint64_t{10'000'000}));
  load_cmd->add_option("--connections", ld.o.connections, "TCP connections (default 4)")
      ->check(CLI::Range(1u, 1024u));
  load_cmd->add_option("--records", ld.o.records, "records to send (0: until --duration)");
  load_cmd->add_option("--duration", ld.o.duration_seconds, "seconds to send (default 10)")
      ->check(CLI::PositiveNumber);
  load_cmd->add_option("--seed", ld.o.seed, "seed (default 1)");
  load_cmd->add_option("--prefix", ld.o.prefix, "stream name prefix (default load.s)");
  load_cmd->add_option("--dimension", ld.o.dimension, "values per record (default 1)")
      ->check(CLI::Range(1u, 64u));
  load_cmd->add_option("--rate", ld.o.rate,
                       "records per second, all connections together (default 0: no limit)")
      ->check(CLI::NonNegativeNumber);
  load_cmd->add_option("--stagger", ld.o.stagger,
                       "before timing, stream i gets stagger*i/streams records of its own, so "
                       "count cadences are out of step (default 0)")
      ->check(CLI::Range(uint64_t{0}, uint64_t{1'000'000}));
  load_cmd->add_flag("--json", ld.json_out, "JSON instead of a table");
  load_cmd->add_flag("--quiet", ld.quiet, "no progress lines");

  app.add_subcommand("keys", "list every scenario key with its default and bounds");

  try {
    app.parse(argc, argv);
  } catch (const CLI::CallForHelp& e) {
    return app.exit(e);
  } catch (const CLI::CallForAllHelp& e) {
    return app.exit(e);
  } catch (const CLI::CallForVersion& e) {
    return app.exit(e);
  } catch (const CLI::ParseError& e) {
    std::cerr << "plumbline-sim: " << e.what() << " (see plumbline-sim --help)\n";
    return 2;
  }
  try {
    if (send_cmd->parsed()) return run_send_command(send);
    if (write_cmd->parsed()) return run_write_command(write);
    if (score_cmd->parsed()) {
      if (sc.daemon.empty() && sc.alarms.empty()) {
        std::cerr << "plumbline-sim: score needs --daemon HOST:PORT or --alarms FILE\n";
        return 2;
      }
      return run_score_command(sc);
    }
    if (load_cmd->parsed()) return run_load_command(ld);
    return run_keys_command();
  } catch (const std::exception& e) {
    std::cerr << "plumbline-sim: internal error: " << e.what() << "\n";
    return 1;
  }
}
