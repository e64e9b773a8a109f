// monitor_test.cc: the per-stream monitor of core/monitor.h.
//
// Sources of the expected values:
//   * routing and window contents: the policies' definitions in
//     core/monitor_settings.h and core/monitor.h, on push sequences 1, 2, 3,
//     ... whose expected windows are written out by hand;
//   * evaluations: the engines themselves, called directly with a generator
//     of the same seed, in the documented order (tests as listed, then the
//     interval). The monitor must add no randomness and no arithmetic of its
//     own, so every field must agree exactly. No value here depends on the
//     generator's internal stream;
//   * stream_seed: the published FNV-1a 64 test vectors (Fowler, Noll & Vo;
//     Noll's FNV test suite, also in draft-eastlake-fnv; from memory) and the
//     splitmix64 of core/rng.h, whose own reference test is in
//     tests/reference/rng_reference_test.cc.
// The demo stream names are of the invented Larkspur Dairy plant.
#include "core/monitor.h"

#include <Eigen/Core>
#include <catch2/catch.hpp>
#include <cmath>
#include <cstdint>
#include <limits>
#include <optional>
#include <set>
#include <span>
#include <string>
#include <utility>
#include <vector>

#include "core/alarm.h"
#include "core/bootstrap.h"
#include "core/monitor_settings.h"
#include "core/permutation.h"
#include "core/rng.h"
#include "core/statistic.h"
#include "support/generate.h"

namespace {

using plumbline::alarm_cause;
using plumbline::alarm_event_kind;
using plumbline::bootstrap_engine;
using plumbline::drift_quantity;
using plumbline::evaluation_input;
using plumbline::evaluation_result;
using plumbline::evaluation_scratch;
using plumbline::exact_mode;
using plumbline::interval_result;
using plumbline::monitor_settings;
using plumbline::permutation_engine;
using plumbline::permutation_result;
using plumbline::reference_policy;
using plumbline::rng;
using plumbline::stream_monitor;
using plumbline::test_kind;

monitor_settings small_settings(reference_policy policy, std::size_t reference_size,
                                std::size_t recent_size, uint64_t every = 0) {
  monitor_settings s;
  s.policy = policy;
  s.reference_size = reference_size;
  s.recent_size = recent_size;
  s.every_samples = every;
  return s;
}

void push_one(stream_monitor& m, double x) {
  REQUIRE(m.push(std::span<const double>(&x, 1)).ok());
}

void push_values(stream_monitor& m, const std::vector<double>& xs) {
  for (double x : xs)
    push_one(m, x);
}

std::vector<double> iota_values(int first, int last) {
  std::vector<double> v;
  for (int i = first; i <= last; ++i)
    v.push_back(i);
  return v;
}

struct windows {
  std::vector<double> reference, recent;
};

windows contents(const stream_monitor& m) {
  evaluation_input in;
  m.capture(in);
  return {in.reference, in.recent};
}

// Every field of two permutation results, exactly.
void check_same(const permutation_result& a, const permutation_result& b) {
  CHECK(a.test == b.test);
  CHECK(a.statistic == b.statistic);
  CHECK(a.p_value == b.p_value);
  CHECK(a.p_low == b.p_low);
  CHECK(a.p_high == b.p_high);
  CHECK(a.resamples == b.resamples);
  CHECK(a.exceedances == b.exceedances);
  CHECK(a.exact == b.exact);
  CHECK(a.stopped_early == b.stopped_early);
  CHECK(a.constant_data == b.constant_data);
  CHECK(a.n_reference == b.n_reference);
  CHECK(a.n_recent == b.n_recent);
  CHECK(a.block_length == b.block_length);
}

void check_same(const interval_result& a, const interval_result& b) {
  CHECK(a.quantity == b.quantity);
  CHECK(a.method_used == b.method_used);
  CHECK(a.note == b.note);
  CHECK(a.estimate == b.estimate);
  CHECK(a.lower == b.lower);
  CHECK(a.upper == b.upper);
  CHECK(a.standard_error == b.standard_error);
  CHECK(a.reference_value == b.reference_value);
  CHECK(a.recent_value == b.recent_value);
  CHECK(a.resamples == b.resamples);
  CHECK(a.block_length == b.block_length);
  CHECK(a.degenerate == b.degenerate);
  CHECK(a.bias_correction == b.bias_correction);
  CHECK(a.acceleration == b.acceleration);
  CHECK(a.n_reference == b.n_reference);
  CHECK(a.n_recent == b.n_recent);
}

void check_same(const evaluation_result& a, const evaluation_result& b) {
  REQUIRE(a.tests.size() == b.tests.size());
  for (std::size_t i = 0; i < a.tests.size(); ++i) {
    CHECK(a.tests[i].test == b.tests[i].test);
    CHECK(a.tests[i].ok == b.tests[i].ok);
    CHECK(a.tests[i].error == b.tests[i].error);
    check_same(a.tests[i].result, b.tests[i].result);
  }
  REQUIRE(a.interval.has_value() == b.interval.has_value());
  if (a.interval) check_same(*a.interval, *b.interval);
  CHECK(a.interval_error == b.interval_error);
  CHECK(a.error == b.error);
}

// A univariate stream of 200 in-control samples then 50 shifted by 0.8 sd,
// and a baseline monitor that has seen them all (reference 200, recent 50).
struct shifted_stream {
  std::vector<double> reference, recent;
  monitor_settings settings;
};

shifted_stream make_shifted(uint64_t data_seed) {
  rng g(data_seed);
  shifted_stream s;
  s.reference = plumbline::testing::normal_sample(g, 200, 10.0, 0.5);
  s.recent = plumbline::testing::normal_sample(g, 50, 10.4, 0.5);
  s.settings = small_settings(reference_policy::baseline, 200, 50, 50);
  s.settings.tests = {test_kind::ad, test_kind::ks, test_kind::welch};
  return s;
}

stream_monitor fed_monitor(const shifted_stream& s) {
  stream_monitor m(s.settings, 1);
  push_values(m, s.reference);
  push_values(m, s.recent);
  return m;
}

}  // namespace

