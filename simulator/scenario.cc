// scenario.cc: the scenario loader. See scenario.h.
//
// Design note. As in config/load.cc, toml++ parses the text into a tree that
// keeps every key's and value's position; the loader walks it once, reads each
// key through the table below (one entry per key: type, default, bounds,
// help, reader), and collects every error instead of stopping at the first.
// Cross-field rules run afterwards:
//   - a [[sensor]] needs line, station and name; the stream names are unique;
//   - a [[fault]] names an existing stream, and start < end;
//   - a fault's start lies inside the scenario (start < duration_seconds);
//   - the resolution is a decimal step (at most 9 decimals), so that values
//     can be printed exactly as integer multiples of it.
// Errors use the daemon's config_error ("FILE:LINE:COLUMN: message").
#include "simulator/scenario.h"

#include <algorithm>
#include <cerrno>
#include <cmath>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <functional>
#include <limits>
#include <map>
#include <set>

#include "config/option_spec.h"

namespace plumbline::sim {

std::string_view distribution_name(distribution_kind d) {
  switch (d) {
    case distribution_kind::normal:
      return "normal";
    case distribution_kind::lognormal:
      return "lognormal";
    case distribution_kind::student_t:
      return "student-t";
    case distribution_kind::uniform:
      return "uniform";
    case distribution_kind::mixture:
      return "mixture";
  }
  return "normal";
}

std::string_view fault_name(fault_kind k) {
  switch (k) {
    case fault_kind::step:
      return "step";
    case fault_kind::ramp:
      return "ramp";
    case fault_kind::spread:
      return "spread";
    case fault_kind::shape:
      return "shape";
    case fault_kind::stuck:
      return "stuck";
    case fault_kind::spikes:
      return "spikes";
    case fault_kind::dropout:
      return "dropout";
  }
  return "step";
}

namespace {

using config::source_position;
using config::detail::describe_value;
using config::detail::position_of;
using config::detail::toml_quote;

constexpr double inf = std::numeric_limits<double>::infinity();

struct sensor_draft {
  sensor_spec spec;
  std::string line, station, name;
  uint64_t count = 1;
  source_position at;  // the [[sensor]] header
  std::map<std::string, source_position, std::less<>> given;
  std::set<std::string, std::less<>> failed;  // keys whose value was rejected
};

struct fault_draft {
  fault_spec spec;
  std::string sensor;
  source_position at;
  std::map<std::string, source_position, std::less<>> given;
  std::set<std::string, std::less<>> failed;
};

struct draft {
  scenario s;
  sensor_draft* sensor = nullptr;
  fault_draft* fault = nullptr;
};

using reader = std::function<std::optional<std::string>(const toml::node&, draft&)>;

struct key_entry {
  scenario_key info;
  reader read;
};

std::string bounds_text(double lo, bool lo_open, double hi, bool hi_open) {
  auto num = [](double v) { return config::detail::toml_float(v); };
  if (hi == inf) return std::string(lo_open ? "greater than " : "at least ") + num(lo);
  if (lo_open)
    return "greater than " + num(lo) + (hi_open ? " and below " : " and at most ") + num(hi);
  return "from " + num(lo) + (hi_open ? " up to, not including, " : " to ") + num(hi);
}

// A number within bounds, or an error phrase.
std::optional<std::string> read_number(const toml::node& v, double lo, bool lo_open, double hi,
                                       bool hi_open, double& out) {
  double d;
  if (const auto* p = v.as_integer()) {
    d = static_cast<double>(p->get());
  } else if (const auto* f = v.as_floating_point()) {
    d = f->get();
  } else {
    return "must be a number (" + bounds_text(lo, lo_open, hi, hi_open) + "), got " +
           describe_value(v);
  }
  const bool ok = std::isfinite(d) && (lo_open ? d > lo : d >= lo) && (hi_open ? d < hi : d <= hi);
  if (!ok) return "must be " + bounds_text(lo, lo_open, hi, hi_open) + ", got " + describe_value(v);
  out = d;
  return std::nullopt;
}

std::optional<std::string> read_uint(const toml::node& v, uint64_t lo, uint64_t hi, uint64_t& out) {
  const std::string b = "from " + std::to_string(lo) + " to " + std::to_string(hi);
  const auto* p = v.as_integer();
  if (!p) return "must be an integer (" + b + "), got " + describe_value(v);
  if (p->get() < 0 || static_cast<uint64_t>(p->get()) < lo || static_cast<uint64_t>(p->get()) > hi)
    return "must be " + b + ", got " + describe_value(v);
  out = static_cast<uint64_t>(p->get());
  return std::nullopt;
}

bool part_char(char c) {
  return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || (c >= '0' && c <= '9') || c == '_' ||
         c == '-';
}

// A name part: 1 to 64 of letters, digits, '_' and '-' (the parts are joined
// with '.', so a part holds no '.').
std::optional<std::string> read_part(const toml::node& v, std::string& out) {
  const auto* p = v.as_string();
  if (!p) return "must be a string (letters, digits, '_', '-'), got " + describe_value(v);
  const std::string& s = p->get();
  if (s.empty() || s.size() > 64 || !std::all_of(s.begin(), s.end(), part_char))
    return "must be 1 to 64 letters, digits, '_' or '-', got " + describe_value(v);
  out = s;
  return std::nullopt;
}

std::optional<std::string> read_text(const toml::node& v, std::size_t max, std::string& out) {
  const auto* p = v.as_string();
  if (!p) return "must be a string, got " + describe_value(v);
  if (p->get().size() > max) return "must be at most " + std::to_string(max) + " bytes long";
  out = p->get();
  return std::nullopt;
}

template <typename E>
std::optional<std::string> read_enum(const toml::node& v,
                                     const std::vector<std::pair<std::string_view, E>>& names,
                                     E& out) {
  std::string list;
  for (const auto& [n, e] : names)
    list += (list.empty() ? "" : ", ") + std::string(n);
  const auto* p = v.as_string();
  if (p) {
    for (const auto& [n, e] : names)
      if (p->get() == n) {
        out = e;
        return std::nullopt;
      }
    return "must be one of " + list + ", got " + toml_quote(p->get().substr(0, 40));
  }
  return "must be a string (one of " + list + "), got " + describe_value(v);
}

const std::vector<std::pair<std::string_view, distribution_kind>> distributions = {
    {"normal", distribution_kind::normal},
    {"lognormal", distribution_kind::lognormal},
    {"student-t", distribution_kind::student_t},
    {"uniform", distribution_kind::uniform},
    {"mixture", distribution_kind::mixture}};

const std::vector<std::pair<std::string_view, fault_kind>> fault_kinds = {
    {"step", fault_kind::step},      {"ramp", fault_kind::ramp},   {"spread", fault_kind::spread},
    {"shape", fault_kind::shape},    {"stuck", fault_kind::stuck}, {"spikes", fault_kind::spikes},
    {"dropout", fault_kind::dropout}};

#define NUM(target, lo, lo_open, hi, hi_open) \
  [](const toml::node& v, draft& d) { return read_number(v, lo, lo_open, hi, hi_open, target); }

const std::vector<key_entry>& table() {
  static const std::vector<key_entry> t = [] {
    std::vector<key_entry> k;
    // [scenario]
    k.push_back({{"scenario", "name", "string", "\"\"", "at most 200 bytes",
                  "a title for people; not sent anywhere"},
                 [](const toml::node& v, draft& d) { return read_text(v, 200, d.s.name); }});
    k.push_back(
        {{"scenario", "plant", "string", "\"\"", "empty, or 1 to 64 letters, digits, '_', '-'",
          "first part of every stream name (omitted when empty)"},
         [](const toml::node& v, draft& d) -> std::optional<std::string> {
           if (const auto* p = v.as_string(); p && p->get().empty()) {
             d.s.plant.clear();
             return std::nullopt;
           }
           return read_part(v, d.s.plant);
         }});
    k.push_back({{"scenario", "seed", "integer", "1", "0 .. 2^63-1",
                  "seed of every generator (--seed overrides it)"},
                 [](const toml::node& v, draft& d) {
                   return read_uint(v, 0, std::numeric_limits<int64_t>::max(), d.s.seed);
                 }});
    k.push_back({{"scenario", "epoch", "float", "1767225600.0", "0 .. 253402300800",
                  "Unix time of the first sample (default 2026-01-01T00:00:00Z; --epoch "
                  "overrides it)"},
                 NUM(d.s.epoch, 0.0, false, 253402300800.0, true)});
    k.push_back({{"scenario", "duration_seconds", "float", "600.0", "greater than 0, to 31622400",
                  "simulated seconds (--duration overrides it)"},
                 NUM(d.s.duration, 0.0, true, 31622400.0, false)});
    k.push_back({{"scenario", "grace_seconds", "float", "60.0", "0 .. 86400",
                  "how long after a fault's end a first raise still counts as its detection"},
                 NUM(d.s.grace, 0.0, false, 86400.0, false)});
    // [[sensor]]
    k.push_back({{"sensor", "line", "string", "(required)", "1 to 64 letters, digits, '_', '-'",
                  "the line: second part of the stream name"},
                 [](const toml::node& v, draft& d) { return read_part(v, d.sensor->line); }});
    k.push_back({{"sensor", "station", "string", "(required)", "1 to 64 letters, digits, '_', '-'",
                  "the station: third part"},
                 [](const toml::node& v, draft& d) { return read_part(v, d.sensor->station); }});
    k.push_back({{"sensor", "name", "string", "(required)", "1 to 64 letters, digits, '_', '-'",
                  "the sensor: last part"},
                 [](const toml::node& v, draft& d) { return read_part(v, d.sensor->name); }});
    k.push_back({{"sensor", "count", "integer", "1", "1 .. 100000",
                  "copies of this sensor, named NAME_0001, NAME_0002, ... (zero-padded to the "
                  "width of count) when above 1"},
                 [](const toml::node& v, draft& d) {
                   return read_uint(v, 1, max_count, d.sensor->count);
                 }});
    k.push_back(
        {{"sensor", "unit", "string", "\"\"", "at most 32 bytes",
          "unit of the values, for people (CSV header, truth file)"},
         [](const toml::node& v, draft& d) { return read_text(v, 32, d.sensor->spec.unit); }});
    k.push_back(
        {{"sensor", "nominal", "float", "0.0", "-1e12 .. 1e12", "mean of the in-control values"},
         NUM(d.sensor->spec.nominal, -1e12, false, 1e12, false)});
    k.push_back({{"sensor", "spread", "float", "1.0", "greater than 0, to 1e12",
                  "standard deviation of the in-control values"},
                 NUM(d.sensor->spec.spread, 0.0, true, 1e12, false)});
    k.push_back({{"sensor", "distribution", "string", "\"normal\"",
                  "normal, lognormal, student-t, uniform, mixture",
                  "shape of the in-control noise (always scaled to nominal and spread)"},
                 [](const toml::node& v, draft& d) {
                   return read_enum(v, distributions, d.sensor->spec.distribution);
                 }});
    k.push_back({{"sensor", "sigma_log", "float", "0.5", "greater than 0, to 3",
                  "lognormal: standard deviation of the logarithm (sets the skew)"},
                 NUM(d.sensor->spec.sigma_log, 0.0, true, 3.0, false)});
    k.push_back({{"sensor", "df", "float", "5.0", "greater than 2, to 1000",
                  "student-t: degrees of freedom (heavier tails when smaller)"},
                 NUM(d.sensor->spec.df, 2.0, true, 1000.0, false)});
    k.push_back({{"sensor", "mixture_weight", "float", "0.1", "greater than 0 and below 1",
                  "mixture: probability of the second component"},
                 NUM(d.sensor->spec.mixture_weight, 0.0, true, 1.0, true)});
    k.push_back({{"sensor", "mixture_offset", "float", "3.0", "-100 .. 100",
                  "mixture: the second component's mean, in sds of the first, from the first's"},
                 NUM(d.sensor->spec.mixture_offset, -100.0, false, 100.0, false)});
    k.push_back({{"sensor", "mixture_ratio", "float", "1.0", "greater than 0, to 100",
                  "mixture: the second component's sd over the first's"},
                 NUM(d.sensor->spec.mixture_ratio, 0.0, true, 100.0, false)});
    k.push_back({{"sensor", "ar1", "float", "0.0", "greater than -1 and below 1",
                  "lag-1 autoregressive coefficient (0: independent samples)"},
                 NUM(d.sensor->spec.ar1, -1.0, true, 1.0, true)});
    k.push_back({{"sensor", "rate_hz", "float", "1.0", "0.001 .. 10000",
                  "samples per second of simulated time"},
                 NUM(d.sensor->spec.rate_hz, 0.001, false, 10000.0, false)});
    k.push_back({{"sensor", "resolution", "float", "0.0", "0, or 1e-9 .. 1e9, a decimal step",
                  "instrument resolution: every value is an integer multiple of it (0: no "
                  "rounding)"},
                 NUM(d.sensor->spec.resolution, 0.0, false, 1e9, false)});
    // [[fault]]
    k.push_back({{"fault", "sensor", "string", "(required)", "a stream of this scenario",
                  "the full stream name, as sent to the daemon"},
                 [](const toml::node& v, draft& d) { return read_text(v, 200, d.fault->sensor); }});
    k.push_back({{"fault", "kind", "string", "(required)",
                  "step, ramp, spread, shape, stuck, spikes, dropout", "what goes wrong"},
                 [](const toml::node& v, draft& d) {
                   return read_enum(v, fault_kinds, d.fault->spec.kind);
                 }});
    k.push_back({{"fault", "start_seconds", "float", "(required)", "0 .. 31622400",
                  "simulated seconds after the epoch; the fault is active on [start, end)"},
                 NUM(d.fault->spec.start, 0.0, false, 31622400.0, false)});
    k.push_back({{"fault", "end_seconds", "float", "(required)", "0 .. 31622400, after start",
                  "simulated seconds after the epoch"},
                 NUM(d.fault->spec.end, 0.0, false, 31622400.0, false)});
    k.push_back({{"fault", "size", "float", "0.0", "-1e12 .. 1e12 (spread: greater than 0)",
                  "step/ramp/shape/spikes: an amount in the sensor's unit; spread: the factor on "
                  "the deviation from nominal"},
                 NUM(d.fault->spec.size, -1e12, false, 1e12, false)});
    k.push_back({{"fault", "probability", "float", "0.01", "greater than 0, to 1",
                  "shape and spikes: probability per sample"},
                 NUM(d.fault->spec.probability, 0.0, true, 1.0, false)});
    k.push_back({{"fault", "value", "float", "(unset)", "-1e12 .. 1e12",
                  "stuck: the constant reading (unset: the reading at the fault's start)"},
                 [](const toml::node& v, draft& d) -> std::optional<std::string> {
                   double x = 0;
                   auto e = read_number(v, -1e12, false, 1e12, false, x);
                   if (!e) d.fault->spec.value = x;
                   return e;
                 }});
    return k;
  }();
  return t;
}

#undef NUM

const key_entry* find_key(std::string_view section, std::string_view key) {
  for (const key_entry& e : table())
    if (e.info.section == section && e.info.key == key) return &e;
  return nullptr;
}

class collector {
 public:
  explicit collector(std::string file) : file_(std::move(file)) {}
  void add(source_position at, std::string message) {
    if (errors_.size() >= config::max_reported_errors) {
      ++dropped_;
      return;
    }
    errors_.push_back({file_, at.line, at.column, std::move(message)});
  }
  bool empty() const { return errors_.empty(); }
  std::vector<config::config_error> finish() {
    std::stable_sort(errors_.begin(), errors_.end(), [](const auto& a, const auto& b) {
      return a.line != b.line ? a.line < b.line : a.column < b.column;
    });
    if (dropped_ > 0)
      errors_.push_back({file_, 0, 0, std::to_string(dropped_) + " more errors not shown"});
    return std::move(errors_);
  }

