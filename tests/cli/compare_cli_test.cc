// compare_cli_test.cc: `plumbline compare` driven as a user drives it.
//
// Each case writes CSV files into a fresh temporary directory, runs the
// built binary (PLUMBLINE_BINARY) through the shell with stdout and stderr
// captured separately, and checks the exit code and the output: the JSON
// members scripts rely on, the human-readable p-value line, one-line errors
// with exit code 2 that name the file (and line) at fault, exact enumeration,
// reproducibility from --seed, sequential stopping, agreement with SciPy
// (Debian's python3-scipy, run live through PLUMBLINE_PYTHON) on a small data
// set, and a run on the bundled demo data in simulator/examples/.
#include <sys/wait.h>
#include <unistd.h>

#include <catch2/catch.hpp>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>
#include <stdexcept>
#include <string>
#include <vector>

#include "core/rng.h"
#include "support/cli.h"

namespace {

namespace fs = std::filesystem;
using Catch::Matchers::Contains;
using Catch::Matchers::StartsWith;
using nlohmann::json;

using namespace plumbline::testing;

std::vector<double> uniform_values(plumbline::rng& gen, std::size_t count, double lo,
                                   double width) {
  std::vector<double> v(count);
  for (double& x : v)
    x = std::round(1000 * (lo + width * gen.next_double())) / 1000;
  return v;
}

std::size_t line_count(const std::string& s) {
  std::size_t n = 0;
  for (char c : s)
    n += c == '\n';
  return n;
}

// Every bad input: exit code 2, nothing on stdout, one line on stderr.
void check_one_line_error(const run_result& r) {
  INFO("stdout: " << r.out << "\nstderr: " << r.err);
  CHECK(r.exit_code == 2);
  CHECK(r.out.empty());
  CHECK(line_count(r.err) == 1);
  CHECK((!r.err.empty() && r.err.back() == '\n'));
}

// Two small invented samples: seven checkweigher readings (0.01 g) from a
// reference shift and six recent ones, in grams. Sums of these repeat, so
// some splits tie exactly with the observed mean difference.
const std::vector<double> small_reference = {125.31, 124.87, 125.02, 125.64,
                                             124.71, 125.18, 125.49};
const std::vector<double> small_recent = {125.56, 125.93, 125.11, 126.07, 125.78, 125.40};

// Seven and six torque readings with six decimals: no ties between values or
// between split statistics, so floating-point reference computations count
// the same splits as exact arithmetic would.
const std::vector<double> fine_reference = {2.314127, 2.298641, 2.331905, 2.287316,
                                            2.309872, 2.322458, 2.301563};
const std::vector<double> fine_recent = {2.327714, 2.341089, 2.318326,
                                         2.335291, 2.296478, 2.344613};

// Eight and seven fill weights on the 0.1 g grid of a checkweigher.
const std::vector<double> grid_reference = {125.4, 125.8, 126.1, 125.2, 125.2, 125.9, 125.8, 125.6};
const std::vector<double> grid_recent = {125.4, 126.0, 126.0, 125.6, 125.6, 125.6, 125.4};

// Runs a Python script (text) under PLUMBLINE_PYTHON with `args`; returns
// its JSON output.
json run_python_script(const temp_dir& dir, const std::string& name, const std::string& text,
                       const std::vector<std::string>& args) {
  const std::string script = dir.write(name, text);
  std::vector<std::string> all = {script};
  all.insert(all.end(), args.begin(), args.end());
  const run_result py = run_program(dir, PLUMBLINE_PYTHON, all);
  INFO("python stderr: " << py.err);
  REQUIRE(py.exit_code == 0);
  return json::parse(py.out);
}

}  // namespace