TEST_CASE("A baseline monitor fills the reference with the first samples and then freezes it",
          "[core][monitor]") {
  stream_monitor m(small_settings(reference_policy::baseline, 5, 3), 1);
  push_values(m, iota_values(1, 4));
  CHECK(contents(m).reference == iota_values(1, 4));
  CHECK(contents(m).recent.empty());
  push_values(m, iota_values(5, 12));
  const windows w = contents(m);
  CHECK(w.reference == iota_values(1, 5));
  CHECK(w.recent == iota_values(10, 12));
  CHECK(m.reference_fill() == 5);
  CHECK(m.recent_fill() == 3);
  CHECK(m.reference_capacity() == 5);
  CHECK(m.recent_capacity() == 3);
  CHECK(m.samples_total() == 12);
}

TEST_CASE("A lagged monitor moves each sample leaving the recent window into the reference",
          "[core][monitor]") {
  stream_monitor m(small_settings(reference_policy::lagged, 4, 3), 1);
  push_values(m, iota_values(1, 3));
  CHECK(contents(m).reference.empty());
  CHECK(contents(m).recent == iota_values(1, 3));
  push_values(m, iota_values(4, 5));
  CHECK(contents(m).reference == iota_values(1, 2));
  CHECK(contents(m).recent == iota_values(3, 5));
  CHECK_FALSE(m.ready());
  push_values(m, iota_values(6, 7));
  CHECK(m.ready());
  push_values(m, iota_values(8, 10));
  const windows w = contents(m);
  CHECK(w.reference == iota_values(4, 7));
  CHECK(w.recent == iota_values(8, 10));
}

TEST_CASE(
    "A file-reference monitor keeps the reference fixed and sends every sample to the recent "
    "window",
    "[core][monitor]") {
  stream_monitor m(small_settings(reference_policy::file, 6, 3), 1);
  CHECK_FALSE(m.has_reference());
  const std::vector<double> file = {2.5, 3.5, 4.5, 5.5};
  REQUIRE(m.set_reference(file).ok());
  CHECK(m.has_reference());
  CHECK(m.reference_capacity() == 4);  // the file's count, at most reference_size
  push_values(m, iota_values(1, 2));
  CHECK_FALSE(m.ready());
  push_values(m, iota_values(3, 7));
  CHECK(m.ready());
  const windows w = contents(m);
  CHECK(w.reference == file);
  CHECK(w.recent == iota_values(5, 7));
}

