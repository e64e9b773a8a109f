// check_config.cc: `plumbline check-config`. See check_config.h.
#include "daemon/check_config.h"

#include <cstdio>
#include <iostream>
#include <map>
#include <sstream>

#include "config/glob.h"
#include "config/option_table.h"
#include "core/permutation.h"
#include "core/statistic.h"
#include "daemon/csv_input.h"

namespace plumbline {

namespace {

using config::config_error;
using config::daemon_config;
using config::stream_group;

std::string fmt(double v) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.6g", v);
  return buf;
}

std::string group_label(const stream_group& g) {
  return "[[group]] \"" + g.name + "\"";
}

// Checks the reference files; `rows` receives each file group's row count.
std::vector<config_error> check_files(const daemon_config& c,
                                      std::map<std::string, std::size_t>* rows) {
  std::vector<config_error> errors;
  for (const stream_group& g : c.groups) {
    if (g.settings.policy != reference_policy::file) continue;
    auto add = [&](const std::string& m) {
      errors.push_back({c.source, g.reference_file_position.line, g.reference_file_position.column,
                        group_label(g) + " reference_file " + m});
    };
    auto sample = read_csv_sample(g.reference_file);
    if (!sample) {
      add("cannot be used: " + sample.err().message);
      continue;
    }
    const monitor_settings& s = g.settings;
    const std::size_t n = sample->rows(), w = sample->width;
    const std::string what = "\"" + g.reference_file + "\"";
    if (rows) (*rows)[g.name] = n;
    if (n < 2) {
      add(what + " holds " + std::to_string(n) + (n == 1 ? " row" : " rows") +
          "; at least 2 are needed");
      continue;
    }
    if (s.dimension != 0 && w != s.dimension) {
      add(what + " has rows of " + std::to_string(w) + (w == 1 ? " value" : " values") +
          ", but dimension = " + std::to_string(s.dimension));
      continue;
    }
    if (w >= 2) {
      bool univariate = s.interval.has_value();
      for (test_kind t : s.tests)
        univariate = univariate || !is_multivariate(t);
      if (univariate)
        add(what + " has rows of " + std::to_string(w) +
            " values, which need tests = [\"energy\"] and interval = \"none\"");
    }
    if (s.interval && s.interval->quantity != drift_quantity::mean_diff && n < 3)
      add(what + " holds 2 rows; interval = \"" + std::string(quantity_name(s.interval->quantity)) +
          "\" needs at least 3");
    bool energy = w >= 2;
    for (test_kind t : s.tests)
      energy = energy || t == test_kind::energy;
    if (energy && n + s.recent_size > max_energy_pooled)
      add(what + " holds " + std::to_string(n) + " rows: with recent_size = " +
          std::to_string(s.recent_size) + " that is more than the energy test's " +
          std::to_string(max_energy_pooled) + " pooled samples");
    const uint32_t block = s.permutation.block_length;
    if (block > 1 && n / block < 2)
      add(what + " holds " + std::to_string(n) +
          " rows: fewer than 2 blocks of block = " + std::to_string(block));
    if (s.interval && s.interval->block_length > 1 && n < std::size_t{2} * s.interval->block_length)
      add(what + " holds " + std::to_string(n) + " rows: fewer than 2 blocks of interval_block = " +
          std::to_string(s.interval->block_length));
    if (s.permutation.exact == exact_mode::always &&
        split_count(n, s.recent_size) > max_exact_splits)
      add(what + " holds " + std::to_string(n) +
          " rows: exact = \"always\" would enumerate more "
          "than " +
          std::to_string(max_exact_splits) + " splits");
  }
  return errors;
}

std::string tests_text(const monitor_settings& s) {
  std::string t;
  for (test_kind k : s.tests)
    t += (t.empty() ? "" : ", ") + std::string(test_name(k));
  return t;
}

std::string interval_text(const monitor_settings& s) {
  if (!s.interval) return "none";
  const interval_options& o = *s.interval;
  std::string t(quantity_name(o.quantity));
  if (o.quantity == drift_quantity::quantile_diff) t += ":" + fmt(o.quantile);
  if (o.quantity == drift_quantity::cpk) {
    t += " (";
    if (o.spec_lower) t += "LSL " + fmt(*o.spec_lower);
    if (o.spec_lower && o.spec_upper) t += ", ";
    if (o.spec_upper) t += "USL " + fmt(*o.spec_upper);
    t += ")";
  }
  t += ", " + std::string(method_name(o.method)) + " " + fmt(100 * o.level) + "%";
  if (s.alarm.tolerance) t += ", tolerance " + fmt(*s.alarm.tolerance);
  return t;
}

std::string summary(const daemon_config& c, const std::map<std::string, std::size_t>& rows) {
  std::ostringstream o;
  const auto& in = c.ingest;
  o << "  ingest      tcp " << config::format_host_port(in.tcp) << ", udp "
    << config::format_host_port(in.udp) << "; at most " << in.max_streams << " streams, "
    << in.max_connections << " connections, lines of " << in.max_line_bytes << " bytes\n";
  o << "  http        " << config::format_host_port(c.http.listen) << ", ";
  if (!c.http.api_token_file.empty())
    o << "API token from " << c.http.api_token_file;
  else if (!c.http.api_token.empty())
    o << "API token set in the file";
  else
    o << "no API token";
  o << "\n";
  o << "  evaluation  ";
  if (c.evaluation.threads == 0)
    o << "one thread per core";
  else
    o << c.evaluation.threads << (c.evaluation.threads == 1 ? " thread" : " threads");
  o << ", seed " << c.evaluation.seed << "\n";
  o << "  state       ";
  if (c.state.data_dir.empty()) {
    o << "no data directory: snapshots off, a restart starts every stream empty";
  } else {
    o << "snapshots in " << c.state.data_dir << ", ";
    if (c.state.snapshot_interval_seconds > 0)
      o << "every " << fmt(c.state.snapshot_interval_seconds) << " s and at a graceful stop";
    else
      o << "on request and at a graceful stop";
  }
  o << "\n";
  o << "  log         " << c.log.level << "\n";
  o << "  groups      " << c.groups.size() << ", tried in this order (the first match wins):\n";
  bool catch_all = false;
  for (const stream_group& g : c.groups) {
    const monitor_settings& s = g.settings;
    catch_all = catch_all || config::glob_matches_everything(g.match);
    o << "    " << g.name << "  \"" << g.match << "\"\n      ";
    switch (s.policy) {
      case reference_policy::baseline:
        o << "baseline reference of " << s.reference_size;
        break;
      case reference_policy::lagged:
        o << "lagged reference of " << s.reference_size;
        break;
      case reference_policy::file: {
        o << "reference from " << g.reference_file;
        const auto it = rows.find(g.name);
        if (it != rows.end()) o << " (" << it->second << " rows)";
        break;
      }
    }
    o << ", recent " << s.recent_size;
    if (s.dimension != 0) o << ", dimension " << s.dimension;
    o << "; every ";
    if (s.every_samples != 0) o << s.every_samples << " samples";
    if (s.every_samples != 0 && s.every_seconds != 0) o << " or ";
    if (s.every_seconds != 0) o << fmt(s.every_seconds) << " s";
    o << "\n      tests " << tests_text(s) << " (alpha " << fmt(s.alarm.alpha) << ", "
      << s.permutation.resamples << " resamples); interval " << interval_text(s) << "\n";
  }
  if (!catch_all) o << "  note        a stream that matches no group is rejected\n";
  return o.str();
}

}  // namespace

