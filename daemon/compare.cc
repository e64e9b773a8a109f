// compare.cc: `plumbline compare`. See compare.h.
#include "daemon/compare.h"

#include <charconv>
#include <cmath>
#include <cstdio>
#include <iostream>
#include <nlohmann/json.hpp>
#include <sstream>

#include "core/bootstrap.h"
#include "core/permutation.h"
#include "core/rng.h"
#include "daemon/csv_input.h"
#include "daemon/result_json.h"

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
          {"auto", "mean-diff", "median-diff", "welch", "ks", "cvm", "ad", "energy"}));
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
  cmd->add_option("--interval", a.interval,
                  "drift interval of mean-diff, median-diff, quantile-diff:Q (0<Q<1), sd-ratio "
                  "or cpk (needs --spec-lower and/or --spec-upper)");
  cmd->add_option("--method", a.method, "interval method: percentile, basic or bca")
      ->check(CLI::IsMember({"percentile", "basic", "bca"}))
      ->capture_default_str();
  cmd->add_option("--level", a.level, "interval confidence level")
      ->check(CLI::Range(0.5, 0.9999))
      ->capture_default_str();
  cmd->add_option("--block", a.block,
                  "resampling blocks: auto (blocks only when the data are autocorrelated), none, "
                  "or a block length")
      ->capture_default_str();
  cmd->add_option("--block-scheme", a.block_scheme,
                  "bootstrap blocks: circular (fixed length) or stationary (random length)")
      ->check(CLI::IsMember({"circular", "stationary"}))
      ->capture_default_str();
  cmd->add_option("--spec-lower", a.spec_lower, "lower specification limit (for cpk)");
  cmd->add_option("--spec-upper", a.spec_upper, "upper specification limit (for cpk)");
  cmd->add_flag("--json", a.json, "print one JSON object instead of text");
  return cmd;
}

namespace {

// Parses --interval and the options that go with it into `o`.
expected<bool> interval_from_args(const compare_args& a, interval_options& o) {
  const std::string& q = a.interval;
  if (q == "mean-diff") {
    o.quantity = drift_quantity::mean_diff;
  } else if (q == "median-diff") {
    o.quantity = drift_quantity::median_diff;
  } else if (q == "sd-ratio") {
    o.quantity = drift_quantity::sd_ratio;
  } else if (q == "cpk") {
    o.quantity = drift_quantity::cpk;
    if (!a.spec_lower && !a.spec_upper)
      return make_error("--interval cpk needs --spec-lower and/or --spec-upper");
  } else if (q.rfind("quantile-diff:", 0) == 0) {
    o.quantity = drift_quantity::quantile_diff;
    double v;
    if (!parse_number(q.substr(14), v) || !(v > 0 && v < 1))
      return make_error("--interval quantile-diff:Q needs a Q strictly between 0 and 1, got \"" +
                        q.substr(14) + "\"");
    o.quantile = v;
  } else {
    return make_error("--interval: unknown quantity \"" + q +
                      "\" (mean-diff, median-diff, quantile-diff:Q, sd-ratio, cpk)");
  }
  if ((a.spec_lower || a.spec_upper) && o.quantity != drift_quantity::cpk)
    return make_error("--spec-lower/--spec-upper go with --interval cpk");
  o.spec_lower = a.spec_lower;
  o.spec_upper = a.spec_upper;
  o.method = a.method == "percentile" ? interval_method::percentile
             : a.method == "basic"    ? interval_method::basic
                                      : interval_method::bca;
  o.level = a.level;
  if (a.resamples > max_bootstrap_resamples)
    return make_error("--resamples: a drift interval takes at most " +
                      std::to_string(max_bootstrap_resamples) + " resamples");
  o.resamples = a.resamples;
  o.scheme = a.block_scheme == "stationary" ? block_scheme::stationary : block_scheme::circular;
  return true;
}

// --block: auto = 0, none = 1, or a length >= 1.
expected<uint32_t> block_from_args(const std::string& b) {
  if (b == "auto") return uint32_t{0};
  if (b == "none") return uint32_t{1};
  uint32_t v = 0;
  const auto res = std::from_chars(b.data(), b.data() + b.size(), v);
  if (res.ec != std::errc() || res.ptr != b.data() + b.size() || v == 0)
    return make_error("--block takes auto, none or a block length of 1 or more, got \"" + b +
                      "\"");
  return v;
}

}  // namespace

