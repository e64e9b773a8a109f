// load.cc: the configuration loader. See load.h.
//
// Design note. toml++ parses the text into a tree that keeps the source
// position of every key and value. The loader walks the tree once: for each
// key it finds the entry in the option table (option_spec.h) and lets the
// entry read the value; nothing else reads values. Errors are collected, not
// returned at the first one, so one run of `plumbline check-config` shows
// everything to fix.
//
// Cross-field rules, per [[group]]:
//   - name and match are required;
//   - every_samples and every_seconds are not both 0;
//   - reference_file is given exactly when reference = "file";
//   - interval = "none" takes none of the interval_* keys, spec limits or
//     tolerance; spec_lower/spec_upper go with cpk only, and cpk needs one of
//     them, with spec_lower < spec_upper; tolerance does not go with cpk;
//   - intervals other than mean-diff need windows of 3 or more (core/);
//   - dimension >= 2 takes only multivariate tests and interval = "none";
//   - stop_after < resamples (or 0);
//   - the energy test holds reference_size + recent_size <= max_energy_pooled;
//   - a block length L leaves at least 2 blocks in each window;
//   - exact = "always" needs C(reference_size + recent_size, recent_size) <=
//     max_exact_splits.
// Across groups: names unique; no two groups with the same pattern; no group
// after one whose pattern matches every stream. Across sections: tcp and udp
// not both off; [http] listen not the same address as [ingest] tcp; not both
// a non-empty api_token and an api_token_file.
#include "config/load.h"

#include <algorithm>
#include <cerrno>
#include <cstring>
#include <fstream>
#include <set>

#include "config/glob.h"
#include "config/option_spec.h"
#include "core/permutation.h"
#include "core/statistic.h"

namespace plumbline::config {

std::string config_error::str() const {
  if (line == 0) return file + ": " + message;
  return file + ":" + std::to_string(line) + ":" + std::to_string(column) + ": " + message;
}

namespace {

using detail::find_spec;
using detail::group_draft;
using detail::issue;
using detail::parse_state;
using detail::position_of;
using detail::toml_quote;

class collector {
 public:
  explicit collector(std::string file) : file_(std::move(file)) {}

  void add(source_position at, std::string message) {
    if (errors_.size() >= max_reported_errors) {
      ++dropped_;
      return;
    }
    errors_.push_back({file_, at.line, at.column, std::move(message)});
  }
  bool empty() const { return errors_.empty(); }
  std::size_t size() const { return errors_.size(); }

  std::vector<config_error> finish() {
    std::stable_sort(errors_.begin(), errors_.end(),
                     [](const config_error& a, const config_error& b) {
                       return a.line != b.line ? a.line < b.line : a.column < b.column;
                     });
    if (dropped_ > 0)
      errors_.push_back({file_, 0, 0,
                         std::to_string(dropped_) + " more error" + (dropped_ == 1 ? "" : "s") +
                             " not shown (at most " + std::to_string(max_reported_errors) +
                             " are reported)"});
    return std::move(errors_);
  }

