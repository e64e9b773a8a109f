// result_json.cc: see result_json.h.
#include "daemon/result_json.h"

#include <string>

#include "core/statistic.h"

namespace plumbline {
namespace {

nlohmann::json dependence_json(const dependence_summary& d) {
  return {{"lag1_autocorrelation", d.lag1},
          {"lag1_standard_error", d.lag1_se},
          {"dependent", d.dependent},
          {"block_length_circular", d.block_circular},
          {"block_length_stationary", d.block_stationary}};
}

}  // namespace

nlohmann::json test_json(const permutation_result& r) {
  nlohmann::json t;
  t["name"] = std::string(test_name(r.test));
  t["statistic"] = r.statistic;
  if (r.test == test_kind::ad && !r.constant_data && r.n_reference + r.n_recent > 3)
    t["statistic_standardized"] = ad_standardized(r.statistic, r.n_reference, r.n_recent);
  t["p_value"] = r.p_value;
  t["p_value_low"] = r.p_low;
  t["p_value_high"] = r.p_high;
  t["resamples"] = r.resamples;
  t["exceedances"] = r.exceedances;
  t["exact"] = r.exact;
  t["stopped_early"] = r.stopped_early;
  t["constant_data"] = r.constant_data;
  t["block_length"] = r.block_length;
  t["n_reference"] = r.n_reference;
  t["n_recent"] = r.n_recent;
  return t;
}

nlohmann::json interval_json(const interval_result& r) {
  nlohmann::json j;
  j["quantity"] = std::string(quantity_name(r.quantity));
  if (r.quantity == drift_quantity::quantile_diff) j["quantile"] = r.quantile;
  j["method"] = std::string(method_name(r.method));
  j["method_used"] = std::string(method_name(r.method_used));
  j["level"] = r.level;
  j["estimate"] = r.estimate;
  j["lower"] = r.lower;
  j["upper"] = r.upper;
  j["standard_error"] = r.standard_error;
  j["reference_value"] = r.reference_value;
  j["recent_value"] = r.recent_value;
  j["resamples"] = r.resamples;
  j["block_length"] = r.block_length;
  j["block_scheme"] = r.block_length > 1 ? std::string(scheme_name(r.scheme)) : "none";
  j["degenerate"] = r.degenerate;
  if (!r.note.empty()) j["note"] = r.note;
  if (r.method_used == interval_method::bca) {
    j["bias_correction"] = r.bias_correction;
    j["acceleration"] = r.acceleration;
  }
  j["dependence"] = {{"reference", dependence_json(r.reference_dependence)},
                     {"recent", dependence_json(r.recent_dependence)}};
  j["n_reference"] = r.n_reference;
  j["n_recent"] = r.n_recent;
  return j;
}

}  // namespace plumbline