int run_compare(const compare_args& a) {
  const bool want_interval = !a.interval.empty();
  const bool want_test = !want_interval || !a.test.empty();
  interval_options iopt;
  if (want_interval) {
    if (auto ok = interval_from_args(a, iopt); !ok) return fail(ok.err().message);
  } else if (a.spec_lower || a.spec_upper) {
    return fail("--spec-lower/--spec-upper go with --interval cpk");
  }
  auto block = block_from_args(a.block);
  if (!block) return fail(block.err().message);
  iopt.block_length = block.value();

  auto ref = read_csv_sample(a.reference);
  if (!ref) return fail(ref.err().message);
  auto rec = read_csv_sample(a.recent);
  if (!rec) return fail(rec.err().message);
  if (ref->width != rec->width)
    return fail(a.reference + " has rows of " + std::to_string(ref->width) + " values but " +
                a.recent + " has rows of " + std::to_string(rec->width));
  if (want_interval && ref->width > 1)
    return fail("drift intervals take one value per row, but the files have rows of " +
                std::to_string(ref->width) + " values");

  test_kind test = ref->width == 1 ? test_kind::ad : test_kind::energy;
  if (!a.test.empty() && a.test != "auto") test = *parse_test_name(a.test);
  if (want_test && ref->width > 1 && !is_multivariate(test))
    return fail("test " + a.test + " takes one value per row, but the files have rows of " +
                std::to_string(ref->width) + " values; use --test energy");

  permutation_options opt;
  opt.test = test;
  opt.resamples = a.resamples;
  opt.exact = a.exact == "always"  ? exact_mode::always
              : a.exact == "never" ? exact_mode::never
                                   : exact_mode::automatic;
  opt.stop_after = a.stop_after;
  opt.block_length = block.value();

  // One generator for the whole call: the test draws first, then the interval.
  rng gen(a.seed);
  std::optional<permutation_result> test_result;
  if (want_test) {
    permutation_engine engine;
    auto res = ref->width == 1
                   ? engine.run(ref->values, rec->values, opt, gen)
                   : engine.run(as_matrix(ref.value()), as_matrix(rec.value()), opt, gen);
    if (!res) return fail(res.err().message);
    test_result = res.value();
  }
  std::optional<interval_result> interval;
  if (want_interval) {
    bootstrap_engine engine;
    auto res = engine.run(ref->values, rec->values, iopt, gen);
    if (!res) return fail(res.err().message);
    interval = res.value();
  }

  if (a.json) {
    nlohmann::json out;
    if (test_result) {
      nlohmann::json t = test_json(*test_result);
      t["p_value_level"] = opt.ci_level;
      t["seed"] = a.seed;
      out["test"] = t;
    }
    if (interval) {
      nlohmann::json j = interval_json(*interval);
      j["seed"] = a.seed;
      out["interval"] = j;
    }
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
  if (test_result) {
    const permutation_result& r = *test_result;
    o << "test       " << test_name(test) << ": " << describe(test);
    if (r.block_length > 1) o << ", permuting blocks of " << r.block_length;
    o << "\n";
    if (r.constant_data) {
      o << "result     every value in both samples is the same (" << fmt(ref->values[0])
        << "): nothing to compare, p = 1. A stuck sensor or a resolution too coarse?\n";
    } else {
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
    }
  }
  if (interval) {
    const interval_result& r = *interval;
    std::string what(quantity_name(r.quantity));
    if (r.quantity == drift_quantity::quantile_diff) what += " at q = " + fmt(r.quantile);
    o << "drift      " << what << " = " << fmt(r.estimate, 6) << ", " << fmt(100 * r.level, 3)
      << "% " << method_name(r.method_used) << " interval [" << fmt(r.lower, 6) << ", "
      << fmt(r.upper, 6) << "]\n";
    o << "           reference " << fmt(r.reference_value) << ", recent " << fmt(r.recent_value)
      << "; " << r.resamples << " resamples, ";
    if (r.block_length > 1)
      o << scheme_name(r.scheme) << " blocks of " << r.block_length;
    else
      o << "independent resampling";
    o << "\n";
    o << "dependence lag-1 autocorrelation reference " << fmt(r.reference_dependence.lag1, 3)
      << ", recent " << fmt(r.recent_dependence.lag1, 3) << " (standard errors "
      << fmt(r.reference_dependence.lag1_se, 2) << ", " << fmt(r.recent_dependence.lag1_se, 2)
      << ")\n";
    if (r.degenerate) o << "note       degenerate: " << r.note << "\n";
    else if (!r.note.empty()) o << "note       " << r.note << "\n";
  }
  o << "           Advisory only: not a substitute for site quality procedures or an "
       "engineer's judgement.\n";
  std::cout << o.str();
  return 0;
}

}  // namespace plumbline