TEST_CASE("compare --json prints the documented members", "[cli][compare]") {
  temp_dir dir;
  plumbline::rng gen(8);
  const auto ref = uniform_values(gen, 60, 10, 1), rec = uniform_values(gen, 45, 10.2, 1);
  const std::string ref_path = dir.write("ref.csv", column_csv("torque_nm", ref));
  const std::string rec_path = dir.write("rec.csv", column_csv("torque_nm", rec));
  for (const char* test : {"mean-diff", "median-diff", "welch", "ks", "cvm", "ad", "energy"}) {
    INFO("test " << test);
    const json j = compare_json(dir, ref_path, rec_path,
                                {"--test", test, "--resamples", "499", "--seed", "17"});
    REQUIRE(j.contains("test"));
    const json& t = j["test"];
    for (const char* member : {"name", "statistic", "p_value", "p_value_low", "p_value_high",
                               "resamples", "exact", "seed", "n_reference", "n_recent"}) {
      INFO("member " << member);
      CHECK(t.contains(member));
    }
    CHECK(t["name"] == test);
    CHECK(t["statistic"].is_number());
    CHECK(t["p_value"].is_number());
    CHECK(t["p_value_low"].is_number());
    CHECK(t["p_value_high"].is_number());
    CHECK(t["resamples"] == 499);
    CHECK(t["exact"] == false);
    CHECK(t["seed"] == 17);
    CHECK(t["n_reference"] == 60);
    CHECK(t["n_recent"] == 45);
    const double p = t["p_value"], lo = t["p_value_low"], hi = t["p_value_high"];
    CHECK(0 < p);
    CHECK(p <= 1);
    CHECK(lo <= p);
    CHECK(p <= hi);
    // Monte Carlo p-value, Phipson & Smyth: (1 + c) / (1 + B).
    CHECK(p == (1.0 + t["exceedances"].get<double>()) / 500.0);
  }
  // auto: ad for one value per row.
  CHECK(compare_json(dir, ref_path, rec_path, {"--resamples", "99"})["test"]["name"] == "ad");
}

TEST_CASE("compare prints a p-value line for people", "[cli][compare]") {
  temp_dir dir;
  plumbline::rng gen(9);
  const std::string ref_path = dir.write(
      "head_4_reference.csv", column_csv("fill_weight_g", uniform_values(gen, 40, 125, 1)));
  const std::string rec_path =
      dir.write("head_4_recent.csv", column_csv("fill_weight_g", uniform_values(gen, 30, 125, 1)));
  const run_result r = compare(dir, ref_path, rec_path, {"--resamples", "999", "--seed", "4"});
  INFO("stdout:\n" << r.out << "stderr:\n" << r.err);
  REQUIRE(r.exit_code == 0);
  CHECK(r.err.empty());
  CHECK_THAT(r.out, Contains("\np-value    "));
  CHECK_THAT(r.out, Contains("Monte Carlo"));
  CHECK_THAT(r.out, Contains("of 999 resamples at least as extreme"));
  CHECK_THAT(r.out, Contains("seed 4"));
  CHECK_THAT(r.out, Contains(ref_path + ": 40 samples"));
  CHECK_THAT(r.out, Contains(rec_path + ": 30 samples"));
  // Exact runs say so on the p-value line: 3 + 3 fully separated values
  // under ad, p = 2 / C(6, 3) = 0.1 (the observed split and its mirror).
  const std::string tiny_ref = dir.write("tiny_ref.csv", "1\n2\n3\n");
  const std::string tiny_rec = dir.write("tiny_rec.csv", "4\n5\n6\n");
  const run_result x = compare(dir, tiny_ref, tiny_rec, {"--exact", "always"});
  REQUIRE(x.exit_code == 0);
  CHECK_THAT(x.out, Contains("p-value    0.1 exact, all 20 splits enumerated"));
}