 private:
  std::string file_;
  std::vector<config::config_error> errors_;
  std::size_t dropped_ = 0;
};

std::string quoted(std::string_view k) {
  if (k.size() <= 64 && std::all_of(k.begin(), k.end(), [](char c) {
        return static_cast<unsigned char>(c) >= 0x20 && c != 0x7F && c != '\'';
      }))
    return "'" + std::string(k) + "'";
  return toml_quote(k.size() > 64 ? std::string(k.substr(0, 61)) + "..." : std::string(k));
}

// Decimals of a resolution that is a decimal step (0.01, 0.5, 2): the d <= 9
// with resolution * 10^d an integer (to 1e-12 relative: a double's rounding
// of a decimal is far below that, a 10th decimal far above).
std::optional<std::pair<uint32_t, int64_t>> decimal_step(double r) {
  double scale = 1;
  for (uint32_t d = 0; d <= 9; ++d, scale *= 10) {
    const double m = r * scale;
    const double rounded = std::round(m);
    if (rounded >= 1 && std::fabs(m - rounded) <= 1e-12 * rounded)
      return std::pair{d, static_cast<int64_t>(rounded)};
  }
  return std::nullopt;
}

class loader {
 public:
  explicit loader(collector& errors) : errors_(errors) {}

  std::optional<scenario> run(const toml::table& root, std::string_view source) {
    d_.s.source = std::string(source);
    for (auto&& [k, v] : root) {
      const std::string_view name = k.str();
      const source_position at = position_of(k.source());
      if (name == "scenario") {
        const auto* t = v.as_table();
        if (!t) {
          errors_.add(at, "'scenario' must be a table ([scenario]), got " + describe_value(v));
          continue;
        }
        read_table("scenario", *t, "[scenario]", nullptr, nullptr);
      } else if (name == "sensor" || name == "fault") {
        const auto* arr = v.as_array();
        if (!arr || !arr->is_array_of_tables()) {
          errors_.add(at, "'" + std::string(name) + "' must be [[" + std::string(name) +
                              "]] tables, got " + describe_value(v));
          continue;
        }
        for (const toml::node& el : *arr) {
          const toml::table& t = *el.as_table();
          if (name == "sensor") {
            sensors_.emplace_back();
            sensors_.back().at = position_of(t.source());
            d_.sensor = &sensors_.back();
            read_table("sensor", t, "[[sensor]]", &sensors_.back().given, &sensors_.back().failed);
          } else {
            faults_.emplace_back();
            faults_.back().at = position_of(t.source());
            d_.fault = &faults_.back();
            read_table("fault", t, "[[fault]]", &faults_.back().given, &faults_.back().failed);
          }
        }
      } else {
        errors_.add(at, "unknown section or key " + quoted(name) +
                            " (a scenario has [scenario], [[sensor]] and [[fault]])");
      }
    }
    if (d_.s.epoch + d_.s.duration >= 253402300800.0) {
      const auto* t = root["scenario"].as_table();
      errors_.add(t ? position_of(t->source()) : source_position{1, 1},
                  "epoch + duration_seconds must be before the year 10000 (253402300800)");
    }
    build_sensors();
    build_faults();
    if (!errors_.empty()) return std::nullopt;
    return std::move(d_.s);
  }