TEST_CASE("Bad file references are errors and keep the monitor as it was", "[core][monitor]") {
  stream_monitor m(small_settings(reference_policy::file, 4, 3), 1);
  REQUIRE(m.set_reference(std::vector<double>{1, 2, 3}).ok());
  const uint64_t generation = m.generation();
  SECTION("more samples than reference_size") {
    const auto r = m.set_reference(iota_values(1, 5));
    REQUIRE_FALSE(r.ok());
    CHECK(r.err().message.find("more than reference_size 4") != std::string::npos);
  }
  SECTION("fewer than 2 samples") {
    const auto r = m.set_reference(std::vector<double>{1});
    REQUIRE_FALSE(r.ok());
    CHECK(r.err().message.find("at least 2") != std::string::npos);
  }
  SECTION("a NaN value") {
    const auto r =
        m.set_reference(std::vector<double>{1, std::numeric_limits<double>::quiet_NaN(), 3});
    REQUIRE_FALSE(r.ok());
    CHECK(r.err().message.find("reference sample 2") != std::string::npos);
  }
  CHECK(contents(m).reference == iota_values(1, 3));
  CHECK(m.generation() == generation);
}

TEST_CASE("A monitor refuses a file reference under the other policies", "[core][monitor]") {
  stream_monitor m(small_settings(reference_policy::lagged, 4, 3), 1);
  const auto r = m.set_reference(iota_values(1, 3));
  REQUIRE_FALSE(r.ok());
  CHECK(r.err().message.find("lagged") != std::string::npos);
}

TEST_CASE("A monitor rebaseline empties the windows as each policy says", "[core][monitor]") {
  SECTION("baseline collects a new reference from the next samples") {
    stream_monitor m(small_settings(reference_policy::baseline, 3, 2), 1);
    push_values(m, iota_values(1, 6));
    REQUIRE(m.ready());
    m.rebaseline(1767225600);
    CHECK(m.reference_fill() == 0);
    CHECK(m.recent_fill() == 0);
    CHECK_FALSE(m.ready());
    push_values(m, iota_values(11, 15));
    const windows w = contents(m);
    CHECK(w.reference == iota_values(11, 13));
    CHECK(w.recent == iota_values(14, 15));
    CHECK(m.samples_total() == 11);  // the total runs on
  }
  SECTION("lagged empties both windows") {
    stream_monitor m(small_settings(reference_policy::lagged, 3, 2), 1);
    push_values(m, iota_values(1, 6));
    m.rebaseline(1767225600);
    CHECK(m.reference_fill() == 0);
    CHECK(m.recent_fill() == 0);
    push_values(m, iota_values(11, 13));
    CHECK(contents(m).reference == std::vector<double>{11});
    CHECK(contents(m).recent == iota_values(12, 13));
  }
  SECTION("file keeps the file reference and empties the recent window") {
    stream_monitor m(small_settings(reference_policy::file, 3, 2), 1);
    REQUIRE(m.set_reference(std::vector<double>{7, 8, 9}).ok());
    push_values(m, iota_values(1, 2));
    m.rebaseline(1767225600);
    CHECK(contents(m).reference == std::vector<double>{7, 8, 9});
    CHECK(m.recent_fill() == 0);
  }
}

TEST_CASE("The monitor's ready and due_by_count follow the fill and every_samples",
          "[core][monitor]") {
  monitor_settings s = small_settings(reference_policy::baseline, 5, 3, 4);
  stream_monitor m(s, 1);
  push_values(m, iota_values(1, 7));
  CHECK_FALSE(m.ready());
  CHECK_FALSE(m.due_by_count());  // 7 new samples, but not ready
  push_one(m, 8);
  CHECK(m.ready());
  CHECK(m.due_by_count());
  CHECK(m.samples_since_evaluation() == 8);

  evaluation_input in;
  m.capture(in);
  push_values(m, {9, 10});  // arrive while the evaluation runs
  evaluation_scratch scratch;
  rng gen(7);
  const evaluation_result r = stream_monitor::evaluate(in, s, scratch, gen);
  m.record(r, 1767225600);
  CHECK(m.samples_since_evaluation() == 2);
  CHECK_FALSE(m.due_by_count());
  push_one(m, 11);
  CHECK_FALSE(m.due_by_count());
  push_one(m, 12);
  CHECK(m.due_by_count());
  CHECK(m.evaluations_total() == 1);

  s.every_samples = 0;
  stream_monitor never(s, 1);
  push_values(never, iota_values(1, 50));
  CHECK(never.ready());
  CHECK_FALSE(never.due_by_count());
}

