// sim_score_test.cc: `score` on hand-made truths and alarm histories.
//
// Every expected number below is worked out by hand from the rules in
// simulator/score.h (the truth and histories are small enough to count).
#include <catch2/catch.hpp>
#include <nlohmann/json.hpp>

#include "simulator/scenario.h"
#include "simulator/score.h"
#include "simulator/truth.h"

namespace {

using namespace plumbline::sim;
using nlohmann::json;

const double epoch = 1'000'000;

truth hand_made() {
  truth t;
  t.epoch = epoch;
  t.duration = 1000;
  t.grace = 30;
  for (auto [name, rate] : {std::pair{"a", 2.0}, {"b", 1.0}, {"c", 1.0}}) {
    truth_stream s;
    s.spec.stream = name;
    s.spec.rate_hz = rate;
    t.streams.push_back(s);
  }
  t.faults.push_back({"a", fault_kind::step, 100, 200, 1.5, 200, 400});
  t.faults.push_back({"b", fault_kind::ramp, 300, 400, 2.0, 300, 400});
  t.faults.push_back({"c", fault_kind::stuck, 500, 600, 0.0, 500, 600});
  return t;
}

// A GET /api/streams/{stream} answer with the given raise times (offsets),
// each followed by a clear 5 s later.
json answer(const std::string& name, std::vector<double> raises) {
  json history = json::array();
  for (double o : raises) {
    history.push_back(
        {{"kind", "raised"}, {"time", epoch + o}, {"cause", "rule"}, {"p_value", 0.001}});
    history.push_back({{"kind", "cleared"}, {"time", epoch + o + 5}, {"cause", "rule"}});
  }
  return {{"name", name},
          {"alarm", {{"active", false}, {"history", history}, {"history_dropped", 0}}}};
}

}  // namespace

TEST_CASE("score finds a hit, a late hit, a miss and false alarms", "[unit][sim]") {
  const truth t = hand_made();
  // a: a hit 20.3 s after its start, and a second raise inside the same
  //    fault (neither a detection nor a false alarm);
  // b: a late hit, 15 s after its end (grace 30 s);
  // c: no raise during its fault (a miss), one raise before it and one 40 s
  //    after its end (both false alarms).
  const json j =
      json::array({answer("a", {120.3, 150}), answer("b", {415}), answer("c", {50, 640})});
  auto alarms = parse_alarms(j, "alarms.json");
  REQUIRE(alarms.ok());
  const score_report r = score(t, alarms.value(), t.grace);
  REQUIRE(r.faults.size() == 3);
  // Hit: samples of a (2 Hz) in [100, 120.3): k = 200 .. 240, 41 samples.
  CHECK(r.faults[0].detected);
  CHECK(r.faults[0].delay_seconds == Approx(20.3));
  CHECK(r.faults[0].delay_samples == 41);
  // Late hit: samples of b (1 Hz) in [300, 415): 115.
  CHECK(r.faults[1].detected);
  CHECK(r.faults[1].delay_seconds == Approx(115));
  CHECK(r.faults[1].delay_samples == 115);
  // Miss.
  CHECK_FALSE(r.faults[2].detected);
  // False alarms: c at 50 and at 640 (after 600 + 30).
  CHECK(r.false_alarms == 2);
  REQUIRE(r.streams.size() == 3);
  CHECK(r.streams[0].false_alarms == 0);
  CHECK(r.streams[2].false_alarms == 2);
  // In control: each stream 1000 s minus its fault's [start, end + 30):
  // 870 s, so 3 * 870 / 3600 = 0.725 stream-hours; samples 2000 - 260 for
  // a, 1000 - 130 for b and for c: 3480.
  CHECK(r.in_control_stream_hours == Approx(0.725));
  CHECK(r.in_control_samples == 3480);
  CHECK(r.false_alarms_per_stream_hour() == Approx(2 / 0.725));
  CHECK(r.false_alarms_per_10000_samples() == Approx(2e4 / 3480));
  const json out = score_json(r);
  CHECK(out["detected"] == 2);
  CHECK(out["missed"] == 1);
  CHECK(out["faults"][2]["result"] == "missed");
  CHECK(score_table(r).find("missed") != std::string::npos);
}

