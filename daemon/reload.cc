// reload.cc: see reload.h.
#include "daemon/reload.h"

#include <utility>

#include "config/load.h"
#include "daemon/csv_input.h"

namespace plumbline {

namespace {

std::string position_text(const config::daemon_config& c, const config::source_position& p) {
  if (p.line == 0) return c.source + ": ";
  return c.source + ":" + std::to_string(p.line) + ":" + std::to_string(p.column) + ": ";
}

// The monitor's reference samples, row-major. REQUIRES: the entry's lock.
std::vector<double> reference_values(const stream_monitor& m) {
  evaluation_input in;
  m.capture(in);
  if (in.dimension <= 1) return in.reference;
  std::vector<double> flat;
  flat.reserve(static_cast<std::size_t>(in.reference_rows.size()));
  for (Eigen::Index i = 0; i < in.reference_rows.rows(); ++i)
    for (Eigen::Index j = 0; j < in.reference_rows.cols(); ++j)
      flat.push_back(in.reference_rows(i, j));
  return flat;
}

void note(reload_outcome& out, std::string text) {
  if (out.notes.size() < max_reload_notes) out.notes.push_back(std::move(text));
}

}  // namespace

prepared_config prepare_config(const std::string& path, const config_overrides& o) {
  prepared_config out;
  auto cfg = std::make_shared<config::daemon_config>();
  if (path.empty()) {
    *cfg = config::default_config();
  } else {
    config::load_result loaded = config::load_config_file(path);
    if (!loaded.config) {
      for (const auto& e : loaded.errors)
        out.errors.push_back(e.str());
      return out;
    }
    *cfg = std::move(*loaded.config);
  }
  for (auto [flag, text] : {std::pair{"--ingest", &o.ingest}, std::pair{"--http", &o.http}}) {
    if (text->empty()) continue;
    auto hp = config::parse_host_port(*text);
    if (!hp) {
      out.errors.push_back(std::string(flag) + ": " + hp.err().message);
      continue;
    }
    if (text == &o.ingest) {
      cfg->ingest.tcp = hp.value();
      cfg->ingest.udp = hp.value();
    } else {
      cfg->http.listen = hp.value();
    }
  }
  if (!o.data_dir.empty()) cfg->state.data_dir = o.data_dir;
  for (auto& g : cfg->groups) {
    if (g.settings.policy != reference_policy::file) continue;
    auto s = read_csv_sample(g.reference_file);
    if (!s) {
      out.errors.push_back(position_text(*cfg, g.reference_file_position) + "group '" + g.name +
                           "': reference_file: " + s.err().message);
      continue;
    }
    if (g.settings.dimension == 0) g.settings.dimension = static_cast<uint32_t>(s.value().width);
    g.reference_sample = std::move(s.value().values);
  }
  if (out.errors.empty()) out.config = std::move(cfg);
  return out;
}

std::vector<std::string> restart_only_changes(const config::daemon_config& a,
                                              const config::daemon_config& b) {
  std::vector<std::string> out;
  auto differ = [&](const char* key, const std::string& x, const std::string& y) {
    if (x != y)
      out.push_back(std::string(key) + " is " + y + " in the new configuration but stays " + x +
                    " until a restart (listeners and these settings cannot change on reload)");
  };
  differ("ingest.tcp", format_host_port(a.ingest.tcp), format_host_port(b.ingest.tcp));
  differ("ingest.udp", format_host_port(a.ingest.udp), format_host_port(b.ingest.udp));
  differ("http.listen", format_host_port(a.http.listen), format_host_port(b.http.listen));
  differ("ingest.max_line_bytes", std::to_string(a.ingest.max_line_bytes),
         std::to_string(b.ingest.max_line_bytes));
  differ("ingest.max_streams", std::to_string(a.ingest.max_streams),
         std::to_string(b.ingest.max_streams));
  differ("ingest.max_connections", std::to_string(a.ingest.max_connections),
         std::to_string(b.ingest.max_connections));
  differ("ingest.idle_timeout_seconds", std::to_string(a.ingest.idle_timeout_seconds),
         std::to_string(b.ingest.idle_timeout_seconds));
  if (a.http.api_token != b.http.api_token)
    out.push_back(
        "the HTTP API token differs in the new configuration but stays as it was until a "
        "restart");
  differ("http.max_connections", std::to_string(a.http.max_connections),
         std::to_string(b.http.max_connections));
  differ("evaluation.threads", std::to_string(a.evaluation.threads),
         std::to_string(b.evaluation.threads));
  differ("evaluation.seed", std::to_string(a.evaluation.seed), std::to_string(b.evaluation.seed));
  differ("state.data_dir", "\"" + a.state.data_dir + "\"", "\"" + b.state.data_dir + "\"");
  differ("state.snapshot_interval_seconds", std::to_string(a.state.snapshot_interval_seconds),
         std::to_string(b.state.snapshot_interval_seconds));
  return out;
}

reload_outcome apply_config(stream_table& streams,
                            std::shared_ptr<const config::daemon_config> next, double now) {
  reload_outcome out;
  // New streams take the new groups from here on; every older one is moved
  // below (one created in between already has the new configuration).
  streams.set_config(next);
  std::size_t dropped_notes = 0;
  streams.for_each([&](stream_entry& e) {
    ++out.streams;
    std::lock_guard lock(e.mu);
    if (e.config == next) return;
    const config::stream_group* g = config::find_group(*next, e.name);
    if (g == nullptr || (g->settings.dimension != 0 && g->settings.dimension != e.dimension)) {
      ++out.kept_old;
      if (out.notes.size() >= max_reload_notes) {
        ++dropped_notes;
        return;
      }
      note(out, "stream " + e.name + " keeps its settings of group '" + e.group->name + "': " +
                    (g == nullptr ? std::string("no group of the new configuration matches it")
                                  : "group '" + g->name + "' fixes dimension " +
                                        std::to_string(g->settings.dimension) +
                                        ", the stream has " + std::to_string(e.dimension)));
      return;
    }
    const uint64_t generation = e.monitor.generation();
    const bool policy_changed = e.monitor.settings().policy != g->settings.policy;
    if (g->name != e.group->name) ++out.regrouped;
    // The monitor shares the group's settings; they live as long as `next`.
    e.monitor.apply_settings(std::shared_ptr<const monitor_settings>(next, &g->settings), now);
    if (policy_changed) ++out.emptied;
    if (g->settings.policy == reference_policy::file &&
        reference_values(e.monitor) != g->reference_sample) {
      auto ok = e.monitor.set_reference(g->reference_sample);
      if (!ok) {
        if (out.notes.size() < max_reload_notes) {
          note(out, "stream " + e.name + ": reference file: " + ok.err().message);
        } else {
          ++dropped_notes;
        }
      }
    }
    if (e.monitor.generation() != generation) {
      // The windows changed: the first evaluation comes when they are full again.
      e.primed = false;
      e.since_trigger = 0;
    }
    e.config = next;
    e.group = g;
  });
  if (dropped_notes > 0)
    out.notes.push_back(std::to_string(dropped_notes) + " more stream note(s) left out");
  return out;
}

}  // namespace plumbline