 private:
  void read_table(std::string_view section, const toml::table& t, std::string_view header,
                  std::map<std::string, source_position, std::less<>>* given,
                  std::set<std::string, std::less<>>* failed) {
    for (auto&& [k, v] : t) {
      const key_entry* e = find_key(section, k.str());
      if (!e) {
        errors_.add(position_of(k.source()),
                    "unknown key " + quoted(k.str()) + " in " + std::string(header));
        continue;
      }
      if (auto problem = e->read(v, d_)) {
        errors_.add(position_of(v.source()), quoted(k.str()) + " " + *problem);
        if (failed) failed->insert(std::string(k.str()));
      }
      if (given) (*given)[std::string(k.str())] = position_of(v.source());
    }
  }

  void build_sensors() {
    std::set<std::string> names;
    std::size_t total = 0;
    for (sensor_draft& s : sensors_) {
      bool complete = true;
      for (std::string_view req : {"line", "station", "name"})
        if (!s.given.count(req)) {
          errors_.add(s.at, "[[sensor]] needs '" + std::string(req) + "'");
          complete = false;
        }
      if (s.spec.resolution != 0) {
        const auto it = s.given.find("resolution");
        const source_position at = it != s.given.end() ? it->second : s.at;
        if (s.spec.resolution < 1e-9) {
          errors_.add(at, "'resolution' must be 0 or at least 1e-9, got " +
                              config::detail::toml_float(s.spec.resolution));
          complete = false;
        } else if (auto step = decimal_step(s.spec.resolution)) {
          s.spec.resolution_decimals = step->first;
          s.spec.resolution_units = step->second;
          // Values are printed from integers value * 10^decimals: keep them
          // (for a million sds around nominal) well inside 2^53.
          const double reach =
              (std::fabs(s.spec.nominal) + 1e6 * s.spec.spread) * std::pow(10.0, step->first);
          if (reach > 9e15) {
            errors_.add(at,
                        "'resolution' is too fine for this nominal and spread (values would "
                        "exceed 2^53 steps)");
            complete = false;
          }
        } else {
          errors_.add(at,
                      "'resolution' must be a decimal step with at most 9 decimals (such as "
                      "0.01 or 0.5), got " +
                          config::detail::toml_float(s.spec.resolution));
          complete = false;
        }
      }
      if (!complete || !s.failed.empty()) continue;
      total += s.count;
      if (total > max_sensors) {
        errors_.add(s.at, "too many sensors: at most " + std::to_string(max_sensors) +
                              " in all (count included)");
        return;
      }
      const std::string base =
          (d_.s.plant.empty() ? "" : d_.s.plant + ".") + s.line + "." + s.station + "." + s.name;
      const std::size_t width = std::to_string(s.count).size();
      for (uint64_t i = 1; i <= s.count; ++i) {
        sensor_spec spec = s.spec;
        if (s.count == 1) {
          spec.stream = base;
        } else {
          std::string n = std::to_string(i);
          spec.stream = base + "_" + std::string(width - n.size(), '0') + n;
        }
        if (!names.insert(spec.stream).second) {
          errors_.add(s.at, "stream '" + spec.stream + "' is defined twice");
          break;
        }
        index_[spec.stream] = d_.s.sensors.size();
        d_.s.sensors.push_back(std::move(spec));
      }
    }
  }

