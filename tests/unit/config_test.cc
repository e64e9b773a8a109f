// config_test.cc: the daemon configuration of config/ (options, option
// table, loader, glob patterns).
//
// Sources of the expected values, check by check:
//   - TOML v1.0.0 (toml.io/en/v1.0.0): defining a key twice is invalid; an
//     integer that does not fit 64 signed bits must be an error. Positions of
//     syntax errors are toml++'s own, pinned as it reports them.
//   - POSIX fnmatch(3) with flags 0 (glibc): '*' matches any run including
//     '/', '?' one character. It is the oracle for glob_match on patterns
//     without '[' and '\' (where the two differ on purpose).
//   - RFC 3986 section 3.2.2: an IPv6 literal in an authority goes in
//     brackets. RFC 793: ports are 16-bit (0 .. 65535). RFC 1123 section 2.1
//     and RFC 1035 section 2.3.4: labels of at most 63 characters, names of
//     at most 253 in text form (the 253 from memory).
//   - RFC 6750 section 2.1: the b64token syntax of bearer tokens.
//   - The bounds of the option table (16 .. 1048576 and so on) are the
//     project's own limits, and the engine limits come from core/ headers;
//     there is no outside source for them: the checks test that the loader
//     enforces exactly what the table states.
//   - config/plumbline.example.toml: every key must be documented there with
//     its default, and the file must load to what it says.
#include <fnmatch.h>
#include <toml++/toml.h>

#include <algorithm>
#include <catch2/catch.hpp>
#include <cctype>
#include <fstream>
#include <limits>
#include <map>
#include <optional>
#include <set>
#include <sstream>
#include <string>
#include <vector>

#include "config/glob.h"
#include "config/load.h"
#include "config/option_table.h"
#include "config/options.h"
#include "core/bootstrap.h"
#include "core/permutation.h"
#include "core/rng.h"
#include "support/cli.h"

namespace {

using Catch::Matchers::Contains;
using Catch::Matchers::StartsWith;
using namespace plumbline;
using namespace plumbline::config;

const std::string example_path =
    std::string(PLUMBLINE_SOURCE_DIR) + "/config/plumbline.example.toml";

load_result load(std::string_view text) {
  return load_config_string(text, "larkspur.toml");
}

std::vector<std::string> error_lines(const load_result& r) {
  std::vector<std::string> out;
  for (const config_error& e : r.errors)
    out.push_back(e.str());
  return out;
}

std::string joined(const load_result& r) {
  std::string s;
  for (const std::string& l : error_lines(r))
    s += l + "\n";
  return s;
}

daemon_config load_ok(std::string_view text) {
  load_result r = load(text);
  INFO(joined(r));
  REQUIRE(r.errors.empty());
  REQUIRE(r.config.has_value());
  return *r.config;
}

// The one error a text must give, as "FILE:LINE:COLUMN: message".
std::string only_error(std::string_view text) {
  load_result r = load(text);
  INFO(joined(r));
  REQUIRE(r.errors.size() == 1);
  CHECK_FALSE(r.config.has_value());
  return r.errors[0].str();
}

// A group of line B's fill weights, lines 1-3; callers append from line 4.
const std::string fill_group =
    "[[group]]\n"
    "name = \"fill\"\n"
    "match = \"larkspur/line_b/fill_*\"\n";

void check_same(const monitor_settings& a, const monitor_settings& b) {
  CHECK(a.policy == b.policy);
  CHECK(a.reference_size == b.reference_size);
  CHECK(a.recent_size == b.recent_size);
  CHECK(a.dimension == b.dimension);
  CHECK(a.every_samples == b.every_samples);
  CHECK(a.every_seconds == b.every_seconds);
  CHECK(a.tests == b.tests);
  CHECK(a.permutation.resamples == b.permutation.resamples);
  CHECK(a.permutation.exact == b.permutation.exact);
  CHECK(a.permutation.exact_limit == b.permutation.exact_limit);
  CHECK(a.permutation.stop_after == b.permutation.stop_after);
  CHECK(a.permutation.ci_level == b.permutation.ci_level);
  CHECK(a.permutation.block_length == b.permutation.block_length);
  REQUIRE(a.interval.has_value() == b.interval.has_value());
  if (a.interval) {
    CHECK(a.interval->quantity == b.interval->quantity);
    CHECK(a.interval->quantile == b.interval->quantile);
    CHECK(a.interval->spec_lower == b.interval->spec_lower);
    CHECK(a.interval->spec_upper == b.interval->spec_upper);
    CHECK(a.interval->method == b.interval->method);
    CHECK(a.interval->level == b.interval->level);
    CHECK(a.interval->resamples == b.interval->resamples);
    CHECK(a.interval->block_length == b.interval->block_length);
    CHECK(a.interval->scheme == b.interval->scheme);
  }
  CHECK(a.alarm.alpha == b.alarm.alpha);
  CHECK(a.alarm.raise_after == b.alarm.raise_after);
  CHECK(a.alarm.clear_after == b.alarm.clear_after);
  CHECK(a.alarm.tolerance == b.alarm.tolerance);
  CHECK(a.alarm.history_limit == b.alarm.history_limit);
}

void check_same_sections(const daemon_config& a, const daemon_config& b) {
  CHECK(format_host_port(a.ingest.tcp) == format_host_port(b.ingest.tcp));
  CHECK(format_host_port(a.ingest.udp) == format_host_port(b.ingest.udp));
  CHECK(a.ingest.max_line_bytes == b.ingest.max_line_bytes);
  CHECK(a.ingest.max_streams == b.ingest.max_streams);
  CHECK(a.ingest.max_connections == b.ingest.max_connections);
  CHECK(a.ingest.idle_timeout_seconds == b.ingest.idle_timeout_seconds);
  CHECK(format_host_port(a.http.listen) == format_host_port(b.http.listen));
  CHECK(a.http.api_token == b.http.api_token);
  CHECK(a.http.api_token_file == b.http.api_token_file);
  CHECK(a.http.max_connections == b.http.max_connections);
  CHECK(a.evaluation.threads == b.evaluation.threads);
  CHECK(a.evaluation.seed == b.evaluation.seed);
  CHECK(a.log.level == b.log.level);
}

std::string read_file(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}

// The example file's lines, each with the section it is in ("ingest", ...,
// "group"; "" before the first header).
struct example_line {
  std::string section;
  std::string text;
  std::size_t number;
};

bool is_word_char(char c) {
  return std::isalnum(static_cast<unsigned char>(c)) || c == '_';
}

// "[name]" alone on a line (trailing blanks allowed): the name, else "".
std::string table_header(const std::string& line) {
  const std::size_t close = line.find(']');
  if (line.size() < 3 || line[0] != '[' || close == std::string::npos) return "";
  const std::string name = line.substr(1, close - 1);
  if (name.empty() || !std::all_of(name.begin(), name.end(), is_word_char)) return "";
  if (line.find_first_not_of(" \t", close + 1) != std::string::npos) return "";
  return name;
}

// An assignment "key = value", maybe commented out as "#key = value".
struct assignment {
  bool commented = false;
  std::string key, value;
};

std::optional<assignment> parse_assignment(const std::string& line) {
  assignment a;
  std::size_t i = 0;
  if (i < line.size() && line[i] == '#') {
    a.commented = true;
    ++i;
  }
  const std::size_t start = i;
  while (i < line.size() && is_word_char(line[i]))
    ++i;
  if (i == start || line.compare(i, 3, " = ") != 0) return std::nullopt;
  a.key = line.substr(start, i - start);
  a.value = line.substr(i + 3);
  return a;
}

// The value of "#key = VALUE  # default", or nothing.
std::optional<std::string> default_value_of(const std::string& line) {
  const auto a = parse_assignment(line);
  const std::string tail = "  # default";
  if (!a || !a->commented || a->value.size() <= tail.size() ||
      a->value.compare(a->value.size() - tail.size(), tail.size(), tail) != 0)
    return std::nullopt;
  std::string v = a->value.substr(0, a->value.size() - tail.size());
  if (v.empty() || v.back() == ' ') return std::nullopt;
  return v;
}

std::vector<example_line> example_lines() {
  std::istringstream in(read_file(example_path));
  std::vector<example_line> lines;
  std::string line, section;
  std::size_t n = 0;
  while (std::getline(in, line)) {
    ++n;
    if (line == "[[group]]")
      section = "group";
    else if (!table_header(line).empty())
      section = table_header(line);
    lines.push_back({section, line, n});
  }
  return lines;
}

}  // namespace

