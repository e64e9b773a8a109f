// compare.cc: `plumbline compare`. See compare.h.
#include "daemon/compare.h"

#include <cmath>
#include <cstdio>
#include <iostream>
#include <nlohmann/json.hpp>
#include <sstream>

#include "core/permutation.h"
#include "core/rng.h"
#include "daemon/csv_input.h"

namespace plumbline {

namespace {

std::string describe(test_kind t) {
  switch (t) {
    case test_kind::mean_diff: return "difference of means (recent - reference)";
    case test_kind::median_diff: return "difference of medians (recent - reference)";
    case test_kind::welch: return "Welch's studentized difference of means";
    case test_kind::ks: return "Kolmogorov-Smirnov D";
    case test_kind::cvm: return "Cramer-von Mises T";
    case test_kind::ad: return "Anderson-Darling k-sample A2akN";
    case test_kind::energy: return "energy distance statistic";
  }
  return "";
}

std::string fmt(double v, int digits = 6) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.*g", digits, v);
  return buf;
}

int fail(const std::string& message) {
  std::cerr << "plumbline compare: " << message << "\n";
  return 2;
}

struct moments {
  double mean = 0, sd = 0;
};

moments column_moments(const csv_sample& s, std::size_t col) {
  const std::size_t n = s.rows();
  double sum = 0;
  for (std::size_t i = 0; i < n; ++i) sum += s.values[i * s.width + col];
  moments m;
  m.mean = sum / static_cast<double>(n);
  double ss = 0;
  for (std::size_t i = 0; i < n; ++i) {
    const double d = s.values[i * s.width + col] - m.mean;
    ss += d * d;
  }
  m.sd = n > 1 ? std::sqrt(ss / static_cast<double>(n - 1)) : 0;
  return m;
}

nlohmann::json sample_json(const csv_sample& s) {
  nlohmann::json j;
  j["file"] = s.source;
  j["n"] = s.rows();
  j["width"] = s.width;
  nlohmann::json means = nlohmann::json::array(), sds = nlohmann::json::array();
  for (std::size_t c = 0; c < s.width; ++c) {
    const moments m = column_moments(s, c);
    means.push_back(m.mean);
    sds.push_back(m.sd);
  }
  j["mean"] = means;
  j["sd"] = sds;
  return j;
}

Eigen::MatrixXd as_matrix(const csv_sample& s) {
  Eigen::MatrixXd m(static_cast<Eigen::Index>(s.rows()), static_cast<Eigen::Index>(s.width));
  for (std::size_t i = 0; i < s.rows(); ++i)
    for (std::size_t c = 0; c < s.width; ++c)
      m(static_cast<Eigen::Index>(i), static_cast<Eigen::Index>(c)) = s.values[i * s.width + c];
  return m;
}

}  // namespace

CLI::App* add_compare_command(CLI::App& app, compare_args& a) {
  CLI::App* cmd = app.add_subcommand(
      "compare", "Test whether a recent sample comes from the same distribution as a reference "
                 "sample (permutation test on CSV files)");
  cmd->add_option("--reference", a.reference, "CSV file of the reference sample")->required();
  cmd->add_option("--recent", a.recent, "CSV file of the recent sample")->required();
  cmd->add_option("--test", a.test,
                  "mean-diff, median-diff, welch, ks, cvm, ad or energy; auto = ad for one "
                  "value per row, energy for rows of several values")
      ->check(CLI::IsMember(
          {"auto", "mean-diff", "median-diff", "welch", "ks", "cvm", "ad", "energy"}))
      ->capture_default_str();
  cmd->add_option("--resamples", a.resamples, "Monte Carlo resamples B")
      ->check(CLI::Range(uint64_t{1}, max_resamples))
      ->capture_default_str();
  cmd->add_option("--exact", a.exact,
                  "auto: enumerate all splits when there are at most 100000; always; never")
      ->check(CLI::IsMember({"auto", "always", "never"}))
      ->capture_default_str();
  cmd->add_option("--stop-after", a.stop_after,
                  "stop after H exceedances (Besag-Clifford sequential p-value); 0 = off")
      ->check(CLI::Range(uint64_t{0}, max_resamples))
      ->capture_default_str();
  cmd->add_option("--seed", a.seed, "random seed; the same seed and data give the same result")
      ->capture_default_str();
  cmd->add_option("--alpha", a.alpha, "significance level for the verdict line")
      ->check(CLI::Range(1e-12, 0.5))
      ->capture_default_str();
  cmd->add_flag("--json", a.json, "print one JSON object instead of text");
  return cmd;
}