TEST_CASE("A monitor rebaseline restarts the count towards the next evaluation",
          "[core][monitor]") {
  stream_monitor m(small_settings(reference_policy::lagged, 3, 2, 2), 1);
  push_values(m, iota_values(1, 6));
  REQUIRE(m.due_by_count());
  m.rebaseline(0);
  CHECK(m.samples_since_evaluation() == 0);
  CHECK(m.rebaselines_total() == 1);
  push_values(m, iota_values(1, 5));
  CHECK(m.due_by_count());
}

TEST_CASE("The monitor's push rejects a wrong-sized or non-finite sample and changes nothing else",
          "[core][monitor]") {
  stream_monitor m(small_settings(reference_policy::lagged, 3, 2), 1);
  push_values(m, iota_values(1, 4));
  const windows before = contents(m);
  const std::vector<double> two = {1, 2};
  const auto wrong = m.push(two);
  REQUIRE_FALSE(wrong.ok());
  CHECK(wrong.err().message == "sample has 2 values; this stream takes 1");
  const double inf = std::numeric_limits<double>::infinity();
  const auto bad = m.push(std::span<const double>(&inf, 1));
  REQUIRE_FALSE(bad.ok());
  CHECK(bad.err().message.find("NaN or infinite") != std::string::npos);
  CHECK(m.rejected_total() == 2);
  CHECK(m.samples_total() == 4);
  const windows after = contents(m);
  CHECK(after.reference == before.reference);
  CHECK(after.recent == before.recent);

  stream_monitor rows(small_settings(reference_policy::lagged, 3, 2), 3);
  const std::vector<double> nan_row = {1, std::numeric_limits<double>::quiet_NaN(), 3};
  const auto r = rows.push(nan_row);
  REQUIRE_FALSE(r.ok());
  CHECK(r.err().message == "value 2 of 3 is NaN or infinite");
  CHECK(rows.recent_fill() == 0);
}

TEST_CASE("A multivariate monitor keeps rows and routes them as a univariate one does",
          "[core][monitor]") {
  stream_monitor m(small_settings(reference_policy::lagged, 3, 2), 2);
  for (int i = 1; i <= 7; ++i) {
    const std::vector<double> row = {static_cast<double>(i), 10.0 * i};
    REQUIRE(m.push(row).ok());
  }
  evaluation_input in;
  m.capture(in);
  CHECK(in.dimension == 2);
  REQUIRE(in.reference_rows.rows() == 3);
  REQUIRE(in.reference_rows.cols() == 2);
  REQUIRE(in.recent_rows.rows() == 2);
  for (int i = 0; i < 3; ++i) {
    CHECK(in.reference_rows(i, 0) == 3 + i);
    CHECK(in.reference_rows(i, 1) == 10.0 * (3 + i));
  }
  CHECK(in.recent_rows(0, 0) == 6);
  CHECK(in.recent_rows(1, 1) == 70);
  const auto wrong = m.push(std::vector<double>{1});
  CHECK_FALSE(wrong.ok());
}

TEST_CASE("A multivariate monitor's file reference takes whole rows of its dimension",
          "[core][monitor]") {
  stream_monitor m(small_settings(reference_policy::file, 4, 2), 2);
  CHECK_FALSE(m.set_reference(std::vector<double>{1, 2, 3}).ok());  // not whole rows
  Eigen::MatrixXd three(3, 3);
  three.setZero();
  CHECK_FALSE(m.set_reference(three).ok());  // 3 values per row, stream takes 2
  Eigen::MatrixXd ref(3, 2);
  ref << 1, 2, 3, 4, 5, 6;
  REQUIRE(m.set_reference(ref).ok());
  evaluation_input in;
  m.capture(in);
  CHECK(in.reference_rows == ref);
  CHECK(m.reference_capacity() == 3);
}