 private:
  std::string file_;
  std::vector<config_error> errors_;
  std::size_t dropped_ = 0;
};

// Levenshtein distance, for "did you mean" (keys are short).
std::size_t edit_distance(std::string_view a, std::string_view b) {
  std::vector<std::size_t> row(b.size() + 1);
  for (std::size_t j = 0; j <= b.size(); ++j)
    row[j] = j;
  for (std::size_t i = 1; i <= a.size(); ++i) {
    std::size_t diag = row[0];
    row[0] = i;
    for (std::size_t j = 1; j <= b.size(); ++j) {
      const std::size_t up = row[j];
      row[j] = std::min({row[j] + 1, row[j - 1] + 1, diag + (a[i - 1] == b[j - 1] ? 0 : 1)});
      diag = up;
    }
  }
  return row[b.size()];
}

// The closest candidate within a few edits, or "".
std::string_view nearest(std::string_view word, const std::vector<std::string_view>& candidates) {
  if (word.size() > 64) return {};
  const std::size_t limit = std::max<std::size_t>(2, word.size() / 4);
  std::string_view best;
  std::size_t best_d = limit + 1;
  for (std::string_view c : candidates) {
    const std::size_t d = edit_distance(word, c);
    if (d < best_d) {
      best = c;
      best_d = d;
    }
  }
  return best;
}

std::vector<std::string_view> keys_of(option_section s) {
  std::vector<std::string_view> keys;
  for (const option_info& o : option_table())
    if (o.section == s) keys.push_back(o.key);
  return keys;
}

// " (did you mean 'x'?)", " (it belongs in [evaluation])" or "".
std::string unknown_key_hint(option_section s, std::string_view key) {
  const std::string_view near = nearest(key, keys_of(s));
  if (!near.empty()) return " (did you mean '" + std::string(near) + "'?)";
  for (option_section other : all_sections)
    if (other != s && find_option(other, key))
      return " (it belongs in " + std::string(section_header(other)) + ")";
  return "";
}

// A key as written in messages: 'key', or quoted and cut short when it holds
// control characters or is long (a TOML key may be any quoted string).
std::string quoted_key(std::string_view k) {
  const bool plain = k.size() <= 64 && std::none_of(k.begin(), k.end(), [](char c) {
                       return static_cast<unsigned char>(c) < 0x20 || c == 0x7F || c == '\'';
                     });
  if (plain) return "'" + std::string(k) + "'";
  return toml_quote(k.size() > 64 ? std::string(k.substr(0, 61)) + "..." : std::string(k));
}

std::string quoted_key(const toml::key& k) {
  return quoted_key(k.str());
}

class loader {
 public:
  loader(std::string_view source_name, collector& errors) : errors_(errors) {
    st_.base_dir = std::filesystem::path(source_name).parent_path();
    st_.config.source = std::string(source_name);
  }

  std::optional<daemon_config> run(const toml::table& root) {
    bool have_groups = false;
    for (auto&& [k, v] : root) {
      const std::string_view name = k.str();
      if (name == "group") {
        have_groups = true;
        read_groups(k, v);
        continue;
      }
      std::optional<option_section> sec;
      for (option_section s : all_sections)
        if (s != option_section::group && section_key(s) == name) sec = s;
      if (sec) {
        read_section(*sec, k, v);
      } else {
        unknown_top_level(k, v);
      }
    }
    check_groups();
    check_sections();
    if (!errors_.empty()) return std::nullopt;
    daemon_config c = std::move(st_.config);
    if (!have_groups) c.groups = default_config().groups;
    return c;
  }

 private:
  struct group_problems {
    std::vector<std::pair<source_position, std::string>> unknown;  // keys not in the table
    std::vector<std::pair<source_position, std::string>> found;    // "key message"
    std::set<std::string> failed;                                  // keys whose value was rejected
  };

  struct group_seen {
    std::string name, match;
    source_position name_at, match_at;
  };

  void unknown_top_level(const toml::key& k, const toml::node& v) {
    const source_position at = position_of(k.source());
    std::vector<std::string_view> sections;
    for (option_section s : all_sections)
      sections.push_back(section_key(s));
    const std::string_view near = nearest(k.str(), sections);
    if (v.is_table() || v.is_array_of_tables()) {
      const bool array = !v.is_table();
      std::string m = "unknown section " + std::string(array ? "[[" : "[") + std::string(k.str()) +
                      (array ? "]]" : "]");
      if (!near.empty())
        m += " (did you mean " +
             std::string(near == "group" ? "[[group]]" : "[" + std::string(near) + "]") + "?)";
      else
        m += " (sections: [ingest], [http], [evaluation], [state], [log], [[group]])";
      errors_.add(at, m);
      return;
    }
    std::string m = "unknown key " + quoted_key(k) + " at the top level";
    bool placed = false;
    for (option_section s : all_sections)
      if (find_option(s, k.str())) {
        m += " (it belongs in " + std::string(section_header(s)) + ")";
        placed = true;
        break;
      }
    if (!placed)
      m += " (keys go in a section: [ingest], [http], [evaluation], [state], [log] or [[group]])";
    errors_.add(at, m);
  }

