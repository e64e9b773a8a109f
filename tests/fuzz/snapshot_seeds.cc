// snapshot_seeds.cc: writes a small seed corpus for snapshot_fuzz.
//
//   snapshot_seeds DIR
//
// Writes valid snapshot images (each twice: with mode byte 0 and mode byte 1,
// see snapshot_fuzz.cc) of a few invented Larkspur streams that cover the
// codec's cases: no stream at all; a univariate baseline stream with a
// wrapped alarm history; a lagged stream of dimension 3; a file-policy
// stream.
// The images come from the same encoder the daemon uses, so the corpus
// follows the format as it is.
#include <cstdio>
#include <fstream>
#include <string>
#include <vector>

#include "core/state_codec.h"
#include "daemon/snapshot_format.h"

namespace {

namespace snap = plumbline::snapshot;
namespace codec = plumbline::state_codec;
using plumbline::monitor_settings;
using plumbline::reference_policy;
using plumbline::stream_monitor;

// A recorded result with the given p-value, as an evaluation would give.
void record(stream_monitor& m, double p, double time) {
  plumbline::evaluation_input in;
  m.capture(in);
  plumbline::evaluation_result r;
  r.samples_total = in.samples_total;
  r.generation = in.generation;
  plumbline::test_outcome t;
  t.ok = true;
  t.result.p_value = p;
  r.tests.push_back(t);
  m.record(r, time);
}

std::string stream_section(const std::string& name, const stream_monitor& m) {
  snap::stream_head head{name, "larkspur_demo", static_cast<uint32_t>(m.dimension())};
  snap::stream_fields f;
  f.since_trigger = 3;
  f.primed = true;
  f.last_sample_time = 1764633600.5;
  f.evaluations = m.evaluations_total();
  std::string out;
  snap::write_stream(out, head, f);
  codec::writer w(out);
  codec::encode(w, m);
  return out;
}

std::string image(const std::vector<std::pair<std::string, std::string>>& streams) {
  std::vector<std::pair<snap::section_kind, std::string>> sections;
  std::string daemon;
  codec::writer w(daemon);
  w.u64(1);
  w.u64(streams.size());
  sections.emplace_back(snap::section_kind::daemon, daemon);
  for (const auto& s : streams)
    sections.emplace_back(snap::section_kind::stream, s.second);
  return snap::frame(42, 1764633600.0, sections);
}

}  // namespace

int main(int argc, char** argv) {
  if (argc != 2) {
    std::fprintf(stderr, "usage: snapshot_seeds DIR\n");
    return 2;
  }
  const std::string dir = argv[1];
  std::vector<std::string> images;
  images.push_back(image({}));

  monitor_settings s;
  s.reference_size = 6;
  s.recent_size = 4;
  s.alarm.raise_after = 1;
  s.alarm.clear_after = 1;
  s.alarm.history_limit = 2;
  stream_monitor a(s, 1);
  for (int i = 0; i < 14; ++i) {
    const double v = 500.0 + 0.25 * i;
    a.push(std::span<const double>(&v, 1));
    if (i >= 9) record(a, i % 2 ? 0.001 : 0.5, 1764633600.0 + i);
  }
  images.push_back(
      image({{"larkspur/line_b/fill_4", stream_section("larkspur/line_b/fill_4", a)}}));

  monitor_settings l = s;
  l.policy = reference_policy::lagged;
  stream_monitor b(l, 3);
  for (int i = 0; i < 9; ++i) {
    const double row[3] = {1.5 + i, -2.0 * i, 0.125};
    b.push(std::span<const double>(row, 3));
  }
  monitor_settings f = s;
  f.policy = reference_policy::file;
  stream_monitor c(f, 1);
  const double ref[3] = {71.9, 72.0, 72.1};
  c.set_reference(std::span<const double>(ref, 3));
  const double v = 72.4;
  c.push(std::span<const double>(&v, 1));
  images.push_back(image({{"larkspur/line_d/capper_3",
                           stream_section("larkspur/line_d/capper_3", b)},
                          {"larkspur/pasteuriser/hold_temp",
                           stream_section("larkspur/pasteuriser/hold_temp", c)}}));

  int n = 0;
  for (const std::string& img : images) {
    for (char mode : {'\0', '\1'}) {
      const std::string path = dir + "/seed-" + std::to_string(++n);
      std::ofstream out(path, std::ios::binary);
      out.put(mode);
      out << img;
      if (!out) {
        std::fprintf(stderr, "snapshot_seeds: cannot write %s\n", path.c_str());
        return 1;
      }
    }
  }
  std::printf("snapshot_seeds: wrote %d seed inputs to %s\n", n, dir.c_str());
  return 0;
}