TEST_CASE("compare rejects bad input with exit code 2 and one line naming the fault",
          "[cli][compare]") {
  temp_dir dir;
  const std::string good = dir.write("good.csv", "weight\n1.5\n2.5\n3.5\n4.5\n");
  const std::string good2 = dir.write("good2.csv", "1.7\n2.9\n3.1\n4.4\n");
  const std::string rows = dir.write("rows.csv", "torque,offset\n1,2\n3,4\n5,6\n");

  SECTION("missing file") {
    const std::string missing = dir.file("absent.csv");
    const run_result r = compare(dir, missing, good);
    check_one_line_error(r);
    CHECK_THAT(r.err, Contains(missing + ": no such file"));
    const run_result r2 = compare(dir, good, missing);
    check_one_line_error(r2);
    CHECK_THAT(r2.err, Contains(missing));
  }
  SECTION("a directory") {
    const run_result r = compare(dir, good, dir.path().string());
    check_one_line_error(r);
    CHECK_THAT(r.err, Contains(dir.path().string() + ": is a directory"));
  }
  SECTION("a non-numeric cell") {
    const std::string bad = dir.write("bad.csv", "weight\n1.5\n2,5\n");
    const std::string bad_cell = dir.write("bad_cell.csv", "weight\n1.5\n2.5 g\n");
    check_one_line_error(compare(dir, bad, good));
    const run_result r = compare(dir, good, bad_cell);
    check_one_line_error(r);
    CHECK_THAT(r.err, Contains(bad_cell + ":3: cell 1 (\"2.5 g\") is not a number"));
  }
  SECTION("an empty sample") {
    const std::string empty = dir.write("empty.csv", "# no data yet\nweight\n");
    const run_result r = compare(dir, good, empty);
    check_one_line_error(r);
    CHECK_THAT(r.err, Contains(empty + ": no values"));
  }
  SECTION("NaN") {
    const std::string nan_file = dir.write("nan.csv", "weight\n1.5\nNaN\n2.5\n");
    const run_result r = compare(dir, nan_file, good);
    check_one_line_error(r);
    CHECK_THAT(r.err, Contains(nan_file + ":3: cell 1 (\"NaN\") is not a finite number"));
  }
  SECTION("infinity") {
    const std::string inf_file = dir.write("inf.csv", "1.5\n2.5\n\n-inf\n");
    const run_result r = compare(dir, good, inf_file);
    check_one_line_error(r);
    CHECK_THAT(r.err, Contains(inf_file + ":4: cell 1 (\"-inf\") is not a finite number"));
  }
  SECTION("unequal widths within a file") {
    const std::string ragged = dir.write("ragged.csv", "1,2\n3,4\n5\n");
    const run_result r = compare(dir, ragged, rows);
    check_one_line_error(r);
    CHECK_THAT(r.err, Contains(ragged + ":3: row has 1 value, but the first row has 2"));
  }
  SECTION("an unknown test") {
    const run_result r = compare(dir, good, good2, {"--test", "t-test"});
    check_one_line_error(r);
    CHECK_THAT(r.err, Contains("--test") && Contains("t-test"));
  }
  SECTION("rows of different widths in the two files") {
    const run_result r = compare(dir, good, rows, {"--test", "energy"});
    check_one_line_error(r);
    CHECK_THAT(r.err, Contains(good) && Contains(rows));
  }
  SECTION("rows of several values with a univariate test") {
    const run_result r = compare(dir, rows, rows, {"--test", "ks"});
    check_one_line_error(r);
    CHECK_THAT(r.err, Contains("ks") && Contains("--test energy"));
  }
  SECTION("resamples 0") {
    const run_result r = compare(dir, good, good2, {"--resamples", "0"});
    check_one_line_error(r);
    CHECK_THAT(r.err, Contains("--resamples"));
  }
  SECTION("a sample of one value") {
    const std::string one = dir.write("one.csv", "weight\n1.5\n");
    const run_result r = compare(dir, one, good);
    check_one_line_error(r);
    CHECK_THAT(r.err, Contains("reference sample has 1 value"));
  }
  SECTION("--exact always with too many splits") {
    plumbline::rng gen(3);
    const std::string big_ref =
        dir.write("big_ref.csv", column_csv("", uniform_values(gen, 40, 0, 1)));
    const std::string big_rec =
        dir.write("big_rec.csv", column_csv("", uniform_values(gen, 40, 0, 1)));
    const run_result r = compare(dir, big_ref, big_rec, {"--exact", "always"});
    check_one_line_error(r);
    CHECK_THAT(r.err, Contains("splits"));
  }
}