  void read_section(option_section s, const toml::key& k, const toml::node& v) {
    const std::string header(section_header(s));
    const auto* table = v.as_table();
    if (!table) {
      errors_.add(position_of(k.source()), header + " must be a table (a " + header +
                                               " header), got " + detail::describe_value(v));
      return;
    }
    for (auto&& [key, value] : *table) {
      const detail::option_spec* spec = find_spec(s, key.str());
      if (!spec) {
        errors_.add(position_of(key.source()), "unknown key " + quoted_key(key) + " in " + header +
                                                   unknown_key_hint(s, key.str()));
        continue;
      }
      const source_position at = position_of(value.source());
      const std::string full = std::string(section_key(s)) + "." + std::string(key.str());
      st_.given[full] = at;
      std::vector<issue> issues;
      spec->apply(value, st_, issues);
      if (!issues.empty()) section_failed_.insert(full);
      for (issue& i : issues)
        errors_.add(i.at.value_or(at), header + " " + std::string(key.str()) + " " + i.message);
    }
  }

  void read_groups(const toml::key& k, const toml::node& v) {
    const auto* arr = v.as_array();
    if (v.is_table()) {
      errors_.add(position_of(k.source()),
                  "groups are written [[group]] (an array of tables), not [group]");
      return;
    }
    if (!arr || arr->empty() || !arr->is_array_of_tables()) {
      errors_.add(
          position_of(k.source()),
          "'group' must be [[group]] tables, got " + detail::describe_value(v) +
              (arr && arr->empty() ? " that is empty (leave it out for the default group)" : ""));
      return;
    }
    std::size_t index = 0;
    for (const toml::node& el : *arr) {
      if (index == max_groups) {
        errors_.add(position_of(el.source()), "more than " + std::to_string(max_groups) +
                                                  " [[group]] tables; the rest are not read");
        return;
      }
      read_group(*el.as_table(), ++index);
    }
  }

  void read_group(const toml::table& table, std::size_t index) {
    st_.group = group_draft{};
    group_draft& g = st_.group;
    g.group.position = position_of(table.source());
    group_problems problems;
    for (auto&& [key, value] : table) {
      const detail::option_spec* spec = find_spec(option_section::group, key.str());
      if (!spec) {
        problems.unknown.push_back({position_of(key.source()), std::string(key.str())});
        continue;
      }
      const source_position at = position_of(value.source());
      g.given[std::string(key.str())] = at;
      std::vector<issue> issues;
      spec->apply(value, st_, issues);
      if (!issues.empty()) problems.failed.insert(std::string(key.str()));
      for (issue& i : issues)
        problems.found.push_back({i.at.value_or(at), std::string(key.str()) + " " + i.message});
    }
    finish_group(g, problems);

    // The label names the group once its name is known.
    const std::string name = g.group.name.empty() ? "" : " " + toml_quote(g.group.name);
    const std::string label = "[[group]]" + (name.empty() ? " #" + std::to_string(index) : name);
    for (const auto& [at, key] : problems.unknown)
      errors_.add(at, "unknown key " + quoted_key(key) + " in [[group]]" + name +
                          unknown_key_hint(option_section::group, key));
    for (auto& [at, m] : problems.found)
      errors_.add(at, label + " " + m);
    seen_.push_back(
        group_seen{g.group.name, g.group.match, given_at(g, "name"), given_at(g, "match")});
    if (problems.unknown.empty() && problems.found.empty())
      st_.config.groups.push_back(std::move(g.group));
  }

  static source_position given_at(const group_draft& g, std::string_view key) {
    const auto it = g.given.find(key);
    return it == g.given.end() ? g.group.position : it->second;
  }

  // The first of `keys` that is given, else the group header.
  static source_position first_given(const group_draft& g,
                                     std::initializer_list<std::string_view> keys) {
    for (std::string_view k : keys) {
      const auto it = g.given.find(k);
      if (it != g.given.end()) return it->second;
    }
    return g.group.position;
  }

