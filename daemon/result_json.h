// result_json.h: engine results as JSON, one shape for every output.
//
// Purpose. `plumbline compare --json` and the daemon's /api/streams answers
// describe test results and drift intervals with the same members, so a
// script written against one reads the other.
//
// Thread-safety: pure functions.
#pragma once

#include <nlohmann/json.hpp>

#include "core/bootstrap.h"
#include "core/permutation.h"

namespace plumbline {

// name, statistic (statistic_standardized for ad), p_value, p_value_low,
// p_value_high, resamples, exceedances, exact, stopped_early, constant_data,
// block_length, n_reference, n_recent.
nlohmann::json test_json(const permutation_result& r);

// quantity (quantile), method, method_used, level, estimate, lower, upper,
// standard_error, reference_value, recent_value, resamples, block_length,
// block_scheme, degenerate, note, bias_correction and acceleration (bca),
// dependence.
nlohmann::json interval_json(const interval_result& r);

}  // namespace plumbline
