// compare.h: the `plumbline compare` subcommand (offline two-sample check).
//
// Reads a reference and a recent sample from CSV files, runs a permutation
// test and/or a bootstrap drift interval from core/, and prints the result
// for people or, with --json, as one JSON object for scripts. Without
// --interval the test runs; with --interval alone only the interval runs;
// with both, both. Exit codes: 0 success, 2 bad input or options.
#pragma once

#include <CLI/CLI.hpp>
#include <cstdint>
#include <optional>
#include <string>

namespace plumbline {

struct compare_args {
  std::string reference;
  std::string recent;
  std::string test;  // empty or "auto": ad for single values, energy for rows
  uint64_t resamples = 9999;
  std::string exact = "auto";
  uint64_t stop_after = 0;
  uint64_t seed = 1;
  double alpha = 0.05;
  bool json = false;
  // Drift interval (issued when `interval` is set).
  std::string interval;          // mean-diff, median-diff, quantile-diff:Q, sd-ratio, cpk
  std::string method = "bca";    // percentile, basic, bca
  double level = 0.95;
  std::string block = "auto";    // auto, none or a block length
  std::string block_scheme = "circular";
  std::optional<double> spec_lower, spec_upper;
};

// Declares the subcommand's options on `app`, writing into `args`.
CLI::App* add_compare_command(CLI::App& app, compare_args& args);

// Runs the subcommand; returns the process exit code.
int run_compare(const compare_args& args);

}  // namespace plumbline