TEST_CASE("The monitor's capture reuses the caller's buffers once they are warm",
          "[core][monitor]") {
  const shifted_stream s = make_shifted(11);
  stream_monitor m = fed_monitor(s);
  evaluation_input in;
  m.capture(in);
  const double* ref_data = in.reference.data();
  const double* rec_data = in.recent.data();
  push_one(m, 10.0);
  m.capture(in);
  CHECK(in.reference.data() == ref_data);
  CHECK(in.recent.data() == rec_data);
  CHECK(in.samples_total == 251);
}

TEST_CASE("A monitor evaluation equals the engines called directly with the same seed",
          "[core][monitor]") {
  // The engines' outputs are the reference: each has its own SciPy and
  // published-example checks in tests/reference.
  const shifted_stream s = make_shifted(20260301);
  stream_monitor m = fed_monitor(s);
  REQUIRE(m.ready());
  evaluation_input in;
  m.capture(in);
  REQUIRE(in.reference == s.reference);
  REQUIRE(in.recent == s.recent);
  const uint64_t seed = plumbline::stream_seed(42, "larkspur/filler-2/fill-weight");
  evaluation_scratch scratch;
  rng gen(seed);
  const evaluation_result r = stream_monitor::evaluate(in, s.settings, scratch, gen);

  rng direct_gen(seed);
  permutation_engine pe;
  bootstrap_engine be;
  REQUIRE(r.tests.size() == 3);
  for (std::size_t i = 0; i < 3; ++i) {
    plumbline::permutation_options o = s.settings.permutation;
    o.test = s.settings.tests[i];
    const auto direct = pe.run(s.reference, s.recent, o, direct_gen);
    REQUIRE(direct.ok());
    CHECK(r.tests[i].test == s.settings.tests[i]);
    CHECK(r.tests[i].name() == plumbline::test_name(s.settings.tests[i]));
    REQUIRE(r.tests[i].ok);
    check_same(r.tests[i].result, direct.value());
  }
  const auto direct_interval = be.run(s.reference, s.recent, *s.settings.interval, direct_gen);
  REQUIRE(direct_interval.ok());
  REQUIRE(r.interval_requested);
  REQUIRE(r.interval.has_value());
  check_same(*r.interval, direct_interval.value());
  // Both generators are now at the same place in the stream.
  CHECK(gen.state() == direct_gen.state());
  CHECK(r.error.empty());
  CHECK(r.n_reference == 200);
  CHECK(r.n_recent == 50);

  // record() drives the alarm with the first test's p and the interval.
  const auto alarm_interval = r.alarm_interval();
  REQUIRE(alarm_interval);
  CHECK(alarm_interval->lower == direct_interval->lower);
  CHECK(alarm_interval->null_value == 0);
  m.record(r, 1767225600);
  REQUIRE(m.last_result() != nullptr);
  check_same(*m.last_result(), r);
  const bool signal = r.tests[0].result.p_value < s.settings.alarm.alpha;
  CHECK(m.alarm().consecutive_signals() == (signal ? 1u : 0u));
  CHECK(m.alarm().evaluations_total() == 1);
}

TEST_CASE(
    "The monitor's evaluations are bit-identical for equal seeds, with fresh or reused engines",
    "[core][monitor]") {
  const shifted_stream s = make_shifted(5);
  const stream_monitor m = fed_monitor(s);
  evaluation_input in;
  m.capture(in);
  evaluation_scratch reused;
  rng warmup(99);
  stream_monitor::evaluate(in, s.settings, reused, warmup);  // warm the buffers
  rng a(1234), b(1234);
  evaluation_scratch fresh;
  const evaluation_result ra = stream_monitor::evaluate(in, s.settings, reused, a);
  const evaluation_result rb = stream_monitor::evaluate(in, s.settings, fresh, b);
  check_same(ra, rb);
  // The seed does drive the result: another seed moves the bootstrap ends.
  rng c(1235);
  const evaluation_result rc = stream_monitor::evaluate(in, s.settings, fresh, c);
  REQUIRE(rc.interval);
  CHECK((rc.interval->lower != ra.interval->lower || rc.interval->upper != ra.interval->upper));
}