// ---- the example file ------------------------------------------------------

TEST_CASE("config: the example configuration loads without errors", "[config]") {
  const load_result r = load_config_file(example_path);
  INFO(joined(r));
  REQUIRE(r.errors.empty());
  REQUIRE(r.config.has_value());
  CHECK(r.config->source == example_path);
}

TEST_CASE("config: the example configuration holds the values its uncommented lines set",
          "[config]") {
  const load_result r = load_config_file(example_path);
  REQUIRE(r.config.has_value());
  const daemon_config& c = *r.config;
  // The sections: only tcp, udp and threads are set; the rest are defaults.
  CHECK(format_host_port(c.ingest.tcp) == "0.0.0.0:7301");
  CHECK_FALSE(c.ingest.udp.enabled);
  CHECK(c.evaluation.threads == 2);
  daemon_config expected_sections = default_config();
  expected_sections.ingest.tcp = c.ingest.tcp;
  expected_sections.ingest.udp = c.ingest.udp;
  expected_sections.evaluation.threads = 2;
  check_same_sections(c, expected_sections);

  REQUIRE(c.groups.size() == 5);
  std::vector<std::string> names;
  for (const stream_group& g : c.groups)
    names.push_back(g.name);
  CHECK(names == std::vector<std::string>{"line_b_fill", "line_d_torque", "line_d_capper_heads",
                                          "pasteuriser_hold", "larkspur_other"});

  SECTION("line B fill weights: ad and welch, mean-diff interval, tolerance 0.5 g") {
    const stream_group& g = c.groups[0];
    CHECK(g.match == "larkspur/line_b/fill_*");
    monitor_settings want;
    want.tests = {test_kind::ad, test_kind::welch};
    want.alarm.tolerance = 0.5;
    check_same(g.settings, want);
  }
  SECTION("line D torque: lagged reference, blocks chosen automatically") {
    const stream_group& g = c.groups[1];
    CHECK(g.match == "larkspur/line_d/torque_*");
    monitor_settings want;
    want.policy = reference_policy::lagged;
    want.reference_size = 400;
    want.recent_size = 200;
    want.every_samples = 100;
    want.tests = {test_kind::ks, test_kind::median_diff};
    want.permutation.block_length = 0;
    want.interval->quantity = drift_quantity::median_diff;
    want.interval->method = interval_method::percentile;
    check_same(g.settings, want);
  }
  SECTION("the four-head capper: rows of 4, energy test, no interval") {
    const stream_group& g = c.groups[2];
    monitor_settings want;
    want.dimension = 4;
    want.reference_size = 300;
    want.recent_size = 100;
    want.tests = {test_kind::energy};
    want.interval.reset();
    want.permutation.resamples = 499;
    check_same(g.settings, want);
  }
  SECTION("the pasteuriser: reference from a file beside the example, cpk against 71.7") {
    const stream_group& g = c.groups[3];
    CHECK(g.reference_file ==
          (std::filesystem::path(example_path).parent_path() / "larkspur_hold_temp_reference.csv")
              .string());
    CHECK(g.reference_file_position.line > 0);
    monitor_settings want;
    want.policy = reference_policy::file;
    want.recent_size = 120;
    want.every_samples = 0;
    want.every_seconds = 60;
    want.interval->quantity = drift_quantity::cpk;
    want.interval->spec_lower = 71.7;
    check_same(g.settings, want);
  }
  SECTION("every other Larkspur stream: defaults and a five-minute timer") {
    const stream_group& g = c.groups[4];
    CHECK(g.match == "larkspur/*");
    monitor_settings want;
    want.every_seconds = 300;
    check_same(g.settings, want);
  }
}

TEST_CASE("config: every key of the option table is documented in the example with its default",
          "[config]") {
  const std::vector<example_line> lines = example_lines();
  for (const option_info& o : option_table()) {
    const std::string section(section_key(o.section));
    INFO(section_header(o.section) << " " << o.key);
    std::size_t mentions = 0, defaults = 0;
    for (std::size_t i = 0; i < lines.size(); ++i) {
      const auto a = parse_assignment(lines[i].text);
      if (lines[i].section != section || !a || a->key != o.key) continue;
      if (mentions++ == 0) {
        // Documented: above the first mention, past other assignments, a prose comment.
        std::size_t j = i;
        while (j > 0 && parse_assignment(lines[j - 1].text))
          --j;
        REQUIRE(j > 0);
        CHECK_THAT(lines[j - 1].text, StartsWith("# "));
      }
      if (const auto shown_text = default_value_of(lines[i].text)) {
        ++defaults;
        REQUIRE_FALSE(o.default_value.empty());
        // The value must be the default as TOML reads it (not just as text).
        const toml::table shown =
            toml::parse(std::string(o.key) + " = " + *shown_text, std::string_view{"example"});
        const toml::table builtin =
            toml::parse(std::string(o.key) + " = " + o.default_value, std::string_view{"table"});
        INFO("example line " << lines[i].number << ": " << lines[i].text << "; table default "
                             << o.default_value);
        CHECK(shown == builtin);
      }
    }
    CHECK(mentions >= 1);
    CHECK(defaults == (o.default_value.empty() ? 0u : 1u));
  }
}