  // Cross-field rules (see the design note). A rule that involves a key whose
  // value was rejected is skipped: its outcome would rest on the default the
  // key kept, not on what the file says.
  static void finish_group(group_draft& g, group_problems& problems) {
    auto has = [&](std::string_view k) { return g.given.find(k) != g.given.end(); };
    auto clean = [&](std::initializer_list<std::string_view> keys) {
      for (std::string_view k : keys)
        if (problems.failed.count(std::string(k))) return false;
      return true;
    };
    auto add = [&](source_position at, std::string m) {
      problems.found.push_back({at, std::move(m)});
    };
    monitor_settings& s = g.group.settings;

    if (!has("name")) add(g.group.position, "has no name (name = \"...\" is required)");
    if (!has("match")) add(g.group.position, "has no match pattern (match = \"...\" is required)");

    if (clean({"every_samples", "every_seconds"}) && s.every_samples == 0 && s.every_seconds == 0)
      add(first_given(g, {"every_samples", "every_seconds"}),
          "every_samples and every_seconds are both 0: the group would never be evaluated");

    if (clean({"reference", "reference_file"})) {
      if (s.policy == reference_policy::file && !has("reference_file"))
        add(given_at(g, "reference"), "reference = \"file\" needs reference_file = \"PATH.csv\"");
      if (s.policy != reference_policy::file && has("reference_file"))
        add(given_at(g, "reference_file"),
            "reference_file is read only with reference = \"file\" (reference is " +
                std::string(s.policy == reference_policy::baseline ? "\"baseline\""
                                                                   : "\"lagged\"") +
                ")");
    }

    const interval_options& iv = g.interval;
    const std::size_t smaller = std::min(s.reference_size, s.recent_size);
    const bool windows_clean = clean({"reference_size", "recent_size"});
    if (!clean({"interval"})) {
      // The quantity is unknown: no rule about it can be judged.
    } else if (g.interval_none) {
      for (std::string_view k :
           {"interval_method", "interval_level", "interval_resamples", "interval_block",
            "interval_block_scheme", "spec_lower", "spec_upper"})
        if (has(k)) add(given_at(g, k), std::string(k) + " has no effect with interval = \"none\"");
      if (has("tolerance"))
        add(given_at(g, "tolerance"),
            "tolerance needs a drift interval to hold against, but interval = \"none\"");
    } else {
      const std::string quantity = toml_quote(quantity_name(iv.quantity));
      if (iv.quantity == drift_quantity::cpk) {
        if (clean({"spec_lower", "spec_upper"})) {
          if (!iv.spec_lower && !iv.spec_upper)
            add(given_at(g, "interval"), "interval = \"cpk\" needs spec_lower, spec_upper or both");
          if (iv.spec_lower && iv.spec_upper && !(*iv.spec_lower < *iv.spec_upper))
            add(given_at(g, "spec_lower"),
                "spec_lower = " + detail::toml_float(*iv.spec_lower) +
                    " must be below spec_upper = " + detail::toml_float(*iv.spec_upper));
        }
        if (has("tolerance"))
          add(given_at(g, "tolerance"),
              "tolerance does not apply to interval = \"cpk\" (a capability index has no null "
              "value to hold a tolerance around)");
      } else {
        for (std::string_view k : {"spec_lower", "spec_upper"})
          if (has(k))
            add(given_at(g, k), std::string(k) +
                                    " goes with interval = \"cpk\" only (interval is " + quantity +
                                    ")");
      }
      if (windows_clean && iv.quantity != drift_quantity::mean_diff && smaller < 3)
        add(first_given(g, {"reference_size", "recent_size", "interval"}),
            "interval = " + quantity + " needs windows of at least 3 samples");
      if (windows_clean && clean({"interval_block"}) && iv.block_length > 1 &&
          std::size_t{2} * iv.block_length > smaller)
        add(given_at(g, "interval_block"), "interval_block = " + std::to_string(iv.block_length) +
                                               " leaves fewer than 2 blocks in a window of " +
                                               std::to_string(smaller) + " samples (at most " +
                                               std::to_string(smaller / 2) + ")");
    }

    if (clean({"dimension"}) && s.dimension >= 2) {
      if (clean({"tests"}))
        for (test_kind t : s.tests)
          if (!is_multivariate(t))
            add(has("tests") ? given_at(g, "tests") : given_at(g, "dimension"),
                "with dimension = " + std::to_string(s.dimension) +
                    ", tests may list only multivariate tests (tests = [\"energy\"]); " +
                    std::string(has("tests") ? "" : "the default ") + toml_quote(test_name(t)) +
                    " takes one value per sample");
      if (clean({"interval"}) && !g.interval_none)
        add(has("interval") ? given_at(g, "interval") : given_at(g, "dimension"),
            "dimension = " + std::to_string(s.dimension) +
                " needs interval = \"none\": drift intervals take one value per sample");
    }

    if (clean({"stop_after", "resamples"}) && s.permutation.stop_after != 0 &&
        s.permutation.stop_after >= s.permutation.resamples)
      add(first_given(g, {"stop_after", "resamples"}),
          "stop_after = " + std::to_string(s.permutation.stop_after) +
              " must be below resamples = " + std::to_string(s.permutation.resamples) +
              " (or 0 for no sequential stopping)");

    const bool energy = s.dimension >= 2 || std::find(s.tests.begin(), s.tests.end(),
                                                      test_kind::energy) != s.tests.end();
    if (windows_clean && clean({"tests", "dimension"}) && energy &&
        s.reference_size + s.recent_size > max_energy_pooled)
      add(first_given(g, {"reference_size", "recent_size", "tests"}),
          "the energy test holds at most " + std::to_string(max_energy_pooled) +
              " pooled samples, but reference_size + recent_size = " +
              std::to_string(s.reference_size + s.recent_size));

    const uint32_t block = s.permutation.block_length;
    if (windows_clean && clean({"block"}) && block > 1 && std::size_t{2} * block > smaller)
      add(given_at(g, "block"),
          "block = " + std::to_string(block) + " leaves fewer than 2 blocks in a window of " +
              std::to_string(smaller) + " samples (at most " + std::to_string(smaller / 2) + ")");

    if (windows_clean && clean({"exact"}) && s.permutation.exact == exact_mode::always) {
      const uint64_t splits = split_count(s.reference_size, s.recent_size);
      if (splits > max_exact_splits)
        add(given_at(g, "exact"),
            "exact = \"always\" would enumerate " +
                (splits == UINT64_MAX ? std::string("more than 2^64") : std::to_string(splits)) +
                " splits of windows of " + std::to_string(s.reference_size) + " and " +
                std::to_string(s.recent_size) + "; at most " + std::to_string(max_exact_splits) +
                " are allowed");
    }

    s.interval = g.interval_none ? std::nullopt : std::optional<interval_options>(g.interval);
  }