TEST_CASE("A multivariate monitor runs energy on rows when no multivariate test is listed",
          "[core][monitor]") {
  monitor_settings s = small_settings(reference_policy::baseline, 40, 20, 20);
  s.permutation.resamples = 199;
  s.tests = {test_kind::ad, test_kind::ks};  // univariate only
  stream_monitor m(s, 3);
  rng data(77);
  Eigen::MatrixXd ref(40, 3), rec(20, 3);
  for (Eigen::Index i = 0; i < 60; ++i) {
    std::vector<double> row(3);
    for (auto& v : row)
      v = plumbline::testing::normal(data) + (i >= 40 ? 0.7 : 0.0);
    for (Eigen::Index j = 0; j < 3; ++j)
      (i < 40 ? ref(i, j) : rec(i - 40, j)) = row[static_cast<std::size_t>(j)];
    REQUIRE(m.push(row).ok());
  }
  REQUIRE(m.ready());
  evaluation_input in;
  m.capture(in);
  REQUIRE(in.reference_rows == ref);
  REQUIRE(in.recent_rows == rec);
  evaluation_scratch scratch;
  rng gen(plumbline::stream_seed(42, "larkspur/separator-1/vibration"));
  const evaluation_result r = stream_monitor::evaluate(in, s, scratch, gen);
  REQUIRE(r.tests.size() == 1);
  CHECK(r.tests[0].test == test_kind::energy);
  CHECK(r.dimension == 3);
  CHECK_FALSE(r.interval_requested);  // drift intervals are univariate only
  CHECK_FALSE(r.interval.has_value());

  rng direct_gen(plumbline::stream_seed(42, "larkspur/separator-1/vibration"));
  permutation_engine pe;
  plumbline::permutation_options o = s.permutation;
  o.test = test_kind::energy;
  const auto direct = pe.run(ref, rec, o, direct_gen);
  REQUIRE(direct.ok());
  REQUIRE(r.tests[0].ok);
  check_same(r.tests[0].result, direct.value());

  // Listing energy beside univariate tests runs energy alone.
  s.tests = {test_kind::ks, test_kind::energy};
  rng again(plumbline::stream_seed(42, "larkspur/separator-1/vibration"));
  const evaluation_result r2 = stream_monitor::evaluate(in, s, scratch, again);
  REQUIRE(r2.tests.size() == 1);
  check_same(r2.tests[0].result, direct.value());
}

TEST_CASE("A monitor reports an engine error in the result and counts the evaluation as quiet",
          "[core][monitor]") {
  const shifted_stream s = make_shifted(3);
  stream_monitor m = fed_monitor(s);
  evaluation_input in;
  m.capture(in);
  evaluation_scratch scratch;
  // Exact enumeration of C(250, 50) splits is impossible: the engine refuses.
  monitor_settings impossible = s.settings;
  impossible.permutation.exact = exact_mode::always;
  rng gen(1);
  evaluation_result r;
  REQUIRE_NOTHROW(r = stream_monitor::evaluate(in, impossible, scratch, gen));
  REQUIRE(r.tests.size() == 3);
  CHECK_FALSE(r.tests[0].ok);
  CHECK(r.tests[0].error.find("exact enumeration") != std::string::npos);
  CHECK_FALSE(r.driving_ok());
  CHECK(r.error.find("test ad failed") != std::string::npos);
  CHECK(r.error.find("counts as quiet") != std::string::npos);
  CHECK(r.interval.has_value());  // the interval does not depend on the tests
  m.record(r, 1767225600);
  CHECK(m.failed_evaluations_total() == 1);
  CHECK(m.alarm().consecutive_quiet() == 1);
  CHECK(m.alarm().evaluations_total() == 1);
  REQUIRE(m.last_result());
  CHECK_FALSE(m.last_result()->error.empty());
}