TEST_CASE("config: every key the example mentions is in the option table", "[config]") {
  for (const example_line& l : example_lines()) {
    const auto a = parse_assignment(l.text);
    if (l.section.empty() || !a) continue;
    option_section s = option_section::group;
    bool known_section = false;
    for (option_section c : all_sections)
      if (section_key(c) == l.section) {
        s = c;
        known_section = true;
      }
    INFO("example line " << l.number << ": " << l.text);
    REQUIRE(known_section);
    CHECK(find_option(s, a->key) != nullptr);
  }
}

TEST_CASE("config: the table's defaults written out as TOML load to the built-in defaults",
          "[config]") {
  std::string text;
  for (option_section s : all_sections) {
    text += std::string(section_header(s)) + "\n";
    if (s == option_section::group) text += "name = \"all_defaults\"\nmatch = \"*\"\n";
    for (const option_info& o : option_table())
      if (o.section == s && !o.default_value.empty())
        text += std::string(o.key) + " = " + o.default_value + "\n";
  }
  INFO(text);
  const daemon_config c = load_ok(text);
  check_same_sections(c, default_config());
  REQUIRE(c.groups.size() == 1);
  check_same(c.groups[0].settings, monitor_settings{});
}

TEST_CASE("config: an empty file gives the built-in defaults and the default group", "[config]") {
  const daemon_config c = load_ok("# nothing set\n");
  check_same_sections(c, default_config());
  REQUIRE(c.groups.size() == 1);
  CHECK(c.groups[0].name == "default");
  CHECK(c.groups[0].match == "*");
  check_same(c.groups[0].settings, monitor_settings{});
  CHECK(c.source == "larkspur.toml");
  CHECK(default_config().source == "built-in defaults");
}

TEST_CASE("config: the option table lists each key once, with type, bounds and help", "[config]") {
  std::set<std::pair<option_section, std::string_view>> seen;
  for (const option_info& o : option_table()) {
    INFO(o.key);
    CHECK(seen.insert({o.section, o.key}).second);
    CHECK_FALSE(o.type.empty());
    CHECK_FALSE(o.bounds.empty());
    CHECK_FALSE(o.help.empty());
    CHECK((o.default_value.empty() ? !o.no_default.empty() : o.no_default.empty()));
  }
  // The key names of the configuration format (a change here is a format change).
  const std::vector<std::string_view> group_keys = {"name",
                                                    "match",
                                                    "dimension",
                                                    "reference",
                                                    "reference_file",
                                                    "reference_size",
                                                    "recent_size",
                                                    "every_samples",
                                                    "every_seconds",
                                                    "tests",
                                                    "alpha",
                                                    "resamples",
                                                    "stop_after",
                                                    "exact",
                                                    "block",
                                                    "interval",
                                                    "interval_method",
                                                    "interval_level",
                                                    "interval_resamples",
                                                    "interval_block",
                                                    "interval_block_scheme",
                                                    "spec_lower",
                                                    "spec_upper",
                                                    "tolerance",
                                                    "raise_after",
                                                    "clear_after",
                                                    "history"};
  for (std::string_view k : group_keys) {
    INFO(k);
    CHECK(find_option(option_section::group, k) != nullptr);
  }
  std::size_t group_count = 0;
  for (const option_info& o : option_table())
    group_count += o.section == option_section::group;
  CHECK(group_count == group_keys.size());
}

// ---- syntax errors and positions --------------------------------------------

TEST_CASE("config: a TOML syntax error is reported alone with its position", "[config]") {
  // toml++ reports the position where it stopped; pinned as it reports it.
  CHECK(only_error("[ingest]\nmax_streams = 12x\nmax_line_bytes = 1\n") ==
        "larkspur.toml:2:17: invalid TOML: Error while parsing decimal integer: expected digit, "
        "saw 'x'");
}

TEST_CASE("config: a key defined twice is a syntax error, as TOML v1.0.0 requires", "[config]") {
  CHECK_THAT(only_error("[evaluation]\nthreads = 1\nthreads = 2\n"),
             StartsWith("larkspur.toml:3:11: invalid TOML: ") && Contains("threads"));
}

TEST_CASE("config: an integer beyond 64 signed bits is an error, as TOML v1.0.0 requires",
          "[config]") {
  CHECK_THAT(only_error("[evaluation]\nseed = 9223372036854775808\n"),
             StartsWith("larkspur.toml:2:") && Contains("invalid TOML"));
  CHECK(load_ok("[evaluation]\nseed = 9223372036854775807\n").evaluation.seed ==
        9223372036854775807ull);
}

TEST_CASE("config: an unreadable file gives FILE: cannot read: reason", "[config]") {
  const load_result r = load_config_file("/nonexistent/larkspur.toml");
  REQUIRE(r.errors.size() == 1);
  CHECK(r.errors[0].str() == "/nonexistent/larkspur.toml: cannot read: No such file or directory");
  CHECK_FALSE(r.config.has_value());
  plumbline::testing::temp_dir dir;
  const load_result d = load_config_file(dir.path().string());
  REQUIRE(d.errors.size() == 1);
  CHECK(d.errors[0].str() == dir.path().string() + ": cannot read: it is a directory");
}

TEST_CASE("config: a file larger than the limit is refused without parsing", "[config]") {
  const std::string big(max_config_bytes + 1, '#');
  const load_result r = load(big);
  REQUIRE(r.errors.size() == 1);
  CHECK_THAT(r.errors[0].str(), StartsWith("larkspur.toml: too large ("));
}

TEST_CASE("config: config_error str gives FILE:LINE:COLUMN: message", "[config]") {
  CHECK(config_error{"a.toml", 4, 9, "bad"}.str() == "a.toml:4:9: bad");
  CHECK(config_error{"a.toml", 0, 0, "cannot read: gone"}.str() == "a.toml: cannot read: gone");
}

// ---- unknown keys and sections ------------------------------------------------

TEST_CASE("config: an unknown key is an error at the key, with the nearest key suggested",
          "[config]") {
  CHECK(only_error(fill_group + "reference_sise = 400\n") ==
        "larkspur.toml:4:1: unknown key 'reference_sise' in [[group]] \"fill\" (did you mean "
        "'reference_size'?)");
  CHECK(only_error("[ingest]\n  max_stream = 10\n") ==
        "larkspur.toml:2:3: unknown key 'max_stream' in [ingest] (did you mean 'max_streams'?)");
}

TEST_CASE("config: a key in the wrong section says where it belongs", "[config]") {
  CHECK(only_error("[ingest]\nseed = 4\n") ==
        "larkspur.toml:2:1: unknown key 'seed' in [ingest] (it belongs in [evaluation])");
  CHECK(only_error("threads = 2\n") ==
        "larkspur.toml:1:1: unknown key 'threads' at the top level (it belongs in [evaluation])");
}