TEST_CASE("compare --exact always enumerates all C(N, n) splits", "[cli][compare]") {
  temp_dir dir;
  const std::string ref = dir.write("ref.csv", column_csv("weight_g", small_reference));
  const std::string rec = dir.write("rec.csv", column_csv("weight_g", small_recent));
  // C(13, 6) = 1716, computed here by the multiplicative formula.
  double splits = 1;
  for (int i = 1; i <= 6; ++i)
    splits = splits * (7 + i) / i;
  REQUIRE(splits == 1716);
  for (const char* test : {"mean-diff", "median-diff", "welch", "ks", "cvm", "ad", "energy"}) {
    INFO("test " << test);
    const json t = compare_json(dir, ref, rec, {"--exact", "always", "--test", test})["test"];
    CHECK(t["exact"] == true);
    CHECK(t["resamples"] == 1716);
    const double p = t["p_value"];
    CHECK(p == t["exceedances"].get<double>() / 1716);
    CHECK(t["p_value_low"] == p);
    CHECK(t["p_value_high"] == p);
  }
}

TEST_CASE("compare gives byte-identical JSON for the same seed", "[cli][compare]") {
  temp_dir dir;
  plumbline::rng gen(10);
  const std::string ref = dir.write("ref.csv", column_csv("x", uniform_values(gen, 50, 0, 1)));
  const std::string rec = dir.write("rec.csv", column_csv("x", uniform_values(gen, 50, 0.1, 1)));
  for (const char* test : {"mean-diff", "ks", "ad", "energy"}) {
    INFO("test " << test);
    const std::vector<std::string> args = {"--test", test,        "--resamples", "2000",
                                           "--seed", "123456789", "--json"};
    const run_result a = compare(dir, ref, rec, args), b = compare(dir, ref, rec, args);
    REQUIRE(a.exit_code == 0);
    REQUIRE(b.exit_code == 0);
    CHECK(a.out == b.out);
    // Another seed changes the resamples, hence (almost surely) the output.
    std::vector<std::string> other = args;
    other[5] = "987654321";
    const run_result c = compare(dir, ref, rec, other);
    REQUIRE(c.exit_code == 0);
    CHECK(json::parse(c.out)["test"]["seed"] == 987654321);
    CHECK(json::parse(c.out)["test"]["exceedances"] != json::parse(a.out)["test"]["exceedances"]);
  }
}

TEST_CASE("compare --stop-after stops early on data without a difference", "[cli][compare]") {
  temp_dir dir;
  plumbline::rng gen(11);
  const std::string ref = dir.write("ref.csv", column_csv("x", uniform_values(gen, 60, 0, 1)));
  const std::string rec = dir.write("rec.csv", column_csv("x", uniform_values(gen, 60, 0, 1)));
  const json t = compare_json(
      dir, ref, rec, {"--stop-after", "10", "--resamples", "9999", "--exact", "never"})["test"];
  CHECK(t["stopped_early"] == true);
  CHECK(t["exceedances"] == 10);
  CHECK(t["resamples"].get<uint64_t>() < 9999);
  CHECK(t["p_value"].get<double>() == 10.0 / t["resamples"].get<double>());
  const run_result human = compare(dir, ref, rec, {"--stop-after", "10", "--resamples", "9999"});
  REQUIRE(human.exit_code == 0);
  CHECK_THAT(human.out, Contains("(stopped early after 10)"));
}