TEST_CASE("Errored evaluations clear an active alarm after clear_after of them",
          "[core][monitor]") {
  shifted_stream s = make_shifted(8);
  for (double& x : s.recent)
    x += 1.5;  // a 3-sd step: every test rejects
  s.settings.alarm.raise_after = 1;
  s.settings.alarm.clear_after = 2;
  stream_monitor m = fed_monitor(s);
  evaluation_input in;
  m.capture(in);
  evaluation_scratch scratch;
  rng gen(plumbline::stream_seed(1, "larkspur/pasteuriser/outlet-temperature"));
  const evaluation_result good = stream_monitor::evaluate(in, s.settings, scratch, gen);
  REQUIRE(good.driving_ok());
  REQUIRE(good.tests[0].result.p_value < s.settings.alarm.alpha);
  const auto raised = m.record(good, 100);
  REQUIRE(raised);
  CHECK(raised->kind == alarm_event_kind::raised);

  monitor_settings impossible = s.settings;
  impossible.permutation.exact = exact_mode::always;
  const evaluation_result bad = stream_monitor::evaluate(in, impossible, scratch, gen);
  CHECK_FALSE(m.record(bad, 160));
  const auto cleared = m.record(bad, 220);
  REQUIRE(cleared);
  CHECK(cleared->kind == alarm_event_kind::cleared);
  CHECK_FALSE(cleared->has_p_value);
  CHECK(m.failed_evaluations_total() == 2);
}

TEST_CASE("A monitor reports an interval error and, with a tolerance, gives no signal",
          "[core][monitor]") {
  shifted_stream s = make_shifted(9);
  for (double& x : s.recent)
    x += 1.5;
  s.settings.alarm.raise_after = 1;
  s.settings.alarm.tolerance = 0.1;
  s.settings.interval->block_length = 30;  // more than half the recent window of 50
  stream_monitor m = fed_monitor(s);
  evaluation_input in;
  m.capture(in);
  evaluation_scratch scratch;
  rng gen(2);
  const evaluation_result r = stream_monitor::evaluate(in, s.settings, scratch, gen);
  REQUIRE(r.driving_ok());
  CHECK(r.tests[0].result.p_value < s.settings.alarm.alpha);
  CHECK(r.interval_requested);
  CHECK_FALSE(r.interval.has_value());
  CHECK(r.interval_error.find("block length 30") != std::string::npos);
  CHECK(r.error.empty());
  CHECK_FALSE(r.alarm_interval());
  CHECK_FALSE(m.record(r, 100));  // small p, but no interval to hold against the tolerance
  CHECK(m.alarm().consecutive_quiet() == 1);
  CHECK(m.failed_evaluations_total() == 0);
}

TEST_CASE("A monitor on a stuck sensor gives p = 1 and a degenerate interval, not an error",
          "[core][monitor]") {
  monitor_settings s = small_settings(reference_policy::baseline, 30, 10, 10);
  stream_monitor m(s, 1);
  push_values(m, std::vector<double>(40, 4.25));
  evaluation_input in;
  m.capture(in);
  evaluation_scratch scratch;
  rng gen(3);
  const evaluation_result r = stream_monitor::evaluate(in, s, scratch, gen);
  REQUIRE(r.driving_ok());
  CHECK(r.tests[0].result.constant_data);
  CHECK(r.tests[0].result.p_value == 1);
  REQUIRE(r.interval);
  CHECK(r.interval->degenerate);
  CHECK(r.interval->lower == 0);
  CHECK(r.interval->upper == 0);
  CHECK_FALSE(m.record(r, 1));
  CHECK(m.alarm().consecutive_quiet() == 1);
}

TEST_CASE("A monitor evaluation with no test configured is quiet and says why", "[core][monitor]") {
  monitor_settings s = small_settings(reference_policy::baseline, 10, 5, 5);
  s.tests.clear();
  stream_monitor m(s, 1);
  push_values(m, iota_values(1, 15));
  evaluation_input in;
  m.capture(in);
  evaluation_scratch scratch;
  rng gen(4);
  const evaluation_result r = stream_monitor::evaluate(in, s, scratch, gen);
  CHECK(r.tests.empty());
  CHECK(r.error.find("no test") != std::string::npos);
  m.record(r, 1);
  CHECK(m.failed_evaluations_total() == 1);
}

TEST_CASE("A monitor drops a result captured before a rebaseline", "[core][monitor]") {
  shifted_stream s = make_shifted(10);
  for (double& x : s.recent)
    x += 1.5;
  s.settings.alarm.raise_after = 1;
  stream_monitor m = fed_monitor(s);
  evaluation_input in;
  m.capture(in);
  evaluation_scratch scratch;
  rng gen(5);
  const evaluation_result r = stream_monitor::evaluate(in, s.settings, scratch, gen);
  REQUIRE(m.record(r, 100));  // raises
  REQUIRE(m.alarm().active());
  m.capture(in);
  const evaluation_result late = stream_monitor::evaluate(in, s.settings, scratch, gen);
  const auto cleared = m.rebaseline(130);
  REQUIRE(cleared);
  CHECK(cleared->cause == alarm_cause::rebaseline);
  CHECK_FALSE(m.record(late, 160));
  CHECK(m.stale_results_total() == 1);
  CHECK(m.evaluations_total() == 1);
  CHECK_FALSE(m.alarm().active());
}