TEST_CASE("config: an unknown section is an error at its name", "[config]") {
  CHECK(only_error("[evaluaton]\nthreads = 2\n") ==
        "larkspur.toml:1:2: unknown section [evaluaton] (did you mean [evaluation]?)");
  CHECK(only_error("[[groups]]\nname = \"x\"\n") ==
        "larkspur.toml:1:3: unknown section [[groups]] (did you mean [[group]]?)");
  CHECK(only_error("[alarms]\nx = 1\n") ==
        "larkspur.toml:1:2: unknown section [alarms] (sections: [ingest], [http], [evaluation], "
        "[state], [log], [[group]])");
}

TEST_CASE("config: groups must be an array of tables", "[config]") {
  CHECK(only_error("[group]\nname = \"x\"\n") ==
        "larkspur.toml:1:2: groups are written [[group]] (an array of tables), not [group]");
  CHECK_THAT(only_error("group = []\n"),
             StartsWith("larkspur.toml:1:1: 'group' must be [[group]]"));
  CHECK_THAT(only_error("ingest = 3\n"), StartsWith("larkspur.toml:1:1: [ingest] must be a table"));
}

// ---- types and bounds -------------------------------------------------------------

TEST_CASE("config: a value of the wrong type is an error at the value, naming the bounds",
          "[config]") {
  CHECK(only_error("[ingest]\nmax_streams = \"many\"\n") ==
        "larkspur.toml:2:15: [ingest] max_streams must be an integer (1 .. 10000000), got a "
        "string (\"many\")");
  CHECK(only_error(fill_group + "alpha = \"small\"\n") ==
        "larkspur.toml:4:9: [[group]] \"fill\" alpha must be a number (> 0 and < 1), got a string "
        "(\"small\")");
  CHECK(only_error(fill_group + "recent_size = 100.5\n") ==
        "larkspur.toml:4:15: [[group]] \"fill\" recent_size must be an integer (2 .. 1000000), got "
        "a float (100.5)");
  CHECK(only_error("[log]\nlevel = true\n") ==
        "larkspur.toml:2:9: [log] level must be a string (\"debug\" | \"info\" | \"warn\" | "
        "\"error\"), got a boolean (true)");
}

TEST_CASE("config: a float key takes an integer, but not infinity or NaN", "[config]") {
  const daemon_config c = load_ok("[ingest]\nidle_timeout_seconds = 30\n");
  CHECK(c.ingest.idle_timeout_seconds == 30.0);
  CHECK(only_error(fill_group + "every_seconds = inf\n") ==
        "larkspur.toml:4:17: [[group]] \"fill\" every_seconds must be a finite number (>= 0 and "
        "<= 86400), got a float (inf)");
  CHECK_THAT(only_error(fill_group + "tolerance = nan\n"), Contains("must be a finite number"));
}

TEST_CASE("config: every integer key accepts its bounds and rejects one past them", "[config]") {
  // Table-driven: the bounds the table states are the bounds the loader enforces.
  std::size_t checked = 0;
  for (const option_info& o : option_table()) {
    if (o.type != "integer") continue;
    // Bounds of integer keys read "LO .. HI".
    const std::size_t dots = o.bounds.find(" .. ");
    REQUIRE(dots != std::string::npos);
    std::size_t used_lo = 0, used_hi = 0;
    const long long lo = std::stoll(o.bounds.substr(0, dots), &used_lo);
    const long long hi = std::stoll(o.bounds.substr(dots + 4), &used_hi);
    REQUIRE(used_lo == dots);
    REQUIRE(used_hi == o.bounds.size() - dots - 4);
    const std::string head = o.section == option_section::group
                                 ? fill_group
                                 : std::string(section_header(o.section)) + "\n" + "#\n#\n";
    auto with = [&](long long v) {
      return load(head + std::string(o.key) + " = " + std::to_string(v) + "\n");
    };
    auto has_bound_error = [&](const load_result& r) {
      for (const config_error& e : r.errors)
        if (e.message.find(std::string(o.key) + " must be between") != std::string::npos)
          return true;
      return false;
    };
    INFO(section_header(o.section) << " " << o.key << " " << o.bounds);
    CHECK_FALSE(has_bound_error(with(lo)));
    CHECK_FALSE(has_bound_error(with(hi)));
    if (lo > std::numeric_limits<long long>::min()) {
      const load_result below = with(lo - 1);
      REQUIRE(has_bound_error(below));
      const config_error& e = below.errors[0];
      CHECK(e.line == 4);
      CHECK(e.column == o.key.size() + 4);
      CHECK_THAT(e.message, Contains("must be between " + std::to_string(lo) + " and " +
                                     std::to_string(hi) + ", got " + std::to_string(lo - 1)));
    }
    if (hi < std::numeric_limits<long long>::max()) CHECK(has_bound_error(with(hi + 1)));
    ++checked;
  }
  // 3 in [ingest], 1 in [http], 2 in [evaluation], 10 in [[group]].
  CHECK(checked == 16);
}

TEST_CASE("config: the stated limits are the table's bounds", "[config]") {
  // Project limits (no outside source) and the engines' own limits (core/).
  auto bounds = [](option_section s, std::string_view k) { return find_option(s, k)->bounds; };
  CHECK(bounds(option_section::ingest, "max_line_bytes") == "16 .. 1048576");
  CHECK(bounds(option_section::ingest, "max_streams") == "1 .. 10000000");
  CHECK(bounds(option_section::evaluation, "threads") == "0 .. 256");
  CHECK(bounds(option_section::group, "history") == "1 .. 10000");
  CHECK(bounds(option_section::group, "reference_size") == "2 .. 1000000");
  CHECK(bounds(option_section::group, "recent_size") == "2 .. 1000000");
  CHECK(bounds(option_section::group, "resamples") == "1 .. " + std::to_string(max_resamples));
  CHECK(bounds(option_section::group, "interval_resamples") ==
        "1 .. " + std::to_string(max_bootstrap_resamples));
  CHECK(bounds(option_section::group, "alpha") == "> 0 and < 1");
  CHECK(bounds(option_section::group, "interval_level") == "> 0 and < 1");
  CHECK(bounds(option_section::group, "tolerance") == "> 0");
}

TEST_CASE("config: open float bounds exclude their ends", "[config]") {
  CHECK(only_error(fill_group + "alpha = 0\n") ==
        "larkspur.toml:4:9: [[group]] \"fill\" alpha must be > 0 and < 1, got 0");
  CHECK(only_error(fill_group + "alpha = 1.0\n") ==
        "larkspur.toml:4:9: [[group]] \"fill\" alpha must be > 0 and < 1, got 1");
  CHECK(load_ok(fill_group + "alpha = 0.001\n").groups[0].settings.alarm.alpha == 0.001);
  CHECK(only_error(fill_group + "tolerance = 0.0\n") ==
        "larkspur.toml:4:13: [[group]] \"fill\" tolerance must be > 0, got 0");
}