  void check_groups() {
    for (std::size_t j = 0; j < seen_.size(); ++j) {
      const group_seen& b = seen_[j];
      for (std::size_t i = 0; i < j; ++i) {
        const group_seen& a = seen_[i];
        const std::string a_label =
            a.name.empty() ? "#" + std::to_string(i + 1) : toml_quote(a.name);
        const std::string b_label =
            "[[group]] " + (b.name.empty() ? "#" + std::to_string(j + 1) : toml_quote(b.name));
        if (!b.name.empty() && a.name == b.name)
          errors_.add(b.name_at, b_label + " name is already used by the group at line " +
                                     std::to_string(a.name_at.line));
        if (b.match.empty() || a.match.empty()) continue;
        if (a.match == b.match) {
          errors_.add(b.match_at, b_label + " match " + toml_quote(b.match) +
                                      " is the same as group " + a_label + "'s (line " +
                                      std::to_string(a.match_at.line) +
                                      "), which is tried first: this group would never be used");
          break;
        }
        if (glob_matches_everything(a.match)) {
          errors_.add(b.match_at, b_label + " can never be used: group " + a_label + " (line " +
                                      std::to_string(a.match_at.line) +
                                      ") matches every stream and is tried first");
          break;
        }
      }
    }
  }

  source_position section_at(std::string_view key) const {
    const auto it = st_.given.find(key);
    return it == st_.given.end() ? source_position{} : it->second;
  }
  bool section_has(std::string_view key) const { return st_.given.find(key) != st_.given.end(); }