TEST_CASE("a raise past the grace period is a false alarm and the fault a miss", "[unit][sim]") {
  const truth t = hand_made();
  const json j = {{"a", answer("a", {230.5})}, {"b", answer("b", {})}, {"c", answer("c", {})}};
  auto alarms = parse_alarms(j, "alarms.json");
  REQUIRE(alarms.ok());
  score_report r = score(t, alarms.value(), 30);
  CHECK_FALSE(r.faults[0].detected);
  CHECK(r.false_alarms == 1);
  // With a longer grace the same raise detects the fault.
  r = score(t, alarms.value(), 31);
  CHECK(r.faults[0].detected);
  CHECK(r.false_alarms == 0);
}

TEST_CASE("the send clock maps daemon wall times to simulated offsets", "[unit][sim]") {
  truth t = hand_made();
  CHECK(t.offset_of(epoch + 12.5) == 12.5);  // no clock: simulated Unix time
  add_clock_point(t, 5000, 0);
  add_clock_point(t, 5010, 100);
  add_clock_point(t, 5020, 300);
  CHECK(t.offset_of(5005) == Approx(50));
  CHECK(t.offset_of(5015) == Approx(200));
  CHECK(t.offset_of(4000) == 0);
  CHECK(t.offset_of(9000) == 300);
}

TEST_CASE("the truth survives a round trip through JSON", "[unit][sim]") {
  truth t = hand_made();
  add_clock_point(t, 5000, 0);
  auto back = parse_truth(truth_json(t), "truth.json");
  REQUIRE(back.ok());
  CHECK(truth_json(back.value()) == truth_json(t));
  json broken = truth_json(t);
  broken["faults"][0]["stream"] = "nowhere";
  CHECK_FALSE(parse_truth(broken, "truth.json").ok());
}

TEST_CASE("a send stopped early leaves out the faults it never reached", "[unit][sim]") {
  // Two faults on one 1 Hz sensor, at 100-200 s and 500-600 s; the send is
  // stopped after 150 simulated seconds. Worked by hand from score.h.
  const auto loaded = plumbline::sim::load_scenario_string(R"(
[scenario]
plant = "wren"
duration_seconds = 1000.0
grace_seconds = 30.0
[[sensor]]
line = "line1"
station = "filler"
name = "fill_volume"
rate_hz = 1.0
[[fault]]
sensor = "wren.line1.filler.fill_volume"
kind = "step"
start_seconds = 100.0
end_seconds = 200.0
size = 1.0
[[fault]]
sensor = "wren.line1.filler.fill_volume"
kind = "step"
start_seconds = 500.0
end_seconds = 600.0
size = 1.0
)",
                                                           "early.toml");
  REQUIRE(loaded.value.has_value());
  const plumbline::sim::scenario& s = *loaded.value;
  truth t = make_truth(s, 1, s.duration);
  add_clock_point(t, 5000, 0);
  REQUIRE(t.faults.size() == 2);
  clip_truth(t, s, 150);
  CHECK(t.duration == 150);
  REQUIRE(t.faults.size() == 1);
  CHECK(t.faults[0].first_sample == 100);
  CHECK(t.faults[0].end_sample == 150);
  CHECK(t.clock.size() == 1);
  // No alarm: the fault that began is a miss, the one never sent is not
  // counted; in control are the 100 s before the first fault only.
  auto alarms = parse_alarms(json::array({answer("wren.line1.filler.fill_volume", {})}),
                             "alarms.json");
  REQUIRE(alarms.ok());
  const score_report r = score(t, alarms.value(), t.grace);
  REQUIRE(r.faults.size() == 1);
  CHECK_FALSE(r.faults[0].detected);
  CHECK(r.in_control_samples == 100);
  CHECK(r.in_control_stream_hours == Approx(100.0 / 3600));
  // A stop past the end changes nothing.
  truth whole = make_truth(s, 1, s.duration);
  clip_truth(whole, s, 2000);
  CHECK(whole.duration == 1000);
  CHECK(whole.faults.size() == 2);
}