TEST_CASE("config: choice keys name their choices when the value is not one", "[config]") {
  CHECK(only_error(fill_group + "reference = \"rolling\"\n") ==
        "larkspur.toml:4:13: [[group]] \"fill\" reference must be one of \"baseline\" | "
        "\"lagged\" | \"file\", got \"rolling\"");
  CHECK(only_error(fill_group + "interval = \"mean\"\n") ==
        "larkspur.toml:4:12: [[group]] \"fill\" interval must be one of \"none\" | \"mean-diff\" | "
        "\"median-diff\" | \"quantile-diff:Q\" (0 < Q < 1) | \"sd-ratio\" | \"cpk\", got \"mean\"");
}

TEST_CASE("config: tests must be known test names, each once", "[config]") {
  const load_result r = load(fill_group + "tests = [\"ad\", \"anderson\", \"ad\", 7]\n");
  CHECK(error_lines(r) ==
        std::vector<std::string>{
            "larkspur.toml:4:16: [[group]] \"fill\" tests has \"anderson\", which is not a test "
            "name (mean-diff, median-diff, welch, ks, cvm, ad, energy)",
            "larkspur.toml:4:28: [[group]] \"fill\" tests lists \"ad\" twice",
            "larkspur.toml:4:34: [[group]] \"fill\" tests has an integer (7), which is not a test "
            "name (mean-diff, median-diff, welch, ks, cvm, ad, energy)"});
  CHECK_THAT(only_error(fill_group + "tests = []\n"), Contains("must name at least one test"));
  const daemon_config c = load_ok(fill_group + "tests = [\"welch\", \"mean-diff\", \"cvm\"]\n");
  CHECK(c.groups[0].settings.tests ==
        std::vector<test_kind>{test_kind::welch, test_kind::mean_diff, test_kind::cvm});
}

TEST_CASE("config: block keys take auto, none or a length of 2 or more", "[config]") {
  CHECK(load_ok(fill_group + "block = \"auto\"\n").groups[0].settings.permutation.block_length ==
        0);
  CHECK(load_ok(fill_group + "block = 5\n").groups[0].settings.permutation.block_length == 5);
  CHECK(load_ok(fill_group + "interval_block = \"none\"\n")
            .groups[0]
            .settings.interval->block_length == 1);
  CHECK_THAT(only_error(fill_group + "block = 1\n"),
             StartsWith("larkspur.toml:4:9:") && Contains("(write \"none\" for single values)"));
  CHECK_THAT(only_error(fill_group + "interval_block = 0\n"), Contains("(write \"auto\")"));
  CHECK_THAT(only_error(fill_group + "block = \"big\"\n"),
             Contains("must be \"auto\" | \"none\" | 2 .. 500000"));
}

TEST_CASE("config: quantile-diff takes a quantile strictly between 0 and 1", "[config]") {
  const daemon_config c = load_ok(fill_group + "interval = \"quantile-diff:0.9\"\n");
  CHECK(c.groups[0].settings.interval->quantity == drift_quantity::quantile_diff);
  CHECK(c.groups[0].settings.interval->quantile == 0.9);
  for (const char* q : {"0", "1", "1.5", "-0.1", "", "0.5x", "nan"}) {
    INFO(q);
    CHECK_THAT(only_error(fill_group + "interval = \"quantile-diff:" + q + "\"\n"),
               Contains("quantile-diff:Q needs a Q strictly between 0 and 1"));
  }
}

// ---- all errors in one pass ---------------------------------------------------------

TEST_CASE("config: every error of a file is reported in one pass, in file order", "[config]") {
  const std::string text =
      "[ingest]\n"                       // 1
      "max_line_bytes = 8\n"             // 2
      "tcp = \"127.0.0.1\"\n"            // 3
      "[http]\n"                         // 4
      "max_connections = 0\n"            // 5
      "[log]\n"                          // 6
      "level = \"verbose\"\n"            // 7
      "[[group]]\n"                      // 8
      "name = \"fill\"\n"                // 9
      "match = \"larkspur/*\"\n"         // 10
      "history = 0\n"                    // 11
      "alpha = 2\n"                      // 12
      "[[group]]\n"                      // 13
      "name = \"torque\"\n"              // 14
      "match = \"larkspur/line_d/*\"\n"  // 15
      "recent_size = 1\n";               // 16
  const load_result r = load(text);
  CHECK_FALSE(r.config.has_value());
  CHECK(error_lines(r) ==
        std::vector<std::string>{
            "larkspur.toml:2:18: [ingest] max_line_bytes must be between 16 and 1048576, got 8",
            "larkspur.toml:3:7: [ingest] tcp is not a listening address: \"127.0.0.1\": expected "
            "HOST:PORT, e.g. 127.0.0.1:7301, or \"off\"",
            "larkspur.toml:5:19: [http] max_connections must be between 1 and 4096, got 0",
            "larkspur.toml:7:9: [log] level must be one of \"debug\" | \"info\" | \"warn\" | "
            "\"error\", got \"verbose\"",
            "larkspur.toml:11:11: [[group]] \"fill\" history must be between 1 and 10000, got 0",
            "larkspur.toml:12:9: [[group]] \"fill\" alpha must be > 0 and < 1, got 2",
            "larkspur.toml:16:15: [[group]] \"torque\" recent_size must be between 2 and 1000000, "
            "got 1"});
}

TEST_CASE("config: at most the limit of errors is kept, and one line says how many were left out",
          "[config]") {
  std::string text = "[ingest]\n";
  for (int i = 0; i < 150; ++i)
    text += "unknown_" + std::to_string(i) + " = 1\n";
  const load_result r = load(text);
  REQUIRE(r.errors.size() == max_reported_errors + 1);
  CHECK(r.errors.back().str() ==
        "larkspur.toml: 50 more errors not shown (at most 100 are "
        "reported)");
}

TEST_CASE("config: a rejected value does not set off cross-field errors of its own", "[config]") {
  // reference = "fil" is wrong; "reference_file is read only with reference = file" would
  // be a consequence of the default the key kept, so it is not reported.
  CHECK(error_lines(load(fill_group + "reference = \"fil\"\nreference_file = \"hold.csv\"\n")) ==
        std::vector<std::string>{"larkspur.toml:4:13: [[group]] \"fill\" reference must be one of "
                                 "\"baseline\" | \"lagged\" | \"file\", got \"fil\""});
}

// ---- cross-field checks -------------------------------------------------------------

