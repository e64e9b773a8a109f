// api.cc: see api.h.
#include "daemon/api.h"

#include <charconv>
#include <nlohmann/json.hpp>

#include "core/alarm.h"
#include "daemon/evaluator.h"
#include "daemon/log.h"
#include "daemon/result_json.h"

namespace plumbline {

namespace {

using nlohmann::json;
namespace bh = boost::beast::http;

constexpr std::string_view streams_prefix = "/api/streams/";
constexpr std::string_view rebaseline_suffix = "/rebaseline";
constexpr std::size_t default_list_limit = 1000;
constexpr std::size_t max_list_limit = 10000;

http::response text(unsigned status, std::string body) {
  http::response r;
  r.status = status;
  r.body = std::move(body);
  return r;
}

http::response json_response(unsigned status, const json& j) {
  http::response r;
  r.status = status;
  r.content_type = "application/json";
  r.body = j.dump(2, ' ', false, json::error_handler_t::replace);
  r.body += '\n';
  return r;
}

http::response json_error(unsigned status, const std::string& message) {
  return json_response(status, json{{"error", message}});
}

// Constant-time comparison, so the token cannot be guessed byte by byte from
// response times.
bool same_secret(std::string_view a, std::string_view b) {
  unsigned char diff = a.size() == b.size() ? 0 : 1;
  const std::size_t n = std::min(a.size(), b.size());
  for (std::size_t i = 0; i < n; ++i)
    diff |= static_cast<unsigned char>(a[i] ^ b[i]);
  return diff == 0;
}

// "offset=10&limit=5" -> the value of `key`, if present and a number.
std::optional<std::size_t> query_number(std::string_view query, std::string_view key, bool& bad) {
  while (!query.empty()) {
    const std::size_t amp = query.find('&');
    std::string_view part = query.substr(0, amp);
    query = amp == std::string_view::npos ? std::string_view{} : query.substr(amp + 1);
    const std::size_t eq = part.find('=');
    if (eq == std::string_view::npos || part.substr(0, eq) != key) continue;
    std::string_view v = part.substr(eq + 1);
    std::size_t out = 0;
    auto [p, ec] = std::from_chars(v.data(), v.data() + v.size(), out);
    if (ec != std::errc() || p != v.data() + v.size() || v.empty()) {
      bad = true;
      return std::nullopt;
    }
    return out;
  }
  return std::nullopt;
}

json settings_json(const monitor_settings& s, const config::stream_group& g) {
  json tests = json::array();
  for (test_kind t : s.tests)
    tests.push_back(std::string(test_name(t)));
  json j{{"group", g.name},
         {"match", g.match},
         {"reference", std::string(policy_name(s.policy))},
         {"reference_size", s.reference_size},
         {"recent_size", s.recent_size},
         {"every_samples", s.every_samples},
         {"every_seconds", s.every_seconds},
         {"tests", tests},
         {"alpha", s.alarm.alpha},
         {"resamples", s.permutation.resamples},
         {"stop_after", s.permutation.stop_after},
         {"block_length", s.permutation.block_length},
         {"raise_after", s.alarm.raise_after},
         {"clear_after", s.alarm.clear_after},
         {"history", s.alarm.history_limit}};
  if (s.policy == reference_policy::file) j["reference_file"] = g.reference_file;
  if (s.alarm.tolerance) j["tolerance"] = *s.alarm.tolerance;
  if (s.interval) {
    j["interval"] = std::string(quantity_name(s.interval->quantity));
    if (s.interval->quantity == drift_quantity::quantile_diff) j["quantile"] = s.interval->quantile;
    j["interval_method"] = std::string(method_name(s.interval->method));
    j["interval_level"] = s.interval->level;
    j["interval_resamples"] = s.interval->resamples;
  } else {
    j["interval"] = "none";
  }
  return j;
}

json event_json(const alarm_event& e) {
  json j{{"kind", std::string(event_kind_name(e.kind))},
         {"time", e.time},
         {"cause", std::string(cause_name(e.cause))}};
  if (e.has_p_value) j["p_value"] = e.p_value;
  if (e.has_interval) {
    j["lower"] = e.lower;
    j["estimate"] = e.estimate;
    j["upper"] = e.upper;
  }
  return j;
}

std::string_view state_name(eval_state s) {
  switch (s) {
    case eval_state::idle:
      return "idle";
    case eval_state::queued:
      return "queued";
    case eval_state::running:
      return "running";
    case eval_state::running_again:
      return "running";
  }
  return "idle";
}

// REQUIRES: e.mu held.
json summary_json(const stream_entry& e) {
  const stream_monitor& m = e.monitor;
  json j{{"name", e.name},
         {"group", e.group->name},
         {"dimension", e.dimension},
         {"samples_total", m.samples_total()},
         {"reference_samples", m.reference_fill()},
         {"recent_samples", m.recent_fill()},
         {"ready", m.ready()},
         {"evaluations", e.evaluations},
         {"evaluation_state", std::string(state_name(e.state.load(std::memory_order_acquire)))},
         {"alarm", m.alarm().active()}};
  if (const auto& r = m.last_result(); r && r->driving_ok()) {
    j["p_value"] = r->tests.front().result.p_value;
  }
  return j;
}

// REQUIRES: e.mu held.
json detail_json(const stream_entry& e) {
  const stream_monitor& m = e.monitor;
  json j = summary_json(e);
  j["settings"] = settings_json(m.settings(), *e.group);
  j["windows"] = {
      {"reference", {{"samples", m.reference_fill()}, {"capacity", m.reference_capacity()}}},
      {"recent", {{"samples", m.recent_fill()}, {"capacity", m.recent_capacity()}}}};
  if (m.samples_total() > 0) j["last_sample_time"] = e.last_sample_time;
  j["rejected_samples"] = m.rejected_total();
  if (e.evaluations > 0) {
    j["last_evaluation_time"] = e.last_evaluation_time;
    j["last_evaluation_seconds"] = e.last_evaluation_seconds;
  }
  if (const auto& r = m.last_result()) {
    json tests = json::array();
    for (const test_outcome& t : r->tests) {
      if (t.ok) {
        tests.push_back(test_json(t.result));
      } else {
        tests.push_back({{"name", std::string(t.name())}, {"error", t.error}});
      }
    }
    json last{{"tests", tests}, {"n_reference", r->n_reference}, {"n_recent", r->n_recent}};
    if (r->interval) {
      last["interval"] = interval_json(*r->interval);
    } else if (!r->interval_error.empty()) {
      last["interval"] = {{"error", r->interval_error}};
    }
    if (!r->error.empty()) last["error"] = r->error;
    j["last_result"] = last;
  } else {
    j["last_result"] = nullptr;
  }
  const alarm_state& a = m.alarm();
  json history = json::array();
  for (std::size_t i = 0; i < a.history_size(); ++i)
    history.push_back(event_json(a.history(i)));
  json alarm{{"active", a.active()},
             {"consecutive_signals", a.consecutive_signals()},
             {"consecutive_quiet", a.consecutive_quiet()},
             {"raised_total", a.raised_total()},
             {"cleared_total", a.cleared_total()},
             {"history", history},
             {"history_dropped", a.dropped_events()},
             {"advisory",
              "Alarms are advisory: they do not replace site quality procedures, "
              "inspection plans or a qualified engineer's judgement, and plumbline "
              "is no safety interlock."}};
  if (auto since = a.active_since()) alarm["active_since"] = *since;
  j["alarm"] = alarm;
  return j;
}

}  // namespace

api::api(stream_table& streams, const daemon_metrics& metrics, const config::daemon_config& config,
         bool http_is_loopback, api_actions actions)
    : streams_(streams),
      metrics_(metrics),
      config_(config),
      http_is_loopback_(http_is_loopback),
      actions_(std::move(actions)) {}

http::response api::handle(const http::request& req) const {
  const bool get = req.method == bh::verb::get || req.method == bh::verb::head;
  const std::string& path = req.path;
  if (path == "/metrics") {
    if (!get) return text(405, "use GET\n");
    http::response r;
    r.content_type = "text/plain; version=0.0.4; charset=utf-8";
    r.body = metrics_.render();
    return r;
  }
  if (path == "/healthz") {
    if (!get) return text(405, "use GET\n");
    return text(200, "ok\n");
  }
  if (path == "/api/snapshot") {
    if (req.method != bh::verb::post) return json_error(405, "use POST");
    if (auto refused = refuse_post(req)) return *refused;
    if (!actions_.snapshot)
      return json_error(409, "snapshots are off: no data directory is configured");
    auto written = actions_.snapshot();
    if (!written) return json_error(500, "snapshot failed: " + written.err().message);
    return json_response(200, json{{"snapshot", written.value()}});
  }
  if (path == "/api/reload") {
    if (req.method != bh::verb::post) return json_error(405, "use POST");
    if (auto refused = refuse_post(req)) return *refused;
    if (!actions_.reload) return json_error(409, "this daemon cannot reload");
    const api_actions::reload_result r = actions_.reload();
    if (!r.ok) return json_response(422, json{{"reloaded", false}, {"errors", r.errors}});
    return json_response(200, json{{"reloaded", true},
                                   {"streams", r.streams},
                                   {"kept_old_settings", r.kept_old},
                                   {"notes", r.notes}});
  }
  if (path == "/api/streams" || path == "/api/streams/") {
    if (!get) return json_error(405, "use GET");
    return streams_list(req);
  }
  if (path.starts_with(streams_prefix) && path.size() > streams_prefix.size()) {
    std::string rest = path.substr(streams_prefix.size());
    if (req.method == bh::verb::post) {
      if (!rest.ends_with(rebaseline_suffix) || rest.size() == rebaseline_suffix.size())
        return json_error(404, "POST goes to /api/streams/{stream}/rebaseline");
      if (auto refused = refuse_post(req)) return *refused;
      return rebaseline(rest.substr(0, rest.size() - rebaseline_suffix.size()));
    }
    if (!get) return json_error(405, "use GET, or POST to /api/streams/{stream}/rebaseline");
    return stream_detail(rest);
  }
  return text(404, "not found; try /metrics, /healthz or /api/streams\n");
}

std::optional<http::response> api::refuse_post(const http::request& req) const {
  const std::string& token = config_.http.api_token;
  if (!token.empty()) {
    constexpr std::string_view bearer = "Bearer ";
    const std::string& auth = req.authorization;
    if (!auth.starts_with(bearer) ||
        !same_secret(std::string_view(auth).substr(bearer.size()), token)) {
      http::response r = json_error(401, "this request needs the API token as a bearer token");
      r.headers.emplace_back("WWW-Authenticate", "Bearer realm=\"plumbline\"");
      return r;
    }
    return std::nullopt;
  }
  if (!http_is_loopback_) {
    return json_error(403,
                      "requests that change state are refused: HTTP listens beyond loopback "
                      "and no http.api_token is configured");
  }
  return std::nullopt;
}

http::response api::streams_list(const http::request& req) const {
  bool bad = false;
  const std::size_t offset = query_number(req.query, "offset", bad).value_or(0);
  std::size_t limit = query_number(req.query, "limit", bad).value_or(default_list_limit);
  if (bad) return json_error(400, "offset and limit must be whole numbers");
  if (limit > max_list_limit) limit = max_list_limit;
  json list = json::array();
  std::size_t i = 0;
  const std::size_t total = streams_.size();
  streams_.for_each([&](const stream_entry& e) {
    if (i >= offset && i - offset < limit) {
      std::lock_guard lock(e.mu);
      list.push_back(summary_json(e));
    }
    ++i;
  });
  return json_response(
      200, json{{"total", total}, {"offset", offset}, {"limit", limit}, {"streams", list}});
}

http::response api::stream_detail(const std::string& name) const {
  stream_entry* e = streams_.find(name);
  if (e == nullptr) return json_error(404, "no stream of that name");
  std::lock_guard lock(e->mu);
  return json_response(200, detail_json(*e));
}

http::response api::rebaseline(const std::string& name) const {
  stream_entry* e = streams_.find(name);
  if (e == nullptr) return json_error(404, "no stream of that name");
  bool cleared = false;
  {
    std::lock_guard lock(e->mu);
    cleared = e->monitor.rebaseline(unix_now()).has_value();
    e->since_trigger = 0;
    e->primed = false;
  }
  log::info("stream " + e->name + " rebaselined on request" +
            (cleared ? "; its alarm was cleared" : ""));
  return json_response(
      200, json{{"stream", e->name}, {"rebaselined", true}, {"alarm_cleared", cleared}});
}

}  // namespace plumbline