  void build_faults() {
    if (faults_.size() > max_faults) {
      errors_.add(faults_[max_faults].at, "too many faults: at most " + std::to_string(max_faults));
      return;
    }
    for (fault_draft& f : faults_) {
      bool complete = true;
      for (std::string_view req : {"sensor", "kind", "start_seconds", "end_seconds"})
        if (!f.given.count(req)) {
          errors_.add(f.at, "[[fault]] needs '" + std::string(req) + "'");
          complete = false;
        }
      if (!complete || !f.failed.empty()) continue;
      const auto it = index_.find(f.sensor);
      if (it == index_.end()) {
        errors_.add(f.given["sensor"], "'sensor' names no stream of this scenario: " +
                                           toml_quote(f.sensor.substr(0, 200)));
        continue;
      }
      f.spec.sensor = it->second;
      if (f.spec.end <= f.spec.start) {
        errors_.add(f.given["end_seconds"], "'end_seconds' must be after 'start_seconds' (" +
                                                config::detail::toml_float(f.spec.start) +
                                                "), got " + config::detail::toml_float(f.spec.end));
        continue;
      }
      if (f.spec.start >= d_.s.duration) {
        errors_.add(f.given["start_seconds"],
                    "'start_seconds' must be before the scenario's end (duration_seconds = " +
                        config::detail::toml_float(d_.s.duration) + ")");
        continue;
      }
      if (f.spec.kind == fault_kind::spread && f.spec.size <= 0) {
        const auto g = f.given.find("size");
        errors_.add(g != f.given.end() ? g->second : f.at,
                    "'size' of a spread fault is a factor and must be greater than 0");
        continue;
      }
      for (std::string_view k : {"probability"})
        if (f.given.count(k) && f.spec.kind != fault_kind::shape &&
            f.spec.kind != fault_kind::spikes)
          errors_.add(f.given[std::string(k)],
                      "'probability' applies to shape and spikes faults only");
      if (f.given.count("value") && f.spec.kind != fault_kind::stuck)
        errors_.add(f.given["value"], "'value' applies to stuck faults only");
      d_.s.faults.push_back(f.spec);
    }
  }