TEST_CASE("config: a group needs a name and a match pattern", "[config]") {
  CHECK(error_lines(load("[[group]]\ntests = [\"ks\"]\n")) ==
        std::vector<std::string>{
            "larkspur.toml:1:1: [[group]] #1 has no name (name = \"...\" is required)",
            "larkspur.toml:1:1: [[group]] #1 has no match pattern (match = \"...\" is required)"});
  CHECK(only_error("[[group]]\nname = \"fill\"\nmatch = \"\"\n") ==
        "larkspur.toml:3:9: [[group]] \"fill\" match must be 1 .. 1024 bytes long, got 0");
  CHECK_THAT(only_error("[[group]]\nname = \"line b\"\nmatch = \"*\"\n"),
             StartsWith("larkspur.toml:2:8: [[group]] #1 name must be 1 .. 64 letters"));
}

TEST_CASE("config: group names are unique", "[config]") {
  CHECK(only_error(fill_group + "[[group]]\nname = \"fill\"\nmatch = \"larkspur/line_d/*\"\n") ==
        "larkspur.toml:5:8: [[group]] \"fill\" name is already used by the group at line 2");
}

TEST_CASE("config: a group hidden behind an earlier one is an error", "[config]") {
  CHECK(only_error("[[group]]\nname = \"a\"\nmatch = \"larkspur/*\"\n"
                   "[[group]]\nname = \"b\"\nmatch = \"larkspur/*\"\n") ==
        "larkspur.toml:6:9: [[group]] \"b\" match \"larkspur/*\" is the same as group \"a\"'s "
        "(line 3), which is tried first: this group would never be used");
  CHECK(only_error("[[group]]\nname = \"all\"\nmatch = \"**\"\n" + fill_group) ==
        "larkspur.toml:6:9: [[group]] \"fill\" can never be used: group \"all\" (line 3) matches "
        "every stream and is tried first");
}

TEST_CASE("config: every_samples and every_seconds are not both 0", "[config]") {
  CHECK(only_error(fill_group + "every_samples = 0\n") ==
        "larkspur.toml:4:17: [[group]] \"fill\" every_samples and every_seconds are both 0: the "
        "group would never be evaluated");
  const daemon_config c = load_ok(fill_group + "every_samples = 0\nevery_seconds = 30\n");
  CHECK(c.groups[0].settings.every_seconds == 30);
}

TEST_CASE("config: reference_file is given exactly when reference is file", "[config]") {
  CHECK(only_error(fill_group + "reference = \"file\"\n") ==
        "larkspur.toml:4:13: [[group]] \"fill\" reference = \"file\" needs reference_file = "
        "\"PATH.csv\"");
  CHECK(only_error(fill_group + "reference_file = \"fill.csv\"\n") ==
        "larkspur.toml:4:18: [[group]] \"fill\" reference_file is read only with reference = "
        "\"file\" (reference is \"baseline\")");
}

TEST_CASE("config: a relative reference_file is resolved against the configuration's directory",
          "[config]") {
  const load_result r =
      load_config_string(fill_group + "reference = \"file\"\nreference_file = \"refs/fill.csv\"\n",
                         "/etc/plumbline/larkspur.toml");
  REQUIRE(r.config.has_value());
  CHECK(r.config->groups[0].reference_file == "/etc/plumbline/refs/fill.csv");
  CHECK(r.config->groups[0].reference_file_position.line == 5);
  CHECK(r.config->groups[0].reference_file_position.column == 18);
  const load_result a =
      load_config_string(fill_group + "reference = \"file\"\nreference_file = \"/srv/fill.csv\"\n",
                         "/etc/plumbline/larkspur.toml");
  REQUIRE(a.config.has_value());
  CHECK(a.config->groups[0].reference_file == "/srv/fill.csv");
}

TEST_CASE("config: cpk needs a specification limit, and the lower below the upper", "[config]") {
  CHECK(only_error(fill_group + "interval = \"cpk\"\n") ==
        "larkspur.toml:4:12: [[group]] \"fill\" interval = \"cpk\" needs spec_lower, spec_upper or "
        "both");
  CHECK(only_error(fill_group + "interval = \"cpk\"\nspec_lower = 126\nspec_upper = 124\n") ==
        "larkspur.toml:5:14: [[group]] \"fill\" spec_lower = 126.0 must be below spec_upper = "
        "124.0");
  const daemon_config c =
      load_ok(fill_group + "interval = \"cpk\"\nspec_lower = 124.0\nspec_upper = 126.0\n");
  CHECK(c.groups[0].settings.interval->spec_lower == 124.0);
  CHECK(c.groups[0].settings.interval->spec_upper == 126.0);
  CHECK(only_error(fill_group + "spec_upper = 126.0\n") ==
        "larkspur.toml:4:14: [[group]] \"fill\" spec_upper goes with interval = \"cpk\" only "
        "(interval is \"mean-diff\")");
}

TEST_CASE("config: tolerance needs an interval other than cpk", "[config]") {
  CHECK(only_error(fill_group + "interval = \"none\"\ntolerance = 0.5\n") ==
        "larkspur.toml:5:13: [[group]] \"fill\" tolerance needs a drift interval to hold against, "
        "but interval = \"none\"");
  CHECK_THAT(only_error(fill_group + "interval = \"cpk\"\nspec_lower = 124.0\ntolerance = 0.5\n"),
             StartsWith("larkspur.toml:6:13: [[group]] \"fill\" tolerance does not apply to "
                        "interval = \"cpk\""));
  CHECK(load_ok(fill_group + "interval = \"sd-ratio\"\ntolerance = 0.2\n")
            .groups[0]
            .settings.alarm.tolerance == 0.2);
}

TEST_CASE("config: interval keys have no effect without an interval", "[config]") {
  CHECK(error_lines(load(fill_group + "interval = \"none\"\ninterval_method = \"basic\"\n"
                                      "interval_resamples = 200\n")) ==
        std::vector<std::string>{
            "larkspur.toml:5:19: [[group]] \"fill\" interval_method has no effect with interval = "
            "\"none\"",
            "larkspur.toml:6:22: [[group]] \"fill\" interval_resamples has no effect with "
            "interval = \"none\""});
  CHECK_FALSE(
      load_ok(fill_group + "interval = \"none\"\n").groups[0].settings.interval.has_value());
}

TEST_CASE("config: a multivariate group takes only the energy test and no interval", "[config]") {
  CHECK(error_lines(load(fill_group + "dimension = 4\n")) ==
        std::vector<std::string>{
            "larkspur.toml:4:13: [[group]] \"fill\" with dimension = 4, tests may list only "
            "multivariate tests (tests = [\"energy\"]); the default \"ad\" takes one value per "
            "sample",
            "larkspur.toml:4:13: [[group]] \"fill\" dimension = 4 needs interval = \"none\": drift "
            "intervals take one value per sample"});
  CHECK(only_error(fill_group +
                   "dimension = 2\ntests = [\"energy\", \"ks\"]\ninterval = \"none\"\n") ==
        "larkspur.toml:5:9: [[group]] \"fill\" with dimension = 2, tests may list only "
        "multivariate tests (tests = [\"energy\"]); \"ks\" takes one value per sample");
  const daemon_config c =
      load_ok(fill_group + "dimension = 3\ntests = [\"energy\"]\ninterval = \"none\"\n");
  CHECK(c.groups[0].settings.dimension == 3);
}

