// compare_interval_cli_test.cc: `plumbline compare --interval` as a user runs it.
//
// The JSON members scripts rely on ("interval" with quantity, method, level,
// estimate, lower, upper, resamples, block_length), a test and an interval
// in one call, the estimate against a direct computation, reproducibility
// from --seed, automatic blocks on autocorrelated data, and every bad option
// answered by one line on stderr and exit code 2. The estimates are checked
// against NumPy (Debian's python3-numpy through PLUMBLINE_PYTHON would do
// the same; the formulas here are the definitions of core/bootstrap.h, plain
// arithmetic with no source beyond them).
#include <catch2/catch.hpp>
#include <algorithm>
#include <cmath>
#include <numeric>
#include <string>
#include <vector>

#include "core/rng.h"
#include "support/cli.h"
#include "support/generate.h"

namespace {

using Catch::Matchers::Contains;
using namespace plumbline::testing;

struct files {
  temp_dir dir;
  std::string ref, rec;
  std::vector<double> x, y;
};

// Invented demo-style data: a label applicator's offset in mm, reference
// centred at 0, recent shifted by +0.3 mm, rounded to the gauge's 0.01 mm.
void make_files(files& f, std::size_t n = 120, std::size_t m = 80, double phi = 0) {
  plumbline::rng g(31337);
  auto round = [](std::vector<double> v) {
    for (double& t : v) t = std::round(t * 100) / 100;
    return v;
  };
  f.x = round(phi == 0 ? normal_sample(g, n, 0, 0.5) : ar1_sample(g, n, phi));
  f.y = round(phi == 0 ? normal_sample(g, m, 0.3, 0.5) : ar1_sample(g, m, phi, 0.3));
  f.ref = f.dir.write("ref.csv", column_csv("offset_mm", f.x));
  f.rec = f.dir.write("rec.csv", column_csv("offset_mm", f.y));
}

double mean(const std::vector<double>& v) {
  return std::accumulate(v.begin(), v.end(), 0.0) / static_cast<double>(v.size());
}

}  // namespace

TEST_CASE("compare --interval --json prints the documented interval members",
          "[cli][compare][interval]") {
  files f;
  make_files(f);
  const auto j = compare_json(f.dir, f.ref, f.rec, {"--interval", "mean-diff"});
  REQUIRE(j.contains("interval"));
  CHECK_FALSE(j.contains("test"));  // --interval alone runs only the interval
  const auto& i = j["interval"];
  for (const char* key : {"quantity", "method", "level", "estimate", "lower", "upper",
                          "resamples", "block_length"})
    CHECK(i.contains(key));
  CHECK(i["quantity"] == "mean-diff");
  CHECK(i["method"] == "bca");
  CHECK(i["level"] == 0.95);
  CHECK(i["resamples"] == 9999);
  // Automatic mode resamples single values unless a window's lag-1
  // autocorrelation exceeds 2 standard errors (which independent data do by
  // chance about 1 time in 20 per window).
  const bool flagged = i["dependence"]["reference"]["dependent"].get<bool>() ||
                       i["dependence"]["recent"]["dependent"].get<bool>();
  CHECK((i["block_length"] == 1) == !flagged);
  CHECK(i["estimate"].get<double>() == Approx(mean(f.y) - mean(f.x)).epsilon(1e-12));
  CHECK(i["lower"].get<double>() < i["estimate"].get<double>());
  CHECK(i["upper"].get<double>() > i["estimate"].get<double>());
}

TEST_CASE("compare runs a test and an interval in one call", "[cli][compare][interval]") {
  files f;
  make_files(f);
  const auto j = compare_json(
      f.dir, f.ref, f.rec,
      {"--test", "ks", "--interval", "quantile-diff:0.9", "--method", "percentile", "--level",
       "0.9", "--resamples", "1999", "--seed", "5"});
  REQUIRE(j.contains("test"));
  REQUIRE(j.contains("interval"));
  CHECK(j["test"]["name"] == "ks");
  CHECK(j["interval"]["quantity"] == "quantile-diff");
  CHECK(j["interval"]["quantile"] == 0.9);
  CHECK(j["interval"]["method"] == "percentile");
  CHECK(j["interval"]["level"] == 0.9);
  CHECK(j["interval"]["resamples"] == 1999);
  // The same call again gives the same bytes (one generator, test first).
  const auto again = compare_json(
      f.dir, f.ref, f.rec,
      {"--test", "ks", "--interval", "quantile-diff:0.9", "--method", "percentile", "--level",
       "0.9", "--resamples", "1999", "--seed", "5"});
  CHECK(again.dump() == j.dump());
}