  collector& errors_;
  draft d_;
  std::vector<sensor_draft> sensors_;  // pointers into it are taken one at a time
  std::vector<fault_draft> faults_;
  std::map<std::string, std::size_t> index_;
};

}  // namespace

const std::vector<scenario_key>& scenario_keys() {
  static const std::vector<scenario_key> keys = [] {
    std::vector<scenario_key> k;
    for (const key_entry& e : table())
      k.push_back(e.info);
    return k;
  }();
  return keys;
}

scenario_result load_scenario_string(std::string_view text, std::string_view source_name) {
  collector errors{std::string(source_name)};
  scenario_result result;
  if (text.size() > config::max_config_bytes) {
    errors.add({}, "too large (" + std::to_string(text.size()) + " bytes; at most " +
                       std::to_string(config::max_config_bytes) + ")");
    result.errors = errors.finish();
    return result;
  }
  toml::table root;
  try {
    root = toml::parse(text, source_name);
  } catch (const toml::parse_error& e) {
    source_position at = position_of(e.source());
    if (at.line == 0) at = {1, 1};
    errors.add(at, "invalid TOML: " + std::string(e.description()));
    result.errors = errors.finish();
    return result;
  }
  loader l(errors);
  result.value = l.run(root, source_name);
  result.errors = errors.finish();
  if (!result.errors.empty()) result.value.reset();
  return result;
}

scenario_result load_scenario_file(const std::string& path) {
  auto text = config::read_config_text(path);
  if (auto* e = std::get_if<config::config_error>(&text)) {
    scenario_result result;
    result.errors.push_back(std::move(*e));
    return result;
  }
  return load_scenario_string(std::get<std::string>(text), path);
}

}  // namespace plumbline::sim
