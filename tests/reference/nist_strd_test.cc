// nist_strd_test.cc: the running statistics of core/window.h against the NIST
// Statistical Reference Datasets (StRD) for univariate summary statistics.
//
// Datasets (NIST StRD, www.itl.nist.gov/div898/strd/univ/, files
// numacc1.dat .. numacc4.dat). Written from memory, then confirmed against
// public copies of the NIST files that reproduce their headers and data (the
// NIST pages themselves were not at hand). Certified values are exact by
// construction:
//   NumAcc1  10000001, 10000003, 10000002             mean 10000002, sd 1
//   NumAcc2  1.2, then 500 pairs (1.1, 1.3): 1001     mean 1.2,      sd 0.1
//   NumAcc3  1000000.2, then 500 pairs (1000000.1, 1000000.3)
//                                                     mean 1000000.2, sd 0.1
//   NumAcc4  10000000.2, then 500 pairs (10000000.1, 10000000.3)
//                                                     mean 10000000.2, sd 0.1
// (the sd has divisor n - 1).
//
// Accuracy measure: the log relative error LRE = -log10(|est - cert| / |cert|)
// (McCullough, "Assessing the reliability of statistical software: Part I",
// Am. Stat. 52, 1998), the number of significant digits in agreement, capped
// at 15 for exact agreement, as in the StRD assessments.
//
// Representation limit. The decimal data of NumAcc2-4 are not binary64
// numbers. For NumAcc3 and NumAcc4 the rounding to the nearest double is
// large against the spread: the spacing of doubles is 2^-33 near 1e6 and
// 2^-29 (1.9e-9) near 1e7, and e.g. double(10000000.1) = 10000000.1 -
// 3.7e-10, double(10000000.3) = 10000000.3 + 7.5e-10. The exact sd of the
// binary64 inputs is 0.100000000034924... (NumAcc3) and 0.100000000558793...
// (NumAcc4): LRE 9.46 and 8.25 against the certified 0.1. No algorithm that
// reads these inputs as doubles can do better, whatever its working
// precision. The worst case over all data of this kind follows from the sd
// being Lipschitz in the data: moving every value by at most h (half a
// spacing) moves the sd by at most h sqrt(n / (n - 1)), a relative 9.3e-9
// (LRE 8.03) for NumAcc4 and 5.8e-10 (LRE 9.23) for NumAcc3; the test
// computes this bound from the data and checks the exact LRE against it.
// So for NumAcc3/4 the sd is held to (i) 12 digits against the exact sd of
// the binary64 inputs, computed live by tests/reference/exact_moments.py
// (exact rational arithmetic, 40 digits), and (ii) an LRE against the
// certified value no more than 0.1 below that of the exact sd: the window
// loses nothing beyond the representation. The mean is held to 12 digits
// against the certified value for all four, and the sd of NumAcc1/2 too.
//
// Each dataset is checked (a) pushed into a window of exactly its size, and
// (b) after pushes and evictions: a window of its size first receives
// thousands of other values (several kinds), then the dataset, so that it
// holds exactly the dataset after many evictions and rebuilds.
#include <algorithm>
#include <catch2/catch.hpp>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <functional>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "core/rng.h"
#include "core/window.h"
#include "support/python.h"

