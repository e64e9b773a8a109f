// sim_distribution_test.cc: the simulator's noise shapes against SciPy.
//
// For each distribution, 200,000 independent samples (ar1 = 0, no rounding)
// must have the configured mean and standard deviation within 4 standard
// errors (common practice, no source; the seeds are fixed), where the
// standard errors use SciPy's moments of the scaled distribution
// (tests/reference/sim_distribution_reference.py):
//   mean  spread / sqrt(n)
//   sd    spread * sqrt((excess kurtosis + 2) / n) / 2   (delta method on
//         Var(s^2) = sigma^4 (kurtosis - 1) / n; from memory)
// and the first 20,000 must pass SciPy's Kolmogorov-Smirnov test against the
// distribution's CDF with p > 1e-4, which checks the whole shape.
#include <catch2/catch.hpp>
#include <cmath>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "simulator/generate.h"
#include "simulator/scenario.h"
#include "support/python.h"

using namespace plumbline::sim;

TEST_CASE("simulated noise has SciPy's moments and passes its KS test", "[reference][sim]") {
  struct shape {
    std::string kind, keys;
    nlohmann::json params;
  };
  const shape sh = GENERATE(
      shape{"normal", "", {}}, shape{"lognormal", "sigma_log = 0.5\n", {{"sigma_log", 0.5}}},
      shape{"student-t", "df = 6.0\n", {{"df", 6.0}}}, shape{"uniform", "", {}},
      shape{"mixture",
            "mixture_weight = 0.2\nmixture_offset = 2.5\nmixture_ratio = 0.7\n",
            {{"weight", 0.2}, {"offset", 2.5}, {"ratio", 0.7}}});
  const std::string text =
      "[[sensor]]\nline='l'\nstation='s'\nname='x'\nnominal=20.0\n"
      "spread=4.0\ndistribution='" +
      sh.kind + "'\n" + sh.keys;
  scenario_result r = load_scenario_string(text, "t.toml");
  REQUIRE(r.value);
  const std::size_t n = 200'000;
  sensor_stream st(*r.value, 0, 2026);
  std::vector<double> v(n);
  for (auto& x : v)
    x = st.next().value;
  double m = 0;
  for (double x : v)
    m += x;
  m /= n;
  double ss = 0;
  for (double x : v)
    ss += (x - m) * (x - m);
  const double sd = std::sqrt(ss / (n - 1));

  nlohmann::json req = sh.params;
  req["kind"] = sh.kind;
  req["nominal"] = 20.0;
  req["spread"] = 4.0;
  req["values"] = std::vector<double>(v.begin(), v.begin() + 20'000);
  const nlohmann::json ref =
      plumbline::testing::run_python("tests/reference/sim_distribution_reference.py", req);
  const double kurt = ref.at("excess_kurtosis").get<double>();
  const double se_mean = 4.0 / std::sqrt(double(n));
  const double se_sd = 4.0 * std::sqrt((kurt + 2) / n) / 2;
  INFO(sh.kind << ": mean " << m << " sd " << sd << " excess kurtosis " << kurt << " KS p "
               << ref.at("ks_pvalue").get<double>());
  CHECK(std::fabs(m - 20.0) < 4 * se_mean);
  CHECK(std::fabs(sd - 4.0) < 4 * se_sd);
  CHECK(ref.at("ks_pvalue").get<double>() > 1e-4);
}