TEST_CASE("compare agrees with SciPy on exact p-values and statistics", "[cli][compare]") {
  // SciPy 1.10 (Debian 12), run live: permutation_test on |mean(y) - mean(x)|
  // with every split (alternative "greater" counts |T*| >= |T|, as compare
  // does), ks_2samp and cramervonmises_2samp with method "exact" (no ties in
  // these data, so their exact null distributions are the permutation ones),
  // ttest_ind(equal_var=False) for Welch's t, anderson_ksamp for the
  // standardized A2akN, and energy_distance for E = n m / N * D^2.
  temp_dir dir;
  const std::string ref = dir.write("ref.csv", column_csv("torque_nm", fine_reference));
  const std::string rec = dir.write("rec.csv", column_csv("torque_nm", fine_recent));
  const json s = run_python_script(dir, "scipy_reference.py", R"(
import json, sys, warnings
import numpy as np
from scipy import stats
warnings.simplefilter("ignore")
x = np.loadtxt(sys.argv[1], skiprows=1)
y = np.loadtxt(sys.argv[2], skiprows=1)
def abs_mean_diff(a, b, axis):
    return np.abs(np.mean(a, axis=axis) - np.mean(b, axis=axis))
perm = stats.permutation_test((y, x), abs_mean_diff, permutation_type="independent",
                              alternative="greater", n_resamples=np.inf, vectorized=True)
ks = stats.ks_2samp(x, y, method="exact")
cvm = stats.cramervonmises_2samp(x, y, method="exact")
n, m = len(x), len(y)
print(json.dumps({
    "mean_diff_p": float(perm.pvalue),
    "mean_diff": float(np.mean(y) - np.mean(x)),
    "welch": float(stats.ttest_ind(y, x, equal_var=False).statistic),
    "ks": float(ks.statistic), "ks_p": float(ks.pvalue),
    "cvm": float(cvm.statistic), "cvm_p": float(cvm.pvalue),
    "ad_standardized": float(stats.anderson_ksamp([x, y]).statistic),
    "energy": float(n * m / (n + m) * stats.energy_distance(x, y) ** 2),
}))
)",
                                   {ref, rec});
  auto exact = [&](const char* test) {
    return compare_json(dir, ref, rec, {"--exact", "always", "--test", test})["test"];
  };
  auto value = [](const json& j, const char* key) { return j[key].get<double>(); };
  const json mean_diff = exact("mean-diff");
  CHECK(value(mean_diff, "statistic") == Approx(value(s, "mean_diff")).epsilon(1e-12));
  CHECK(value(mean_diff, "p_value") == Approx(value(s, "mean_diff_p")).epsilon(1e-12));
  CHECK(value(exact("welch"), "statistic") == Approx(value(s, "welch")).epsilon(1e-12));
  const json ks = exact("ks");
  CHECK(value(ks, "statistic") == Approx(value(s, "ks")).epsilon(1e-12));
  CHECK(value(ks, "p_value") == Approx(value(s, "ks_p")).epsilon(1e-10));
  const json cvm = exact("cvm");
  CHECK(value(cvm, "statistic") == Approx(value(s, "cvm")).epsilon(1e-10));
  CHECK(value(cvm, "p_value") == Approx(value(s, "cvm_p")).epsilon(1e-10));
  CHECK(value(exact("ad"), "statistic_standardized") ==
        Approx(value(s, "ad_standardized")).epsilon(1e-10));
  CHECK(value(exact("energy"), "statistic") == Approx(value(s, "energy")).epsilon(1e-10));
}