namespace {

using nlohmann::json;
using plumbline::sample_window;
using plumbline::testing::run_python;

constexpr const char* script = "tests/reference/exact_moments.py";

struct dataset {
  const char* name;
  std::vector<double> values;
  long double certified_mean;
  long double certified_sd;
  bool sd_representable;  // true when binary64 inputs can reach 12 digits of sd
};

std::vector<double> pairs_after(double first, double a, double b) {
  std::vector<double> v{first};
  for (int i = 0; i < 500; ++i) {
    v.push_back(a);
    v.push_back(b);
  }
  return v;
}

std::vector<dataset> nist_datasets() {
  return {
      {"NumAcc1", {10000001, 10000003, 10000002}, 10000002.0L, 1.0L, true},
      {"NumAcc2", pairs_after(1.2, 1.1, 1.3), 1.2L, 0.1L, true},
      {"NumAcc3", pairs_after(1000000.2, 1000000.1, 1000000.3), 1000000.2L, 0.1L, false},
      {"NumAcc4", pairs_after(10000000.2, 10000000.1, 10000000.3), 10000000.2L, 0.1L, false},
  };
}

// McCullough's LRE, capped at 15.
double lre(long double est, long double cert) {
  const long double err = cert != 0 ? std::fabs(est - cert) / std::fabs(cert) : std::fabs(est);
  if (err == 0) return 15;
  return std::min(15.0, static_cast<double>(-std::log10(err)));
}

struct exact_moments {
  long double mean;
  long double sd;
};

exact_moments exact_of(const std::vector<double>& values) {
  json hex = json::array();
  char buf[64];
  for (double x : values) {
    std::snprintf(buf, sizeof buf, "%a", x);
    hex.push_back(buf);
  }
  const json out = run_python(script, json{{"values_hex", hex}});
  REQUIRE(out.at("n").get<std::size_t>() == values.size());
  return {std::strtold(out.at("mean").get<std::string>().c_str(), nullptr),
          std::strtold(out.at("sd").get<std::string>().c_str(), nullptr)};
}

// The worst-case LRE of the sd against the certified value that rounding the
// decimal data to binary64 allows: every value moves by at most half the
// spacing of doubles around it, and the sd by at most h sqrt(n / (n - 1)).
double representation_bound_lre(const dataset& d) {
  double h = 0;
  for (double x : d.values) {
    h = std::max(h, (std::nextafter(x, HUGE_VAL) - x) / 2);
    h = std::max(h, (x - std::nextafter(x, -HUGE_VAL)) / 2);
  }
  const double n = static_cast<double>(d.values.size());
  return -std::log10(h * std::sqrt(n / (n - 1)) / static_cast<double>(d.certified_sd));
}

// Other values pushed before the dataset, to force evictions and rebuilds.
struct prelude {
  const char* name;
  std::function<void(sample_window&, const dataset&)> run;
};

double unit_noise(plumbline::rng& g) {
  return (g.next_double() - 0.5) * 3.4641016151377544;
}

std::vector<prelude> preludes() {
  return {
      {"5000 values near 1e7, sd 1e3",
       [](sample_window& w, const dataset&) {
         plumbline::rng g(101);
         for (int i = 0; i < 5000; ++i)
           w.push(1e7 + 1e3 * unit_noise(g));
       }},
      {"5000 values at the dataset's level, sd 10 x its sd",
       [](sample_window& w, const dataset& d) {
         plumbline::rng g(102);
         const double level = static_cast<double>(d.certified_mean);
         const double sd = static_cast<double>(d.certified_sd);
         for (int i = 0; i < 5000; ++i)
           w.push(level + 10 * sd * unit_noise(g));
       }},
      {"5000 values at twice the dataset's level, sd 1e-3 x its sd",
       [](sample_window& w, const dataset& d) {
         plumbline::rng g(103);
         const double level = 2 * static_cast<double>(d.certified_mean);
         const double sd = static_cast<double>(d.certified_sd);
         for (int i = 0; i < 5000; ++i)
           w.push(level + 1e-3 * sd * unit_noise(g));
       }},
      {"the dataset itself, three times",
       [](sample_window& w, const dataset& d) {
         for (int k = 0; k < 3; ++k)
           for (double x : d.values)
             w.push(x);
       }},
  };
}

void check_window(const sample_window& w, const dataset& d, const exact_moments& exact,
                  const std::string& how) {
  std::vector<double> held;
  w.copy_to(held);
  REQUIRE(held == d.values);

  const double mean = w.mean();
  const double sd = w.stddev();
  const double mean_vs_cert = lre(mean, d.certified_mean);
  const double sd_vs_cert = lre(sd, d.certified_sd);
  const double mean_vs_exact = lre(mean, exact.mean);
  const double sd_vs_exact = lre(sd, exact.sd);
  const double exact_sd_vs_cert = lre(exact.sd, d.certified_sd);
  char line[256];
  std::snprintf(line, sizeof line,
                "%s, %s: LRE mean %.2f (vs exact %.2f), sd %.2f (vs exact %.2f; exact sd of the "
                "binary64 inputs vs certified %.2f)",
                d.name, how.c_str(), mean_vs_cert, mean_vs_exact, sd_vs_cert, sd_vs_exact,
                exact_sd_vs_cert);
  WARN(line);
  INFO(line);
  CHECK(mean_vs_cert >= 12);
  CHECK(mean_vs_exact >= 12);
  CHECK(sd_vs_exact >= 12);
  if (d.sd_representable) {
    CHECK(sd_vs_cert >= 12);
  } else {
    CHECK(sd_vs_cert >= exact_sd_vs_cert - 0.1);
  }
}

}  // namespace

TEST_CASE("rounding NumAcc3 and NumAcc4 to binary64 limits any sd to about 8 to 9 digits",
          "[reference][nist][window]") {
  // The fact the other checks build on (see the file comment): the exact sd
  // of the binary64 inputs agrees with the certified 0.1 to fewer than 12
  // digits, and no worse than the Lipschitz bound allows. For NumAcc1/2 it
  // agrees to 12 digits or more.
  for (const auto& d : nist_datasets()) {
    const exact_moments exact = exact_of(d.values);
    const double got = lre(exact.sd, d.certified_sd);
    const double bound = representation_bound_lre(d);
    char line[160];
    std::snprintf(line, sizeof line,
                  "%s: exact sd of the binary64 inputs has LRE %.2f vs certified; worst case "
                  "for the rounding of such data %.2f",
                  d.name, got, bound);
    WARN(line);
    INFO(line);
    CHECK(got >= bound - 1e-9);
    if (d.sd_representable) {
      CHECK(got >= 12);
    } else {
      CHECK(got < 12);
    }
    CHECK(lre(exact.mean, d.certified_mean) >= 12);
  }
}

TEST_CASE("a window holding a NumAcc dataset gives NIST's certified mean and sd",
          "[reference][nist][window]") {
  for (const auto& d : nist_datasets()) {
    const exact_moments exact = exact_of(d.values);
    sample_window w(d.values.size());
    for (double x : d.values)
      w.push(x);
    check_window(w, d, exact, "window of its size");
  }
}

TEST_CASE("the certified NumAcc values hold after pushes and evictions",
          "[reference][nist][window]") {
  for (const auto& d : nist_datasets()) {
    const exact_moments exact = exact_of(d.values);
    for (const auto& p : preludes()) {
      sample_window w(d.values.size());
      p.run(w, d);
      REQUIRE(w.full());
      for (double x : d.values)
        w.push(x);
      check_window(w, d, exact, std::string("after ") + p.name);
    }
  }
}