  void check_sections() {
    const daemon_config& c = st_.config;
    auto clean = [&](std::string_view a, std::string_view b) {
      return !section_failed_.count(std::string(a)) && !section_failed_.count(std::string(b));
    };
    if (clean("ingest.tcp", "ingest.udp") && !c.ingest.tcp.enabled && !c.ingest.udp.enabled) {
      const source_position t = section_at("ingest.tcp"), u = section_at("ingest.udp");
      const source_position at =
          (u.line > t.line || (u.line == t.line && u.column > t.column)) ? u : t;
      errors_.add(at,
                  "[ingest] tcp and udp are both off: the daemon would receive no "
                  "measurements");
    }
    const host_port& h = c.http.listen;
    const host_port& t = c.ingest.tcp;
    if (clean("http.listen", "ingest.tcp") && h.enabled && t.enabled && h.port != 0 &&
        h.port == t.port && h.host == t.host)
      errors_.add(section_has("http.listen") ? section_at("http.listen") : section_at("ingest.tcp"),
                  "[http] listen " + format_host_port(h) + " is the address of [ingest] tcp too");
    if (st_.token_inline && st_.token_from_file)
      errors_.add(section_at("http.api_token_file"),
                  "[http] api_token and api_token_file are both set; keep one (the file is "
                  "safer)");
  }

  collector& errors_;
  parse_state st_;
  std::vector<group_seen> seen_;
  std::set<std::string> section_failed_;  // "ingest.tcp": keys whose value was rejected
};

}  // namespace

load_result load_config_string(std::string_view text, std::string_view source_name) {
  collector errors{std::string(source_name)};
  load_result result;
  if (text.size() > max_config_bytes) {
    errors.add({}, "too large (" + std::to_string(text.size()) + " bytes; at most " +
                       std::to_string(max_config_bytes) + ")");
    result.errors = errors.finish();
    return result;
  }
  toml::table root;
  try {
    root = toml::parse(text, source_name);
  } catch (const toml::parse_error& e) {
    source_position at = position_of(e.source());
    if (at.line == 0) at = {1, 1};
    errors.add(at, "invalid TOML: " + std::string(e.description()));
    result.errors = errors.finish();
    return result;
  }
  loader l(source_name, errors);
  result.config = l.run(root);
  result.errors = errors.finish();
  if (!result.errors.empty()) result.config.reset();
  return result;
}

std::variant<std::string, config_error> read_config_text(const std::string& path) {
  auto fail = [&](const std::string& why) { return config_error{path, 0, 0, "cannot read: " + why}; };
  std::error_code ec;
  if (std::filesystem::is_directory(path, ec)) return fail("it is a directory");
  std::ifstream in(path, std::ios::binary);
  if (!in) return fail(std::strerror(errno));
  std::string text(max_config_bytes + 1, '\0');
  in.read(text.data(), static_cast<std::streamsize>(text.size()));
  if (in.bad()) return fail(std::strerror(errno));
  text.resize(static_cast<std::size_t>(in.gcount()));
  if (text.size() > max_config_bytes)
    return config_error{path, 0, 0,
                        "too large (more than " + std::to_string(max_config_bytes) + " bytes)"};
  return text;
}

load_result load_config_file(const std::string& path) {
  auto text = read_config_text(path);
  if (auto* e = std::get_if<config_error>(&text)) {
    load_result result;
    result.errors.push_back(std::move(*e));
    return result;
  }
  return load_config_string(std::get<std::string>(text), path);
}

}  // namespace plumbline::config