TEST_CASE("compare's exact p-values on decimal data equal an enumeration in exact arithmetic",
          "[cli][compare]") {
  // Decimal readings are not exact in binary, so splits whose statistics are
  // equal in theory differ in the last bits; the engine counts a T* within a
  // relative 1e-14 of T as a tie. The reference here enumerates every split
  // in Python's exact integer and rational arithmetic (values scaled to
  // integers: the scaling changes no comparison): |n S_y - m S_x| for
  // mean-diff, t^2 as a fraction for welch, and E (a rational in one
  // dimension) for energy.
  const std::string script = R"(
import json, sys
from fractions import Fraction
from itertools import combinations
def read(path, scale):
    vals = []
    for line in open(path):
        line = line.strip()
        if not line or line[0] == "#" or line[0].isalpha():
            continue
        vals.append(round(float(line) * scale))
    return vals
scale = int(sys.argv[3])
x, y = read(sys.argv[1], scale), read(sys.argv[2], scale)
n, m = len(x), len(y)
pool = x + y
big_n = n + m
def stats(a, b):
    sa, sb = sum(a), sum(b)
    mean_diff = abs(len(a) * sb - len(b) * sa)
    va = Fraction(sum(v * v for v in a) * len(a) - sa * sa, len(a) * (len(a) - 1))
    vb = Fraction(sum(v * v for v in b) * len(b) - sb * sb, len(b) * (len(b) - 1))
    diff = Fraction(sb, len(b)) - Fraction(sa, len(a))
    se2 = va / len(a) + vb / len(b)
    welch = diff * diff / se2 if se2 != 0 else None
    dab = sum(abs(u - v) for u in a for v in b)
    daa = sum(abs(u - v) for u in a for v in a)
    dbb = sum(abs(u - v) for u in b for v in b)
    la, lb = len(a), len(b)
    energy = Fraction(la * lb, la + lb) * (2 * Fraction(dab, la * lb) - Fraction(daa, la * la)
                                           - Fraction(dbb, lb * lb))
    return mean_diff, welch, energy
obs = stats(x, y)
counts = [0, 0, 0]
total = 0
for chosen in combinations(range(big_n), n):
    inside = set(chosen)
    a = [pool[i] for i in chosen]
    b = [pool[i] for i in range(big_n) if i not in inside]
    s = stats(a, b)
    total += 1
    for k in range(3):
        if obs[k] is None:
            counts[k] += s[k] is None
        elif s[k] is None or s[k] >= obs[k]:
            counts[k] += 1
print(json.dumps({"splits": total, "mean-diff": counts[0], "welch": counts[1],
                  "energy": counts[2]}))
)";
  struct data {
    const char* label;
    const std::vector<double>* reference;
    const std::vector<double>* recent;
    const char* scale;
  };
  for (data d :
       {data{"0.01 g readings, n = 7, m = 6", &small_reference, &small_recent, "100"},
        data{"0.1 g checkweigher grid, n = 8, m = 7", &grid_reference, &grid_recent, "10"}}) {
    INFO(d.label);
    temp_dir dir;
    const std::string ref = dir.write("ref.csv", column_csv("weight_g", *d.reference));
    const std::string rec = dir.write("rec.csv", column_csv("weight_g", *d.recent));
    const json expected = run_python_script(dir, "exact_counts.py", script, {ref, rec, d.scale});
    for (const char* test : {"mean-diff", "welch", "energy"}) {
      INFO("test " << test);
      const json t = compare_json(dir, ref, rec, {"--exact", "always", "--test", test})["test"];
      CHECK(t["resamples"] == expected["splits"]);
      CHECK(t["exceedances"] == expected[test]);
    }
  }
}

TEST_CASE("compare runs on the bundled demo data", "[cli][compare]") {
  // The demo files of simulator/examples/: invented filler and capper data.
  // Sizes are counted here from the files (lines that are neither comments,
  // blank, nor the header).
  temp_dir dir;
  const std::string examples = std::string(PLUMBLINE_SOURCE_DIR) + "/simulator/examples/";
  auto data_rows = [](const std::string& path) {
    std::ifstream in(path);
    std::string line;
    std::size_t rows = 0;
    bool header_seen = false;
    while (std::getline(in, line)) {
      if (line.empty() || line[0] == '#') continue;
      if (!header_seen) {
        header_seen = true;
        continue;  // both demo files per pair open with a header line
      }
      ++rows;
    }
    return rows;
  };
  struct demo {
    const char* stem;
    const char* auto_test;
    int width;
  };
  for (demo d : {demo{"fill_weight", "ad", 1}, demo{"capper", "energy", 2}}) {
    INFO("demo " << d.stem);
    const std::string ref = examples + d.stem + "_reference.csv";
    const std::string rec = examples + d.stem + "_recent.csv";
    REQUIRE(fs::exists(ref));
    REQUIRE(fs::exists(rec));
    const json j = compare_json(dir, ref, rec, {"--resamples", "999", "--seed", "2026"});
    const json& t = j["test"];
    CHECK(t["name"] == d.auto_test);
    CHECK(t["n_reference"] == data_rows(ref));
    CHECK(t["n_recent"] == data_rows(rec));
    CHECK(j["reference"]["width"] == d.width);
    CHECK(t["p_value_low"].get<double>() <= t["p_value"].get<double>());
    CHECK(t["p_value"].get<double>() <= t["p_value_high"].get<double>());
    const run_result human = compare(dir, ref, rec, {"--resamples", "999"});
    REQUIRE(human.exit_code == 0);
    CHECK_THAT(human.out, Contains("\np-value    "));
  }
}