int run_compare(const compare_args& a) {
  auto ref = read_csv_sample(a.reference);
  if (!ref) return fail(ref.err().message);
  auto rec = read_csv_sample(a.recent);
  if (!rec) return fail(rec.err().message);
  if (ref->width != rec->width)
    return fail(a.reference + " has rows of " + std::to_string(ref->width) + " values but " +
                a.recent + " has rows of " + std::to_string(rec->width));

  test_kind test;
  if (a.test == "auto") {
    test = ref->width == 1 ? test_kind::ad : test_kind::energy;
  } else {
    test = *parse_test_name(a.test);  // validated by the option's check
  }
  if (ref->width > 1 && !is_multivariate(test))
    return fail("test " + a.test + " takes one value per row, but the files have rows of " +
                std::to_string(ref->width) + " values; use --test energy");

  permutation_options opt;
  opt.test = test;
  opt.resamples = a.resamples;
  opt.exact = a.exact == "always"  ? exact_mode::always
              : a.exact == "never" ? exact_mode::never
                                   : exact_mode::automatic;
  opt.stop_after = a.stop_after;

  rng gen(a.seed);
  permutation_engine engine;
  auto res = ref->width == 1 ? engine.run(ref->values, rec->values, opt, gen)
                             : engine.run(as_matrix(ref.value()), as_matrix(rec.value()), opt, gen);
  if (!res) return fail(res.err().message);
  const permutation_result& r = res.value();

  if (a.json) {
    nlohmann::json t;
    t["name"] = std::string(test_name(test));
    t["statistic"] = r.statistic;
    if (test == test_kind::ad && !r.constant_data && r.n_reference + r.n_recent > 3)
      t["statistic_standardized"] = ad_standardized(r.statistic, r.n_reference, r.n_recent);
    t["p_value"] = r.p_value;
    t["p_value_low"] = r.p_low;
    t["p_value_high"] = r.p_high;
    t["p_value_level"] = opt.ci_level;
    t["resamples"] = r.resamples;
    t["exceedances"] = r.exceedances;
    t["exact"] = r.exact;
    t["stopped_early"] = r.stopped_early;
    t["constant_data"] = r.constant_data;
    t["seed"] = a.seed;
    t["n_reference"] = r.n_reference;
    t["n_recent"] = r.n_recent;
    nlohmann::json out;
    out["test"] = t;
    out["reference"] = sample_json(ref.value());
    out["recent"] = sample_json(rec.value());
    std::cout << out.dump(2) << "\n";
    return 0;
  }

  std::ostringstream o;
  auto sample_line = [&](const char* label, const csv_sample& s) {
    o << label << s.source << ": " << s.rows() << (s.rows() == 1 ? " sample" : " samples");
    for (std::size_t c = 0; c < s.width; ++c) {
      const moments m = column_moments(s, c);
      o << (c == 0 ? ", " : "; ");
      if (s.width > 1)
        o << (c < s.header.size() ? s.header[c] : "column " + std::to_string(c + 1)) << " ";
      o << "mean " << fmt(m.mean) << " sd " << fmt(m.sd);
    }
    o << "\n";
  };
  sample_line("reference  ", ref.value());
  sample_line("recent     ", rec.value());
  o << "test       " << test_name(test) << ": " << describe(test) << "\n";
  if (r.constant_data) {
    o << "result     every value in both samples is the same (" << fmt(ref->values[0])
      << "): nothing to compare, p = 1. A stuck sensor or a resolution too coarse?\n";
    std::cout << o.str();
    return 0;
  }
  o << "statistic  " << fmt(r.statistic, 8);
  if (test == test_kind::ad && r.n_reference + r.n_recent > 3)
    o << " (standardized " << fmt(ad_standardized(r.statistic, r.n_reference, r.n_recent))
      << ")";
  o << "\n";
  o << "p-value    " << fmt(r.p_value, 4);
  if (r.exact) {
    o << " exact, all " << r.resamples << " splits enumerated\n";
  } else {
    o << " Monte Carlo, " << r.exceedances << " of " << r.resamples
      << " resamples at least as extreme";
    if (r.stopped_early) o << " (stopped early after " << a.stop_after << ")";
    o << "; " << fmt(100 * opt.ci_level, 3) << "% interval [" << fmt(r.p_low, 4) << ", "
      << fmt(r.p_high, 4) << "], seed " << a.seed << "\n";
  }
  o << "reading    ";
  if (r.p_value < a.alpha)
    o << "p < " << fmt(a.alpha) << ": the recent sample is unlikely to come from the "
      << "reference distribution.\n";
  else
    o << "p >= " << fmt(a.alpha) << ": no evidence that the recent sample differs from the "
      << "reference.\n";
  o << "           Advisory only: not a substitute for site quality procedures or an "
       "engineer's judgement.\n";
  std::cout << o.str();
  return 0;
}

}  // namespace plumbline
