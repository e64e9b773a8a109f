// score.cc: detections, misses and false alarms. See score.h for the rules.
#include "simulator/score.h"

#include <algorithm>
#include <cstdio>

#include "simulator/generate.h"

namespace plumbline::sim {

using nlohmann::json;

expected<stream_alarms> parse_stream_alarms(const json& detail) {
  try {
    stream_alarms a;
    const json& alarm = detail.at("alarm");
    for (const json& e : alarm.at("history"))
      if (e.at("kind").get<std::string>() == "raised")
        a.raises.push_back(e.at("time").get<double>());
    a.dropped = alarm.value("history_dropped", uint64_t{0});
    std::sort(a.raises.begin(), a.raises.end());
    return a;
  } catch (const json::exception& e) {
    return make_error(std::string("no alarm history (alarm.history) in the stream's answer: ") +
                      e.what());
  }
}

expected<alarm_histories> parse_alarms(const json& j, const std::string& source) {
  alarm_histories out;
  auto add = [&](const std::string& name, const json& detail) -> std::optional<error> {
    auto a = parse_stream_alarms(detail);
    if (!a.ok()) return make_error(source + ": stream " + name + ": " + a.err().message);
    out[name] = std::move(a.value());
    return std::nullopt;
  };
  if (j.is_object()) {
    for (auto it = j.begin(); it != j.end(); ++it)
      if (auto e = add(it.key(), it.value())) return *e;
    return out;
  }
  if (j.is_array()) {
    for (const json& d : j) {
      if (!d.is_object() || !d.contains("name") || !d["name"].is_string())
        return make_error(source + ": an array entry without a \"name\"");
      if (auto e = add(d["name"].get<std::string>(), d)) return *e;
    }
    return out;
  }
  return make_error(source + ": expected an object of streams or an array of stream answers");
}

score_report score(const truth& t, const alarm_histories& alarms, double grace) {
  score_report r;
  r.grace = grace;
  std::size_t unshown = 0;
  auto warn = [&](std::string w) {
    if (r.warnings.size() < max_warnings)
      r.warnings.push_back(std::move(w));
    else
      ++unshown;
  };
  for (const truth_stream& s : t.streams) {
    const std::string& name = s.spec.stream;
    std::vector<const truth_fault*> faults;
    for (const truth_fault& f : t.faults)
      if (f.stream == name) faults.push_back(&f);
    std::vector<double> raises;
    const auto it = alarms.find(name);
    if (it != alarms.end()) {
      if (!it->second.known) warn("the daemon does not know stream " + name);
      if (it->second.dropped > 0)
        warn("stream " + name + ": the daemon dropped " + std::to_string(it->second.dropped) +
             " old alarm events; this score misses them");
      for (double time : it->second.raises)
        raises.push_back(t.offset_of(time));
      std::sort(raises.begin(), raises.end());
    } else {
      warn("no alarm history for stream " + name);
    }
    // Detections.
    for (const truth_fault* f : faults) {
      fault_result fr;
      fr.fault = *f;
      if (f->kind == fault_kind::dropout) {
        fr.scored = false;
      } else {
        for (double o : raises)
          if (o >= f->start && o <= f->end + grace) {
            fr.detected = true;
            fr.raised_offset = o;
            fr.delay_seconds = o - f->start;
            fr.delay_samples = samples_between(s.spec, f->start, o);
            break;
          }
      }
      r.faults.push_back(fr);
    }
    // False alarms and in-control time.
    stream_result sr;
    sr.stream = name;
    sr.raises = raises.size();
    for (double o : raises) {
      bool in_fault = false;
      for (const truth_fault* f : faults)
        in_fault = in_fault || (o >= f->start && o <= f->end + grace);
      if (!in_fault) ++sr.false_alarms;
    }
    std::vector<std::pair<double, double>> spans;
    for (const truth_fault* f : faults)
      spans.emplace_back(std::min(f->start, t.duration), std::min(f->end + grace, t.duration));
    std::sort(spans.begin(), spans.end());
    double covered = 0, cursor = 0;
    uint64_t covered_samples = 0;
    for (auto [a, b] : spans) {
      a = std::max(a, cursor);
      if (b <= a) continue;
      covered += b - a;
      covered_samples += samples_between(s.spec, a, b);
      cursor = b;
    }
    sr.in_control_seconds = t.duration - covered;
    sr.in_control_samples = samples_between(s.spec, 0, t.duration) - covered_samples;
    r.false_alarms += sr.false_alarms;
    r.in_control_stream_hours += sr.in_control_seconds / 3600;
    r.in_control_samples += sr.in_control_samples;
    r.streams.push_back(sr);
  }
  for (const auto& [name, a] : alarms) {
    bool listed = false;
    for (const truth_stream& s : t.streams)
      listed = listed || s.spec.stream == name;
    if (!listed && !a.raises.empty())
      warn("stream " + name + " has alarms but is not in the truth; ignored");
  }
  if (unshown > 0) r.warnings.push_back(std::to_string(unshown) + " more warnings not shown");
  return r;
}

json score_json(const score_report& r) {
  json faults = json::array();
  for (const fault_result& f : r.faults) {
    json j{{"stream", f.fault.stream},
           {"kind", std::string(fault_name(f.fault.kind))},
           {"start_offset", f.fault.start},
           {"end_offset", f.fault.end},
           {"size", f.fault.size}};
    if (!f.scored) {
      j["result"] = "not scored";
    } else if (f.detected) {
      j["result"] = "detected";
      j["raised_offset"] = f.raised_offset;
      j["delay_seconds"] = f.delay_seconds;
      j["delay_samples"] = f.delay_samples;
    } else {
      j["result"] = "missed";
    }
    faults.push_back(j);
  }
  json streams = json::array();
  for (const stream_result& s : r.streams)
    streams.push_back({{"stream", s.stream},
                       {"raises", s.raises},
                       {"false_alarms", s.false_alarms},
                       {"in_control_seconds", s.in_control_seconds},
                       {"in_control_samples", s.in_control_samples}});
  uint64_t detected = 0, missed = 0;
  for (const fault_result& f : r.faults) {
    if (f.scored && f.detected) ++detected;
    if (f.scored && !f.detected) ++missed;
  }
  return {{"grace_seconds", r.grace},
          {"faults", faults},
          {"detected", detected},
          {"missed", missed},
          {"false_alarms", r.false_alarms},
          {"in_control_stream_hours", r.in_control_stream_hours},
          {"in_control_samples", r.in_control_samples},
          {"false_alarms_per_stream_hour", r.false_alarms_per_stream_hour()},
          {"false_alarms_per_10000_samples", r.false_alarms_per_10000_samples()},
          {"streams", streams},
          {"warnings", r.warnings}};
}

std::string score_table(const score_report& r) {
  std::string out;
  char line[512];
  std::size_t w = 6;
  for (const fault_result& f : r.faults)
    w = std::max(w, f.fault.stream.size());
  std::snprintf(line, sizeof line, "%-*s  %-8s %10s %10s  %-10s %12s %10s\n", static_cast<int>(w),
                "stream", "fault", "start s", "end s", "result", "delay s", "samples");
  out += line;
  for (const fault_result& f : r.faults) {
    const char* result = !f.scored ? "not scored" : f.detected ? "detected" : "missed";
    char delay[32] = "-", samples[32] = "-";
    if (f.scored && f.detected) {
      std::snprintf(delay, sizeof delay, "%.1f", f.delay_seconds);
      std::snprintf(samples, sizeof samples, "%llu",
                    static_cast<unsigned long long>(f.delay_samples));
    }
    std::snprintf(line, sizeof line, "%-*s  %-8s %10.1f %10.1f  %-10s %12s %10s\n",
                  static_cast<int>(w), f.fault.stream.c_str(),
                  std::string(fault_name(f.fault.kind)).c_str(), f.fault.start, f.fault.end, result,
                  delay, samples);
    out += line;
  }
  if (r.faults.empty()) out += "(no faults in the truth)\n";
  std::snprintf(line, sizeof line,
                "\nfalse alarms: %llu in %.3f in-control stream-hours (%.4g per stream-hour), "
                "%llu in-control samples (%.4g per 10,000); grace %.1f s\n",
                static_cast<unsigned long long>(r.false_alarms), r.in_control_stream_hours,
                r.false_alarms_per_stream_hour(),
                static_cast<unsigned long long>(r.in_control_samples),
                r.false_alarms_per_10000_samples(), r.grace);
  out += line;
  for (const stream_result& s : r.streams)
    if (s.false_alarms > 0) {
      std::snprintf(line, sizeof line, "  %s: %llu false alarm%s\n", s.stream.c_str(),
                    static_cast<unsigned long long>(s.false_alarms),
                    s.false_alarms == 1 ? "" : "s");
      out += line;
    }
  for (const std::string& wmsg : r.warnings)
    out += "warning: " + wmsg + "\n";
  return out;
}

}  // namespace plumbline::sim