std::vector<config_error> check_reference_files(const daemon_config& config) {
  return check_files(config, nullptr);
}

std::string format_option_table() {
  std::ostringstream o;
  o << "# Every configuration key: its default, the values it accepts, and what it does.\n";
  for (config::option_section s : config::all_sections) {
    o << "\n" << config::section_header(s) << "\n";
    for (const config::option_info& opt : config::option_table()) {
      if (opt.section != s) continue;
      o << "  " << opt.key << " = "
        << (opt.default_value.empty() ? std::string(opt.no_default) : opt.default_value) << "\n"
        << "      " << opt.type << ": " << opt.bounds << "\n"
        << "      " << opt.help << "\n";
    }
  }
  return o.str();
}

CLI::App* add_check_config_command(CLI::App& app, check_config_args& a) {
  CLI::App* cmd = app.add_subcommand(
      "check-config",
      "Check a daemon configuration file (TOML) and its reference files, and summarise it");
  cmd->add_option("file", a.file, "the configuration file");
  cmd->add_flag("--defaults", a.defaults,
                "print every configuration key with its default, accepted values and help");
  return cmd;
}

int run_check_config(const check_config_args& a) {
  if (a.defaults) {
    std::cout << format_option_table();
    return 0;
  }
  if (a.file.empty()) {
    std::cerr << "plumbline check-config: name a configuration file (or use --defaults)\n";
    return 2;
  }
  config::load_result r = config::load_config_file(a.file);
  std::map<std::string, std::size_t> rows;
  if (r.config) r.errors = check_files(*r.config, &rows);
  if (!r.errors.empty()) {
    std::ostringstream e;
    for (const config_error& err : r.errors)
      e << err.str() << "\n";
    e << a.file << ": " << r.errors.size() << (r.errors.size() == 1 ? " error" : " errors")
      << "; the daemon would not start\n";
    std::cerr << e.str();
    return 2;
  }
  std::cout << a.file << ": ok\n" << summary(*r.config, rows);
  return 0;
}

}  // namespace plumbline
