// truth.cc: ground truth to and from JSON. See truth.h.
#include "simulator/truth.h"

#include <cerrno>
#include <cmath>
#include <cstring>
#include <filesystem>
#include <fstream>

#include "simulator/generate.h"

namespace plumbline::sim {

using nlohmann::json;

double truth::offset_of(double time) const {
  if (clock.empty()) return time - epoch;
  if (time <= clock.front().first) return clock.front().second;
  if (time >= clock.back().first) return clock.back().second;
  std::size_t lo = 0, hi = clock.size() - 1;  // clock[lo].first < time < clock[hi].first
  while (hi - lo > 1) {
    const std::size_t mid = lo + (hi - lo) / 2;
    if (clock[mid].first <= time)
      lo = mid;
    else
      hi = mid;
  }
  const auto [w0, s0] = clock[lo];
  const auto [w1, s1] = clock[hi];
  if (w1 <= w0) return s1;
  return s0 + (s1 - s0) * ((time - w0) / (w1 - w0));
}

void add_clock_point(truth& t, double wall, double offset) {
  if (t.clock.size() >= max_clock_points) {
    std::size_t j = 0;
    for (std::size_t i = 0; i < t.clock.size(); i += 2)
      t.clock[j++] = t.clock[i];
    t.clock.resize(j);
  }
  t.clock.emplace_back(wall, offset);
}

truth make_truth(const scenario& s, uint64_t seed, double duration) {
  truth t;
  t.scenario_name = s.name;
  t.source = s.source;
  t.seed = seed;
  t.epoch = s.epoch;
  t.duration = duration;
  t.grace = s.grace;
  for (const sensor_spec& spec : s.sensors)
    t.streams.push_back({spec});
  for (const fault_spec& f : s.faults) {
    const sensor_spec& spec = s.sensors[f.sensor];
    truth_fault tf;
    tf.stream = spec.stream;
    tf.kind = f.kind;
    tf.start = f.start;
    tf.end = f.end;
    tf.size = f.kind == fault_kind::stuck && f.value ? *f.value : f.size;
    tf.first_sample = first_sample_at_or_after(spec, f.start);
    tf.end_sample = first_sample_at_or_after(spec, std::min(f.end, duration));
    if (tf.end_sample < tf.first_sample) tf.end_sample = tf.first_sample;
    t.faults.push_back(tf);
  }
  return t;
}

void clip_truth(truth& t, const scenario& s, double sent) {
  if (!(sent < t.duration)) return;
  truth c = make_truth(s, t.seed, sent < 0 ? 0 : sent);
  c.clock = std::move(t.clock);
  std::erase_if(c.faults, [&](const truth_fault& f) { return f.start >= c.duration; });
  t = std::move(c);
}

json truth_json(const truth& t) {
  json streams = json::array();
  for (const truth_stream& s : t.streams)
    streams.push_back(
        {{"stream", s.spec.stream}, {"unit", s.spec.unit}, {"rate_hz", s.spec.rate_hz}});
  json faults = json::array();
  for (const truth_fault& f : t.faults)
    faults.push_back({{"stream", f.stream},
                      {"kind", std::string(fault_name(f.kind))},
                      {"start", t.epoch + f.start},
                      {"end", t.epoch + f.end},
                      {"start_offset", f.start},
                      {"end_offset", f.end},
                      {"size", f.size},
                      {"first_sample", f.first_sample},
                      {"end_sample", f.end_sample}});
  json j{{"format", "plumbline-sim truth"},
         {"version", 1},
         {"scenario", t.scenario_name},
         {"source", t.source},
         {"seed", t.seed},
         {"epoch", t.epoch},
         {"duration_seconds", t.duration},
         {"grace_seconds", t.grace},
         {"streams", streams},
         {"faults", faults}};
  if (!t.clock.empty()) {
    json c = json::array();
    for (const auto& [w, s] : t.clock)
      c.push_back({w, s});
    j["clock"] = c;
  }
  return j;
}

expected<truth> parse_truth(const json& j, const std::string& source) {
  auto bad = [&](const std::string& why) { return make_error(source + ": " + why); };
  try {
    if (!j.is_object() || j.value("format", "") != "plumbline-sim truth")
      return bad("not a plumbline-sim truth file (no \"format\": \"plumbline-sim truth\")");
    if (j.at("version").get<int>() != 1) return bad("unsupported truth version");
    truth t;
    t.scenario_name = j.value("scenario", "");
    t.source = j.value("source", "");
    t.seed = j.at("seed").get<uint64_t>();
    t.epoch = j.at("epoch").get<double>();
    t.duration = j.at("duration_seconds").get<double>();
    t.grace = j.at("grace_seconds").get<double>();
    if (!(t.duration > 0) || !(t.grace >= 0)) return bad("bad duration_seconds or grace_seconds");
    for (const json& s : j.at("streams")) {
      truth_stream ts;
      ts.spec.stream = s.at("stream").get<std::string>();
      ts.spec.unit = s.value("unit", "");
      ts.spec.rate_hz = s.at("rate_hz").get<double>();
      if (!(ts.spec.rate_hz > 0)) return bad("stream " + ts.spec.stream + ": bad rate_hz");
      t.streams.push_back(std::move(ts));
    }
    for (const json& f : j.at("faults")) {
      truth_fault tf;
      tf.stream = f.at("stream").get<std::string>();
      const std::string kind = f.at("kind").get<std::string>();
      bool found = false;
      for (fault_kind k :
           {fault_kind::step, fault_kind::ramp, fault_kind::spread, fault_kind::shape,
            fault_kind::stuck, fault_kind::spikes, fault_kind::dropout})
        if (fault_name(k) == kind) {
          tf.kind = k;
          found = true;
        }
      if (!found) return bad("unknown fault kind \"" + kind + "\"");
      tf.start = f.at("start_offset").get<double>();
      tf.end = f.at("end_offset").get<double>();
      tf.size = f.value("size", 0.0);
      tf.first_sample = f.value("first_sample", uint64_t{0});
      tf.end_sample = f.value("end_sample", uint64_t{0});
      if (!(tf.end > tf.start)) return bad("fault on " + tf.stream + " ends before it starts");
      bool known = false;
      for (const truth_stream& s : t.streams)
        known = known || s.spec.stream == tf.stream;
      if (!known) return bad("fault on " + tf.stream + ", which is not among the streams");
      t.faults.push_back(std::move(tf));
    }
    if (j.contains("clock")) {
      for (const json& p : j.at("clock")) {
        if (t.clock.size() >= max_clock_points) return bad("clock has too many points");
        t.clock.emplace_back(p.at(0).get<double>(), p.at(1).get<double>());
      }
    }
    return t;
  } catch (const json::exception& e) {
    return bad(std::string("bad truth file: ") + e.what());
  }
}

expected<truth> read_truth(const std::string& path) {
  std::error_code ec;
  std::string file = path;
  if (std::filesystem::is_directory(path, ec))
    file = (std::filesystem::path(path) / "truth.json").string();
  const auto size = std::filesystem::file_size(file, ec);
  if (ec) return make_error(file + ": cannot read: " + ec.message());
  if (size > max_truth_bytes) return make_error(file + ": too large");
  std::ifstream in(file, std::ios::binary);
  if (!in) return make_error(file + ": cannot read: " + std::strerror(errno));
  json j;
  try {
    j = json::parse(in);
  } catch (const json::exception& e) {
    return make_error(file + ": not valid JSON: " + e.what());
  }
  return parse_truth(j, file);
}

expected<bool> write_truth(const truth& t, const std::string& path) {
  const std::string tmp = path + ".tmp";
  {
    std::ofstream out(tmp, std::ios::binary | std::ios::trunc);
    if (!out) return make_error(tmp + ": cannot write: " + std::strerror(errno));
    out << truth_json(t).dump(2) << "\n";
    if (!out) return make_error(tmp + ": cannot write: " + std::strerror(errno));
  }
  std::error_code ec;
  std::filesystem::rename(tmp, path, ec);
  if (ec) return make_error(path + ": cannot write: " + ec.message());
  return true;
}

}  // namespace plumbline::sim