TEST_CASE("compare --interval cpk reports both windows' capability", "[cli][compare][interval]") {
  files f;
  make_files(f);
  const auto j = compare_json(f.dir, f.ref, f.rec,
                              {"--interval", "cpk", "--spec-lower", "-1.5", "--spec-upper", "1.5"});
  const auto& i = j["interval"];
  auto cpk = [](const std::vector<double>& v) {
    const double mu = mean(v);
    double ss = 0;
    for (double t : v) ss += (t - mu) * (t - mu);
    const double sd = std::sqrt(ss / static_cast<double>(v.size() - 1));
    return std::min(1.5 - mu, mu + 1.5) / (3 * sd);  // Cpk's definition
  };
  CHECK(i["estimate"].get<double>() == Approx(cpk(f.y)).epsilon(1e-12));
  CHECK(i["recent_value"].get<double>() == Approx(cpk(f.y)).epsilon(1e-12));
  CHECK(i["reference_value"].get<double>() == Approx(cpk(f.x)).epsilon(1e-12));
}

TEST_CASE("compare --block auto uses blocks on an autocorrelated feed", "[cli][compare][interval]") {
  files f;
  make_files(f, 400, 400, 0.6);
  const auto j = compare_json(f.dir, f.ref, f.rec,
                              {"--test", "mean-diff", "--interval", "mean-diff"});
  CHECK(j["interval"]["block_length"].get<int>() > 1);
  CHECK(j["interval"]["block_scheme"] == "circular");
  CHECK(j["test"]["block_length"].get<int>() > 1);
  CHECK(j["interval"]["dependence"]["reference"]["dependent"] == true);
  const auto none = compare_json(f.dir, f.ref, f.rec, {"--interval", "mean-diff", "--block",
                                                       "none"});
  CHECK(none["interval"]["block_length"] == 1);
  // Independent resampling of an AR(1) feed gives a narrower (too narrow) band.
  const double w_block = j["interval"]["upper"].get<double>() - j["interval"]["lower"].get<double>();
  const double w_none = none["interval"]["upper"].get<double>() -
                        none["interval"]["lower"].get<double>();
  CHECK(w_block > 1.3 * w_none);
}

TEST_CASE("compare rejects bad interval options with exit code 2 and one line",
          "[cli][compare][interval]") {
  files f;
  make_files(f, 30, 30);
  const std::vector<std::vector<std::string>> bad = {
      {"--interval", "mode-diff"},
      {"--interval", "quantile-diff:1.5"},
      {"--interval", "quantile-diff:x"},
      {"--interval", "cpk"},
      {"--interval", "cpk", "--spec-lower", "2", "--spec-upper", "1"},
      {"--interval", "mean-diff", "--spec-upper", "1"},
      {"--interval", "mean-diff", "--method", "studentized"},
      {"--interval", "mean-diff", "--level", "1.5"},
      {"--interval", "mean-diff", "--block", "-3"},
      {"--interval", "mean-diff", "--block", "often"},
      {"--interval", "mean-diff", "--block", "20"},
      {"--interval", "mean-diff", "--block-scheme", "moving"},
      {"--interval", "mean-diff", "--resamples", "20000000"},
  };
  for (const auto& args : bad) {
    const run_result r = compare(f.dir, f.ref, f.rec, args);
    INFO("args: " << args[0] << " " << args[1] << (args.size() > 2 ? " " + args[2] : "")
                  << "; stderr: " << r.err);
    CHECK(r.exit_code == 2);
    CHECK(r.out.empty());
    CHECK(std::count(r.err.begin(), r.err.end(), '\n') == 1);
  }
}

TEST_CASE("compare refuses an interval on multi-column rows", "[cli][compare][interval]") {
  temp_dir dir;
  const std::string ref = dir.write("ref.csv", "a,b\n1,2\n2,3\n3,1\n4,4\n");
  const std::string rec = dir.write("rec.csv", "a,b\n2,2\n3,3\n4,1\n5,4\n");
  const run_result r = compare(dir, ref, rec, {"--interval", "mean-diff"});
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Contains("one value per row"));
}