TEST_CASE("The monitor holds an sd-ratio interval against the null value 1", "[core][monitor]") {
  interval_result ir;
  ir.quantity = drift_quantity::sd_ratio;
  CHECK(plumbline::interval_null_value(ir) == 1);
  ir.quantity = drift_quantity::mean_diff;
  CHECK(plumbline::interval_null_value(ir) == 0);
  ir.quantity = drift_quantity::quantile_diff;
  CHECK(plumbline::interval_null_value(ir) == 0);
  ir.quantity = drift_quantity::cpk;
  ir.reference_value = 1.33;
  CHECK(plumbline::interval_null_value(ir) == 1.33);
}

TEST_CASE("The monitor's FNV-1a 64 matches the published test vectors", "[core][monitor]") {
  // Fowler-Noll-Vo test vectors (Noll's FNV test suite; from memory).
  CHECK(plumbline::fnv1a64("") == 0xcbf29ce484222325ULL);
  CHECK(plumbline::fnv1a64("a") == 0xaf63dc4c8601ec8cULL);
  CHECK(plumbline::fnv1a64("foobar") == 0x85944171f73967e8ULL);
}

TEST_CASE("The monitor's stream_seed follows its documented definition and is stable",
          "[core][monitor]") {
  const std::string name = "larkspur/filler-2/fill-weight";
  const uint64_t expected =
      plumbline::splitmix64(plumbline::splitmix64(20260101).next() ^ plumbline::fnv1a64(name))
          .next();
  CHECK(plumbline::stream_seed(20260101, name) == expected);
  // Pinned: a change here changes every stream's random stream, and so every
  // daemon's results for a given seed.
  CHECK(plumbline::stream_seed(20260101, name) == 0xdd1f81bf6c13b2c8ULL);
  CHECK(plumbline::stream_seed(20260101, "larkspur/filler-3/fill-weight") !=
        plumbline::stream_seed(20260101, name));
  CHECK(plumbline::stream_seed(20260102, name) != plumbline::stream_seed(20260101, name));
}

TEST_CASE("evaluation_seed follows its documented definition and separates evaluations",
          "[core][monitor]") {
  using plumbline::evaluation_seed;
  using plumbline::splitmix64;
  const uint64_t stream = plumbline::stream_seed(20260101, "larkspur/filler-2/fill-weight");
  for (const uint64_t k : {uint64_t{0}, uint64_t{1}, uint64_t{999}, ~uint64_t{0}})
    CHECK(evaluation_seed(stream, k) == splitmix64(stream ^ splitmix64(k).next()).next());
  // The first 10,000 evaluations of two streams: no seed repeats, within a
  // stream or across them (a repeat would give two evaluations the same draws).
  const uint64_t other = plumbline::stream_seed(20260101, "larkspur/filler-3/fill-weight");
  std::set<uint64_t> seen;
  for (uint64_t k = 0; k < 10000; ++k) {
    seen.insert(evaluation_seed(stream, k));
    seen.insert(evaluation_seed(other, k));
  }
  CHECK(seen.size() == 20000);
}

TEST_CASE("The monitor's record takes a moved result exactly as a copied one", "[core][monitor]") {
  const shifted_stream s = make_shifted(12);
  stream_monitor copied = fed_monitor(s);
  stream_monitor moved = fed_monitor(s);
  evaluation_input in;
  copied.capture(in);
  evaluation_scratch scratch;
  rng gen(6);
  const evaluation_result r = stream_monitor::evaluate(in, s.settings, scratch, gen);
  evaluation_result spare = r;
  copied.record(r, 10);
  moved.record(std::move(spare), 10);
  REQUIRE(moved.last_result());
  check_same(*moved.last_result(), *copied.last_result());
  CHECK(moved.alarm().consecutive_signals() == copied.alarm().consecutive_signals());
  CHECK(moved.evaluations_total() == 1);
}