TEST_CASE("config: stop_after must be below resamples", "[config]") {
  CHECK(only_error(fill_group + "resamples = 99\nstop_after = 99\n") ==
        "larkspur.toml:5:14: [[group]] \"fill\" stop_after = 99 must be below resamples = 99 (or 0 "
        "for no sequential stopping)");
  // The default stop_after (20) against a small resamples: the error points at resamples.
  CHECK_THAT(only_error(fill_group + "resamples = 19\n"),
             StartsWith("larkspur.toml:4:13: [[group]] \"fill\" stop_after = 20 must be below"));
  CHECK(load_ok(fill_group + "resamples = 19\nstop_after = 0\n").groups.size() == 1);
}

TEST_CASE("config: the energy test keeps its pooled windows within the engine's limit",
          "[config]") {
  // core/permutation.h: max_energy_pooled pooled rows.
  const std::string over = std::to_string(max_energy_pooled - 100 + 1);
  CHECK(only_error(fill_group + "tests = [\"energy\"]\nreference_size = " + over + "\n") ==
        "larkspur.toml:5:18: [[group]] \"fill\" the energy test holds at most " +
            std::to_string(max_energy_pooled) +
            " pooled samples, but reference_size + recent_size = " +
            std::to_string(max_energy_pooled + 1));
  load_ok(fill_group + "tests = [\"energy\"]\nreference_size = " +
          std::to_string(max_energy_pooled - 100) + "\n");
}

TEST_CASE("config: a block length leaves at least 2 blocks in each window", "[config]") {
  CHECK(only_error(fill_group + "block = 51\n") ==
        "larkspur.toml:4:9: [[group]] \"fill\" block = 51 leaves fewer than 2 blocks in a window "
        "of 100 samples (at most 50)");
  load_ok(fill_group + "block = 50\n");
  CHECK_THAT(only_error(fill_group + "interval_block = 60\n"),
             StartsWith("larkspur.toml:4:18: [[group]] \"fill\" interval_block = 60 leaves fewer"));
}

TEST_CASE("config: exact always is refused when the splits exceed the engine's limit", "[config]") {
  // C(600, 100) is far above max_exact_splits; C(20, 10) = 184756 (Pascal's triangle) is not.
  CHECK_THAT(only_error(fill_group + "exact = \"always\"\n"),
             StartsWith("larkspur.toml:4:9: [[group]] \"fill\" exact = \"always\" would enumerate "
                        "more than 2^64 splits"));
  load_ok(fill_group +
          "exact = \"always\"\nreference_size = 10\nrecent_size = 10\nstop_after = 0\n");
}

TEST_CASE("config: intervals other than mean-diff need windows of at least 3", "[config]") {
  CHECK(only_error(fill_group + "interval = \"median-diff\"\nrecent_size = 2\n") ==
        "larkspur.toml:5:15: [[group]] \"fill\" interval = \"median-diff\" needs windows of at "
        "least 3 samples");
  load_ok(fill_group + "recent_size = 2\n");
}

TEST_CASE("config: ingest needs a listener, and http may not share the tcp address", "[config]") {
  CHECK(only_error("[ingest]\ntcp = \"off\"\nudp = \"\"\n") ==
        "larkspur.toml:3:7: [ingest] tcp and udp are both off: the daemon would receive no "
        "measurements");
  CHECK(only_error("[ingest]\ntcp = \"127.0.0.1:7400\"\n[http]\nlisten = \"127.0.0.1:7400\"\n") ==
        "larkspur.toml:4:10: [http] listen 127.0.0.1:7400 is the address of [ingest] tcp too");
  // Port 0 asks for a free port each time: no clash.
  load_ok("[ingest]\ntcp = \"127.0.0.1:0\"\n[http]\nlisten = \"127.0.0.1:0\"\n");
}

// ---- the API token --------------------------------------------------------------------

TEST_CASE("config: the API token follows the RFC 6750 token syntax", "[config]") {
  CHECK(load_ok("[http]\napi_token = \"Lark.spur-Dairy_2024~tok+/==\"\n").http.api_token ==
        "Lark.spur-Dairy_2024~tok+/==");
  CHECK_THAT(only_error("[http]\napi_token = \"larkspur dairy token\"\n"),
             StartsWith("larkspur.toml:2:13: [http] api_token may hold only letters") &&
                 Contains("RFC 6750"));
  // '=' is padding only at the end.
  CHECK_THAT(only_error("[http]\napi_token = \"larkspur=dairy=token\"\n"), Contains("RFC 6750"));
  CHECK_THAT(only_error("[http]\napi_token = \"short\"\n"),
             Contains("must be 16 .. 4096 characters long, got 5"));
  CHECK(load_ok("[http]\napi_token = \"\"\n").http.api_token.empty());
}

TEST_CASE("config: api_token_file is read, trimmed and resolved against the configuration",
          "[config]") {
  plumbline::testing::temp_dir dir;
  dir.write("token", "  larkspur-line-b-0123456789\r\n\n");
  const std::string config = dir.file("plumbline.toml");
  const load_result r = load_config_string("[http]\napi_token_file = \"token\"\n", config);
  INFO(joined(r));
  REQUIRE(r.config.has_value());
  CHECK(r.config->http.api_token == "larkspur-line-b-0123456789");
  CHECK(r.config->http.api_token_file == dir.file("token"));

  const load_result missing = load_config_string("[http]\napi_token_file = \"nope\"\n", config);
  REQUIRE(missing.errors.size() == 1);
  CHECK_THAT(missing.errors[0].str(), StartsWith(config + ":2:18: [http] api_token_file names \"" +
                                                 dir.file("nope") + "\", which cannot be read"));
  dir.write("blank", " \n\t\n");
  CHECK_THAT(load_config_string("[http]\napi_token_file = \"blank\"\n", config).errors.at(0).str(),
             Contains("which holds no token"));
  const load_result both = load_config_string(
      "[http]\napi_token = \"larkspur-line-b-0123456789\"\napi_token_file = \"token\"\n", config);
  REQUIRE(both.errors.size() == 1);
  CHECK(both.errors[0].str() == config +
                                    ":3:18: [http] api_token and api_token_file are both set; keep "
                                    "one (the file is safer)");
}

// ---- listening addresses ----------------------------------------------------------------

TEST_CASE("config: parse_host_port reads IPv4, bracketed IPv6 and host names", "[config]") {
  auto ok = [](std::string_view t) {
    auto r = parse_host_port(t);
    INFO(t << ": " << (r ? "" : r.err().message));
    REQUIRE(r.ok());
    return r.value();
  };
  const host_port a = ok("127.0.0.1:7301");
  CHECK(a.host == "127.0.0.1");
  CHECK(a.port == 7301);
  CHECK(a.enabled);
  // RFC 3986 section 3.2.2: the IPv6 literal in brackets; kept without them.
  const host_port b = ok("[::1]:7301");
  CHECK(b.host == "::1");
  CHECK(b.port == 7301);
  CHECK(format_host_port(b) == "[::1]:7301");
  CHECK(ok("[fe80::1:2]:80").host == "fe80::1:2");
  CHECK(ok("localhost:0").port == 0);                        // port 0: any free port
  CHECK(ok("line-b.larkspur.example:65535").port == 65535);  // RFC 793: 16-bit port
  CHECK(ok("0.0.0.0:7301").host == "0.0.0.0");
  CHECK_FALSE(ok("").enabled);
  CHECK_FALSE(ok("off").enabled);
  CHECK(format_host_port(ok("off")) == "off");
  CHECK(format_host_port(ok("127.0.0.1:7301")) == "127.0.0.1:7301");
}

TEST_CASE("config: parse_host_port rejects malformed addresses with a clear message", "[config]") {
  auto err = [](std::string_view t) {
    auto r = parse_host_port(t);
    INFO(t);
    REQUIRE_FALSE(r.ok());
    return r.err().message;
  };
  CHECK(err("127.0.0.1") == "\"127.0.0.1\": expected HOST:PORT, e.g. 127.0.0.1:7301, or \"off\"");
  CHECK(err("::1:7301") == "\"::1:7301\": an IPv6 address goes in brackets, e.g. [::1]:7301");
  CHECK(err("127.0.0.1:65536") == "\"127.0.0.1:65536\": port 65536 is above 65535");
  CHECK_THAT(err("127.0.0.1:http"), Contains("the port must be a number from 0 to 65535"));
  CHECK_THAT(err("127.0.0.1:-1"), Contains("the port must be a number"));
  CHECK_THAT(err(":7301"), Contains("the host is missing"));
  CHECK_THAT(err("256.1.1.1:80"), Contains("is not a valid IPv4 address"));
  CHECK_THAT(err("1.2.3:80"), Contains("is not a valid IPv4 address"));
  CHECK_THAT(err("[::g]:80"), Contains("is not a valid IPv6 address"));
  CHECK_THAT(err("[::1]7301"), Contains("expected HOST:PORT, e.g. [::1]:7301"));
  CHECK_THAT(err("[::1:7301"), Contains("without a closing ']'"));
  // RFC 1123 section 2.1 host names: no leading or trailing hyphen, labels <= 63.
  CHECK_THAT(err("-line.larkspur:80"), Contains("is not a valid host name"));
  CHECK_THAT(err("line-.larkspur:80"), Contains("is not a valid host name"));
  CHECK_THAT(err("line_b:80"), Contains("is not a valid host name"));
  CHECK_THAT(err("a..b:80"), Contains("is not a valid host name"));
  CHECK_THAT(err(std::string(64, 'a') + ":80"), Contains("is not a valid host name"));
  CHECK(parse_host_port(std::string(63, 'a') + ":80").ok());
}

// ---- glob patterns and group lookup ---------------------------------------------------------

TEST_CASE("config: glob patterns: star crosses slashes, question mark is one character",
          "[config]") {
  CHECK(glob_match("larkspur/*", "larkspur/line_b/fill_3"));
  CHECK(glob_match("larkspur/line_b/fill_*", "larkspur/line_b/fill_12"));
  CHECK_FALSE(glob_match("larkspur/line_b/fill_*", "larkspur/line_d/fill_1"));
  CHECK(glob_match("*/fill_?", "larkspur/line_b/fill_3"));
  CHECK_FALSE(glob_match("*/fill_?", "larkspur/line_b/fill_12"));
  CHECK(glob_match("*", ""));
  CHECK_FALSE(glob_match("?", ""));
  CHECK(glob_match("a*b*c", "a/x/b/y/c"));
  CHECK_FALSE(glob_match("a*b*c", "a/x/b/y/d"));
  CHECK(glob_match("line_[b]", "line_[b]"));  // brackets are literal
  CHECK_FALSE(glob_match("line_[b]", "line_b"));
  CHECK(glob_match("temp_?C",
                   "temp_\xC2\xB0"
                   "C"));  // '?' takes the whole degree sign
  CHECK_FALSE(glob_match("temp_??C",
                         "temp_\xC2\xB0"
                         "C"));
  CHECK(glob_matches_everything("**"));
  CHECK_FALSE(glob_matches_everything("*a"));
}

TEST_CASE(
    "config: glob_match agrees with POSIX fnmatch on patterns of star, question mark and letters",
    "[config]") {
  // fnmatch(3) with flags 0: '*' matches '/', as in glob.h. Seeded, exhaustive enough:
  // 20000 random pairs over a small alphabet make every kind of backtracking likely.
  plumbline::rng gen(2024);
  const char pattern_chars[] = {'a', 'b', '/', '*', '?'};
  const char name_chars[] = {'a', 'b', '/'};
  std::size_t matches = 0;
  for (int i = 0; i < 20000; ++i) {
    std::string p, n;
    const auto plen = gen.next_double() * 7, nlen = gen.next_double() * 9;
    for (int k = 0; k < static_cast<int>(plen); ++k)
      p += pattern_chars[static_cast<int>(gen.next_double() * 5)];
    for (int k = 0; k < static_cast<int>(nlen); ++k)
      n += name_chars[static_cast<int>(gen.next_double() * 3)];
    const bool posix = ::fnmatch(p.c_str(), n.c_str(), 0) == 0;
    INFO("pattern \"" << p << "\" name \"" << n << "\"");
    REQUIRE(glob_match(p, n) == posix);
    matches += posix;
  }
  CHECK(matches > 1000);  // both outcomes were exercised
}

TEST_CASE("config: find_group returns the first group that matches", "[config]") {
  const daemon_config c = load_ok(
      "[[group]]\nname = \"fill\"\nmatch = \"larkspur/line_b/fill_*\"\n"
      "[[group]]\nname = \"line_b\"\nmatch = \"larkspur/line_b/*\"\n"
      "[[group]]\nname = \"plant\"\nmatch = \"larkspur/*\"\n");
  auto group_of = [&](std::string_view s) {
    const stream_group* g = find_group(c, s);
    return g ? g->name : std::string("(none)");
  };
  CHECK(group_of("larkspur/line_b/fill_2") == "fill");
  CHECK(group_of("larkspur/line_b/seal_temp") == "line_b");
  CHECK(group_of("larkspur/line_d/torque_1") == "plant");
  CHECK(group_of("elmwood/line_a/fill_1") == "(none)");
  const daemon_config d = default_config();
  CHECK(find_group(d, "anything/at/all")->name == "default");
}
