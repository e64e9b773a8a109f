// option_table.cc: the one declaration of every configuration key.
//
// Design note. Each entry names its section and key, its type, the values it
// accepts, its help line and an accessor: a function from the parse state to
// the field the key sets. The accessor serves twice: `apply` writes a checked
// value through it, and the default text is formatted by reading it on a
// freshly constructed state, so the defaults shown are the member
// initialisers of options.h and core/monitor_settings.h and nothing else.
// The engine limits (max_resamples, max_bootstrap_resamples) come from core/.
#include <algorithm>
#include <cctype>
#include <charconv>
#include <cmath>
#include <cstdint>
#include <fstream>
#include <limits>
#include <system_error>
#include <utility>

#include "config/option_spec.h"
#include "core/bootstrap.h"
#include "core/permutation.h"
#include "core/statistic.h"

namespace plumbline::config {

std::string_view section_key(option_section s) {
  switch (s) {
    case option_section::ingest:
      return "ingest";
    case option_section::http:
      return "http";
    case option_section::evaluation:
      return "evaluation";
    case option_section::state:
      return "state";
    case option_section::log:
      return "log";
    case option_section::group:
      return "group";
  }
  return "";
}

std::string_view section_header(option_section s) {
  switch (s) {
    case option_section::ingest:
      return "[ingest]";
    case option_section::http:
      return "[http]";
    case option_section::evaluation:
      return "[evaluation]";
    case option_section::state:
      return "[state]";
    case option_section::log:
      return "[log]";
    case option_section::group:
      return "[[group]]";
  }
  return "";
}

namespace detail {

std::string describe_value(const toml::node& v) {
  switch (v.type()) {
    case toml::node_type::string: {
      std::string s(v.as_string()->get());
      if (s.size() > 40) s = s.substr(0, 37) + "...";
      return "a string (" + toml_quote(s) + ")";
    }
    case toml::node_type::integer:
      return "an integer (" + std::to_string(v.as_integer()->get()) + ")";
    case toml::node_type::floating_point: {
      const double d = v.as_floating_point()->get();
      return "a float (" +
             (std::isfinite(d) ? toml_float(d)
                               : std::string(d > 0   ? "inf"
                                             : d < 0 ? "-inf"
                                                     : "nan")) +
             ")";
    }
    case toml::node_type::boolean:
      return v.as_boolean()->get() ? "a boolean (true)" : "a boolean (false)";
    case toml::node_type::array:
      return "an array";
    case toml::node_type::table:
      return "a table";
    case toml::node_type::date:
      return "a date";
    case toml::node_type::time:
      return "a time";
    case toml::node_type::date_time:
      return "a date-time";
    case toml::node_type::none:
      break;
  }
  return "nothing";
}

std::string toml_quote(std::string_view s) {
  static const char hex[] = "0123456789ABCDEF";
  std::string out = "\"";
  for (char c : s) {
    const auto u = static_cast<unsigned char>(c);
    if (c == '"' || c == '\\') {
      out += '\\';
      out += c;
    } else if (u < 0x20 || u == 0x7F) {
      out += "\\u00";
      out += hex[u >> 4];
      out += hex[u & 15];
    } else {
      out += c;
    }
  }
  return out + "\"";
}

namespace {

// Shortest round-trip text, as std::to_chars gives it ("0.005", "1e-06").
std::string shortest(double v) {
  char buf[64];
  const auto r = std::to_chars(buf, buf + sizeof buf, v);
  return std::string(buf, r.ptr);
}

}  // namespace

std::string toml_float(double v) {
  std::string s = shortest(v);
  if (s.find_first_of(".eE") == std::string::npos) s += ".0";
  return s;
}

namespace {

constexpr double inf = std::numeric_limits<double>::infinity();

template <typename T>
using access_fn = T& (*)(parse_state&);

// ---- reading values -------------------------------------------------------

std::optional<int64_t> read_integer(const toml::node& v, const std::string& bounds,
                                    std::vector<issue>& out) {
  if (const auto* p = v.as_integer()) return p->get();
  out.push_back({"must be an integer (" + bounds + "), got " + describe_value(v)});
  return std::nullopt;
}

std::optional<double> read_float(const toml::node& v, const std::string& bounds,
                                 std::vector<issue>& out) {
  if (const auto* p = v.as_integer()) return static_cast<double>(p->get());
  if (const auto* p = v.as_floating_point()) {
    if (std::isfinite(p->get())) return p->get();
    out.push_back({"must be a finite number (" + bounds + "), got " + describe_value(v)});
    return std::nullopt;
  }
  out.push_back({"must be a number (" + bounds + "), got " + describe_value(v)});
  return std::nullopt;
}

std::optional<std::string> read_string(const toml::node& v, std::string_view what,
                                       std::vector<issue>& out) {
  if (const auto* p = v.as_string()) return std::string(p->get());
  out.push_back({"must be a string (" + std::string(what) + "), got " + describe_value(v)});
  return std::nullopt;
}

// ---- bounds ---------------------------------------------------------------

struct float_bounds {
  double lo = -inf;
  bool lo_open = false;
  double hi = inf;
  bool hi_open = false;

  bool contains(double v) const {
    return (lo_open ? v > lo : v >= lo) && (hi_open ? v < hi : v <= hi);
  }
  std::string text() const {
    std::string s;
    if (std::isfinite(lo)) s = (lo_open ? "> " : ">= ") + shortest(lo);
    if (std::isfinite(hi))
      s += (s.empty() ? "" : " and ") + std::string(hi_open ? "< " : "<= ") + shortest(hi);
    return s.empty() ? "any finite number" : s;
  }
};

std::string range_text(int64_t lo, int64_t hi) {
  return std::to_string(lo) + " .. " + std::to_string(hi);
}

// ---- builders -------------------------------------------------------------

struct builder {
  parse_state defaults;  // built-in defaults, read for the default texts
  std::vector<option_spec> specs;

  option_spec& add(option_section s, std::string_view key, std::string_view type,
                   std::string default_value, std::string bounds, std::string_view help,
                   apply_fn apply, std::string_view no_default = "") {
    option_spec o;
    o.info =
        option_info{s, key, type, std::move(default_value), no_default, std::move(bounds), help};
    o.apply = std::move(apply);
    specs.push_back(std::move(o));
    return specs.back();
  }

  template <typename T>
  void integer(option_section s, std::string_view key, int64_t lo, int64_t hi,
               std::string_view help, access_fn<T> access) {
    const std::string bounds = range_text(lo, hi);
    add(s, key, "integer", std::to_string(access(defaults)), bounds, help,
        [=](const toml::node& v, parse_state& st, std::vector<issue>& out) {
          const auto x = read_integer(v, bounds, out);
          if (!x) return;
          if (*x < lo || *x > hi) {
            out.push_back({"must be between " + std::to_string(lo) + " and " + std::to_string(hi) +
                           ", got " + std::to_string(*x)});
            return;
          }
          access(st) = static_cast<T>(*x);
        });
  }

  void number(option_section s, std::string_view key, float_bounds b, std::string_view help,
              access_fn<double> access) {
    const std::string bounds = b.text();
    add(s, key, "float", toml_float(access(defaults)), bounds, help,
        [=](const toml::node& v, parse_state& st, std::vector<issue>& out) {
          const auto x = read_float(v, bounds, out);
          if (!x) return;
          if (!b.contains(*x)) {
            out.push_back({"must be " + bounds + ", got " + shortest(*x)});
            return;
          }
          access(st) = *x;
        });
  }

  void optional_number(option_section s, std::string_view key, float_bounds b,
                       std::string_view help, access_fn<std::optional<double>> access) {
    const std::string bounds = b.text();
    const std::optional<double> d = access(defaults);
    add(
        s, key, "float", d ? toml_float(*d) : std::string(), bounds, help,
        [=](const toml::node& v, parse_state& st, std::vector<issue>& out) {
          const auto x = read_float(v, bounds, out);
          if (!x) return;
          if (!b.contains(*x)) {
            out.push_back({"must be " + bounds + ", got " + shortest(*x)});
            return;
          }
          access(st) = *x;
        },
        "(unset)");
  }

  template <typename T>
  void choice(option_section s, std::string_view key,
              std::vector<std::pair<std::string_view, T>> choices, std::string_view help,
              access_fn<T> access) {
    std::string bounds, def;
    for (const auto& [name, value] : choices) {
      bounds += (bounds.empty() ? "" : " | ") + toml_quote(name);
      if (value == access(defaults)) def = toml_quote(name);
    }
    add(s, key, "string", def, bounds, help,
        [=](const toml::node& v, parse_state& st, std::vector<issue>& out) {
          const auto x = read_string(v, bounds, out);
          if (!x) return;
          for (const auto& [name, value] : choices)
            if (*x == name) {
              access(st) = value;
              return;
            }
          out.push_back({"must be one of " + bounds + ", got " + toml_quote(*x)});
        });
  }

  void address(option_section s, std::string_view key, std::string_view help,
               access_fn<host_port> access) {
    const std::string bounds = "\"HOST:PORT\" (port 0 = any free port) | \"off\"";
    add(s, key, "string", toml_quote(format_host_port(access(defaults))), bounds, help,
        [=](const toml::node& v, parse_state& st, std::vector<issue>& out) {
          const auto x = read_string(v, bounds, out);
          if (!x) return;
          auto hp = parse_host_port(*x);
          if (!hp) {
            out.push_back({"is not a listening address: " + hp.err().message});
            return;
          }
          access(st) = hp.value();
        });
  }

  // "auto" = 0, "none" = 1, or a block length L >= 2.
  void block_length(option_section s, std::string_view key, std::string_view help,
                    access_fn<uint32_t> access) {
    constexpr int64_t hi = 500000;  // half the largest window
    const std::string bounds = "\"auto\" | \"none\" | 2 .. " + std::to_string(hi);
    const uint32_t d = access(defaults);
    const std::string def = d == 0 ? "\"auto\"" : d == 1 ? "\"none\"" : std::to_string(d);
    add(s, key, "string or integer", def, bounds, help,
        [=](const toml::node& v, parse_state& st, std::vector<issue>& out) {
          if (const auto* str = v.as_string()) {
            if (str->get() == "auto") {
              access(st) = 0;
            } else if (str->get() == "none") {
              access(st) = 1;
            } else {
              out.push_back({"must be " + bounds + ", got " + describe_value(v)});
            }
            return;
          }
          const auto* i = v.as_integer();
          if (!i) {
            out.push_back({"must be " + bounds + ", got " + describe_value(v)});
            return;
          }
          const int64_t x = i->get();
          if (x == 0 || x == 1) {
            out.push_back({"must be " + bounds + ", got " + std::to_string(x) + " (write " +
                           (x == 0 ? "\"auto\"" : "\"none\" for single values") + ")"});
          } else if (x < 2 || x > hi) {
            out.push_back({"must be " + bounds + ", got " + std::to_string(x)});
          } else {
            access(st) = static_cast<uint32_t>(x);
          }
        });
  }
};

// RFC 6750, section 2.1: b64token = 1*( ALPHA / DIGIT / "-" / "." / "_" / "~"
// / "+" / "/" ) *"=". The 16-character minimum is common practice for shared
// secrets, not a requirement of the RFC.
constexpr std::size_t min_token_chars = 16;
constexpr std::size_t max_token_chars = 4096;

std::optional<std::string> token_problem(std::string_view t) {
  if (t.size() < min_token_chars || t.size() > max_token_chars)
    return "must be " + std::to_string(min_token_chars) + " .. " + std::to_string(max_token_chars) +
           " characters long, got " + std::to_string(t.size());
  std::size_t i = 0;
  auto token_char = [](char c) {
    return std::isalnum(static_cast<unsigned char>(c)) || c == '-' || c == '.' || c == '_' ||
           c == '~' || c == '+' || c == '/';
  };
  while (i < t.size() && token_char(t[i]))
    ++i;
  const std::size_t body = i;
  while (i < t.size() && t[i] == '=')
    ++i;
  if (body == 0 || i != t.size())
    return std::string(
        "may hold only letters, digits and - . _ ~ + /, optionally followed by '=' padding "
        "(RFC 6750 token syntax)");
  return std::nullopt;
}

std::string resolve(const parse_state& st, const std::string& p) {
  const std::filesystem::path path(p);
  if (path.is_absolute() || st.base_dir.empty()) return path.string();
  return (st.base_dir / path).string();
}

constexpr std::size_t max_path_bytes = 4096;
constexpr std::size_t max_token_file_bytes = 65536;

std::vector<option_spec> build() {
  using S = option_section;
  builder b;

  // [ingest]
  b.address(
      S::ingest, "tcp",
      "Where to accept TCP connections that carry measurement lines; \"off\" disables it.",
      +[](parse_state& s) -> host_port& { return s.config.ingest.tcp; });
  b.address(
      S::ingest, "udp", "Where to receive measurement lines as UDP datagrams; \"off\" disables it.",
      +[](parse_state& s) -> host_port& { return s.config.ingest.udp; });
  b.integer<std::size_t>(
      S::ingest, "max_line_bytes", 16, 1048576,
      "Longest measurement line accepted, in bytes, newline included; longer lines are rejected.",
      +[](parse_state& s) -> std::size_t& { return s.config.ingest.max_line_bytes; });
  b.integer<std::size_t>(
      S::ingest, "max_streams", 1, 10000000,
      "Most streams tracked at once; samples of further new streams are rejected.",
      +[](parse_state& s) -> std::size_t& { return s.config.ingest.max_streams; });
  b.integer<std::size_t>(
      S::ingest, "max_connections", 1, 65536, "Most TCP ingest connections open at once.",
      +[](parse_state& s) -> std::size_t& { return s.config.ingest.max_connections; });
  b.number(
      S::ingest, "idle_timeout_seconds", {1, false, 86400, false},
      "A TCP ingest connection that sends nothing for this long is closed, in seconds.",
      +[](parse_state& s) -> double& { return s.config.ingest.idle_timeout_seconds; });

  // [http]
  b.address(
      S::http, "listen",
      "Where the HTTP endpoint (Prometheus metrics and the API) listens; \"off\" disables "
      "it.",
      +[](parse_state& s) -> host_port& { return s.config.http.listen; });
  b.add(S::http, "api_token", "string", toml_quote(b.defaults.config.http.api_token),
        "\"\" (no token) | 16 .. 4096 characters of RFC 6750 token syntax",
        "Bearer token the HTTP API requires; \"\" = none. Prefer api_token_file, which keeps "
        "the secret out of this file.",
        [](const toml::node& v, parse_state& st, std::vector<issue>& out) {
          const auto x = read_string(v, "a bearer token", out);
          if (!x) return;
          if (!x->empty()) {
            if (auto p = token_problem(*x)) {
              out.push_back({*p});
              return;
            }
          }
          st.config.http.api_token = *x;
          st.token_inline = !x->empty();
        });
  b.add(S::http, "api_token_file", "string", toml_quote(b.defaults.config.http.api_token_file),
        "\"\" (none) | a file path, relative to this file's directory",
        "File holding the API bearer token (surrounding whitespace is trimmed); \"\" = none.",
        [](const toml::node& v, parse_state& st, std::vector<issue>& out) {
          const auto x = read_string(v, "a file path", out);
          if (!x) return;
          if (x->empty()) {
            st.config.http.api_token_file.clear();
            return;
          }
          if (x->size() > max_path_bytes) {
            out.push_back({"is longer than " + std::to_string(max_path_bytes) + " bytes"});
            return;
          }
          const std::string path = resolve(st, *x);
          std::error_code ec;
          if (!std::filesystem::is_regular_file(path, ec)) {
            out.push_back({"names " + toml_quote(path) + ", which cannot be read: " +
                           (ec ? ec.message() : std::string("not a regular file"))});
            return;
          }
          std::ifstream in(path, std::ios::binary);
          std::string text(max_token_file_bytes + 1, '\0');
          in.read(text.data(), static_cast<std::streamsize>(text.size()));
          if (in.bad() || (!in && !in.eof())) {
            out.push_back({"names " + toml_quote(path) + ", which cannot be read"});
            return;
          }
          text.resize(static_cast<std::size_t>(in.gcount()));
          if (text.size() > max_token_file_bytes) {
            out.push_back({"names " + toml_quote(path) + ", which is larger than " +
                           std::to_string(max_token_file_bytes) + " bytes"});
            return;
          }
          const auto first = text.find_first_not_of(" \t\r\n");
          const auto last = text.find_last_not_of(" \t\r\n");
          const std::string token =
              first == std::string::npos ? std::string() : text.substr(first, last - first + 1);
          if (token.empty()) {
            out.push_back({"names " + toml_quote(path) + ", which holds no token"});
            return;
          }
          if (auto p = token_problem(token)) {
            out.push_back({"names " + toml_quote(path) + ", whose token " + *p});
            return;
          }
          st.config.http.api_token = token;
          st.config.http.api_token_file = path;
          st.token_from_file = true;
        });
  b.integer<std::size_t>(
      S::http, "max_connections", 1, 4096, "Most HTTP connections open at once.",
      +[](parse_state& s) -> std::size_t& { return s.config.http.max_connections; });

  // [evaluation]
  b.integer<unsigned>(
      S::evaluation, "threads", 0, 256,
      "Threads that run the tests and intervals; 0 = one per core.",
      +[](parse_state& s) -> unsigned& { return s.config.evaluation.threads; });
  b.integer<uint64_t>(
      S::evaluation, "seed", 0, std::numeric_limits<int64_t>::max(),
      "Seed of all resampling; the same seed and data give the same results.",
      +[](parse_state& s) -> uint64_t& { return s.config.evaluation.seed; });

  // [state]
  b.add(S::state, "data_dir", "string", toml_quote(b.defaults.config.state.data_dir),
        "\"\" (snapshots off) | a directory path, relative to this file's directory",
        "Directory for snapshots of every stream's state, restored at start; created when "
        "missing. `plumbline serve --data-dir` overrides it.",
        [](const toml::node& v, parse_state& st, std::vector<issue>& out) {
          const auto x = read_string(v, "a directory path", out);
          if (!x) return;
          if (x->size() > max_path_bytes) {
            out.push_back({"is longer than " + std::to_string(max_path_bytes) + " bytes"});
            return;
          }
          st.config.state.data_dir = x->empty() ? std::string() : resolve(st, *x);
        });
  b.number(
      S::state, "snapshot_interval_seconds", {0, false, 86400, false},
      "Seconds between snapshots; 0 = only on POST /api/snapshot and at a graceful stop.",
      +[](parse_state& s) -> double& { return s.config.state.snapshot_interval_seconds; });

  // [log]
  b.choice<std::string>(
      S::log, "level", {{"debug", "debug"}, {"info", "info"}, {"warn", "warn"}, {"error", "error"}},
      "Least severe message written to the log.",
      +[](parse_state& s) -> std::string& { return s.config.log.level; });

  // [[group]]
  b.add(
      S::group, "name", "string", "",
      "1 .. " + std::to_string(max_group_name_bytes) + " letters, digits, '_', '-', '.'",
      "The group's name, unique in the file; it labels the group's metrics.",
      [](const toml::node& v, parse_state& st, std::vector<issue>& out) {
        const auto x = read_string(v, "a group name", out);
        if (!x) return;
        const bool chars_ok = std::all_of(x->begin(), x->end(), [](char c) {
          return std::isalnum(static_cast<unsigned char>(c)) || c == '_' || c == '-' || c == '.';
        });
        if (x->empty() || x->size() > max_group_name_bytes || !chars_ok) {
          out.push_back({"must be 1 .. " + std::to_string(max_group_name_bytes) +
                         " letters, digits, '_', '-' or '.', got " + toml_quote(*x)});
          return;
        }
        st.group.group.name = *x;
      },
      "(required)");
  b.add(
      S::group, "match", "string", "",
      "a pattern of 1 .. " + std::to_string(max_pattern_bytes) + " bytes",
      "Stream names the group covers: '*' matches any run of characters, '/' included; '?' one "
      "character. The first group that matches a stream wins.",
      [](const toml::node& v, parse_state& st, std::vector<issue>& out) {
        const auto x = read_string(v, "a stream-name pattern", out);
        if (!x) return;
        if (x->empty() || x->size() > max_pattern_bytes) {
          out.push_back({"must be 1 .. " + std::to_string(max_pattern_bytes) + " bytes long, got " +
                         std::to_string(x->size())});
          return;
        }
        for (char c : *x)
          if (static_cast<unsigned char>(c) < 0x20 || c == 0x7F) {
            out.push_back({"holds a control character; stream names have none"});
            return;
          }
        st.group.group.match = *x;
      },
      "(required)");
  b.integer<uint32_t>(
      S::group, "dimension", 0, 256,
      "Values per sample; 0 = the stream's first record decides. 2 or more needs tests = "
      "[\"energy\"] and interval = \"none\".",
      +[](parse_state& s) -> uint32_t& { return s.group.group.settings.dimension; });
  b.choice<reference_policy>(
      S::group, "reference",
      {{"baseline", reference_policy::baseline},
       {"lagged", reference_policy::lagged},
       {"file", reference_policy::file}},
      "Where the reference window comes from: the first samples, then frozen (baseline); the "
      "samples just before the recent window, sliding (lagged); or reference_file (file).",
      +[](parse_state& s) -> reference_policy& { return s.group.group.settings.policy; });
  b.add(
      S::group, "reference_file", "string", "",
      "a CSV file path, relative to this file's directory",
      "The reference sample for reference = \"file\": one value (or one row of dimension "
      "values) per line.",
      [](const toml::node& v, parse_state& st, std::vector<issue>& out) {
        const auto x = read_string(v, "a CSV file path", out);
        if (!x) return;
        if (x->empty() || x->size() > max_path_bytes) {
          out.push_back(
              {"must be a file path of 1 .. " + std::to_string(max_path_bytes) + " bytes"});
          return;
        }
        st.group.group.reference_file = resolve(st, *x);
        st.group.group.reference_file_position = position_of(v.source());
      },
      "(unset)");
  b.integer<std::size_t>(
      S::group, "reference_size", 2, 1000000, "Samples in the reference window.",
      +[](parse_state& s) -> std::size_t& { return s.group.group.settings.reference_size; });
  b.integer<std::size_t>(
      S::group, "recent_size", 2, 1000000, "Samples in the recent window.",
      +[](parse_state& s) -> std::size_t& { return s.group.group.settings.recent_size; });
  b.integer<uint64_t>(
      S::group, "every_samples", 0, 1000000,
      "Evaluate after this many new samples; 0 = not by count.",
      +[](parse_state& s) -> uint64_t& { return s.group.group.settings.every_samples; });
  b.number(
      S::group, "every_seconds", {0, false, 86400, false},
      "Evaluate also at this interval, in seconds; 0 = not by time.",
      +[](parse_state& s) -> double& { return s.group.group.settings.every_seconds; });
  {
    std::string names, def;
    constexpr test_kind kinds[] = {test_kind::mean_diff, test_kind::median_diff, test_kind::welch,
                                   test_kind::ks,        test_kind::cvm,         test_kind::ad,
                                   test_kind::energy};
    for (test_kind k : kinds)
      names += (names.empty() ? "" : ", ") + std::string(test_name(k));
    for (test_kind k : b.defaults.group.group.settings.tests)
      def += (def.empty() ? "" : ", ") + toml_quote(test_name(k));
    b.add(
        S::group, "tests", "array of strings", "[" + def + "]", "1 or more of " + names,
        "Permutation tests run at each evaluation; the first one drives the alarm.",
        [names](const toml::node& v, parse_state& st, std::vector<issue>& out) {
          const auto* arr = v.as_array();
          if (!arr) {
            out.push_back(
                {"must be an array of test names (" + names + "), got " + describe_value(v)});
            return;
          }
          if (arr->empty()) {
            out.push_back({"must name at least one test (" + names + ")"});
            return;
          }
          std::vector<test_kind> tests;
          bool ok = true;
          for (const toml::node& el : *arr) {
            const auto* s = el.as_string();
            const auto t = s ? parse_test_name(s->get()) : std::nullopt;
            if (!t) {
              out.push_back({"has " + (s ? toml_quote(s->get()) : describe_value(el)) +
                                 ", which is not a test name (" + names + ")",
                             position_of(el.source())});
              ok = false;
            } else if (std::find(tests.begin(), tests.end(), *t) != tests.end()) {
              out.push_back({"lists " + toml_quote(s->get()) + " twice", position_of(el.source())});
              ok = false;
            } else {
              tests.push_back(*t);
            }
          }
          if (ok) st.group.group.settings.tests = std::move(tests);
        });
  }
  b.number(
      S::group, "alpha", {0, true, 1, true},
      "Significance level: an evaluation with p below alpha is a signal.",
      +[](parse_state& s) -> double& { return s.group.group.settings.alarm.alpha; });
  b.integer<uint64_t>(
      S::group, "resamples", 1, static_cast<int64_t>(max_resamples),
      "Monte Carlo resamples of each test.",
      +[](parse_state& s) -> uint64_t& { return s.group.group.settings.permutation.resamples; });
  b.integer<uint64_t>(
      S::group, "stop_after", 0, static_cast<int64_t>(max_resamples) - 1,
      "Stop resampling after this many exceedances (Besag & Clifford 1991 sequential p-value); "
      "0 = off. Must be below resamples.",
      +[](parse_state& s) -> uint64_t& { return s.group.group.settings.permutation.stop_after; });
  b.choice<exact_mode>(
      S::group, "exact",
      {{"auto", exact_mode::automatic},
       {"always", exact_mode::always},
       {"never", exact_mode::never}},
      "Enumerate every split instead of resampling: when there are at most 100000 (auto), always, "
      "or never.",
      +[](parse_state& s) -> exact_mode& { return s.group.group.settings.permutation.exact; });
  b.block_length(
      S::group, "block",
      "Permute blocks of this many consecutive samples, for autocorrelated streams; \"auto\" "
      "uses blocks only when the windows are autocorrelated; \"none\" permutes single samples.",
      +[](parse_state& s) -> uint32_t& { return s.group.group.settings.permutation.block_length; });
  {
    const std::string bounds =
        "\"none\" | \"mean-diff\" | \"median-diff\" | \"quantile-diff:Q\" (0 < Q < 1) | "
        "\"sd-ratio\" | \"cpk\"";
    const group_draft& d = b.defaults.group;
    std::string def = "none";
    if (!d.interval_none) {
      def = std::string(quantity_name(d.interval.quantity));
      if (d.interval.quantity == drift_quantity::quantile_diff)
        def += ":" + shortest(d.interval.quantile);
    }
    b.add(S::group, "interval", "string", toml_quote(def), bounds,
          "Bootstrap drift interval of recent against reference, in the measurement's units; "
          "cpk needs spec_lower and/or spec_upper. Univariate streams only.",
          [bounds](const toml::node& v, parse_state& st, std::vector<issue>& out) {
            const auto x = read_string(v, bounds, out);
            if (!x) return;
            group_draft& g = st.group;
            const std::string& q = *x;
            auto set = [&](drift_quantity k) {
              g.interval_none = false;
              g.interval.quantity = k;
            };
            if (q == "none") {
              g.interval_none = true;
            } else if (q == "mean-diff") {
              set(drift_quantity::mean_diff);
            } else if (q == "median-diff") {
              set(drift_quantity::median_diff);
            } else if (q == "sd-ratio") {
              set(drift_quantity::sd_ratio);
            } else if (q == "cpk") {
              set(drift_quantity::cpk);
            } else if (q.rfind("quantile-diff:", 0) == 0) {
              const std::string_view num = std::string_view(q).substr(14);
              double value = 0;
              const auto r = std::from_chars(num.data(), num.data() + num.size(), value);
              if (num.empty() || r.ec != std::errc() || r.ptr != num.data() + num.size() ||
                  !(value > 0 && value < 1)) {
                out.push_back({"quantile-diff:Q needs a Q strictly between 0 and 1, got " +
                               toml_quote(std::string(num))});
                return;
              }
              set(drift_quantity::quantile_diff);
              g.interval.quantile = value;
            } else {
              out.push_back({"must be one of " + bounds + ", got " + toml_quote(q)});
            }
          });
  }
  b.choice<interval_method>(
      S::group, "interval_method",
      {{"percentile", interval_method::percentile},
       {"basic", interval_method::basic},
       {"bca", interval_method::bca}},
      "Bootstrap interval method: percentile, basic, or bias-corrected and accelerated (Efron "
      "1987).",
      +[](parse_state& s) -> interval_method& { return s.group.interval.method; });
  b.number(
      S::group, "interval_level", {0, true, 1, true}, "Confidence level of the interval.",
      +[](parse_state& s) -> double& { return s.group.interval.level; });
  b.integer<uint64_t>(
      S::group, "interval_resamples", 1, static_cast<int64_t>(max_bootstrap_resamples),
      "Bootstrap resamples of the interval.",
      +[](parse_state& s) -> uint64_t& { return s.group.interval.resamples; });
  b.block_length(
      S::group, "interval_block",
      "Resample blocks of this many consecutive samples; \"auto\" uses blocks only when the "
      "windows are autocorrelated; \"none\" resamples single samples.",
      +[](parse_state& s) -> uint32_t& { return s.group.interval.block_length; });
  b.choice<block_scheme>(
      S::group, "interval_block_scheme",
      {{"circular", block_scheme::circular}, {"stationary", block_scheme::stationary}},
      "Bootstrap blocks of fixed length (circular, Politis & Romano 1992) or of random length "
      "(stationary, Politis & Romano 1994).",
      +[](parse_state& s) -> block_scheme& { return s.group.interval.scheme; });
  b.optional_number(
      S::group, "spec_lower", {}, "Lower specification limit, for interval = \"cpk\".",
      +[](parse_state& s) -> std::optional<double>& { return s.group.interval.spec_lower; });
  b.optional_number(
      S::group, "spec_upper", {}, "Upper specification limit, for interval = \"cpk\".",
      +[](parse_state& s) -> std::optional<double>& { return s.group.interval.spec_upper; });
  b.optional_number(
      S::group, "tolerance", {0, true, inf, false},
      "Practical tolerance d: a signal needs the drift interval wholly outside [-d, d] (around 1 "
      "for sd-ratio) as well as p < alpha.",
      +[](parse_state& s) -> std::optional<double>& {
        return s.group.group.settings.alarm.tolerance;
      });
  b.integer<uint32_t>(
      S::group, "raise_after", 1, 1000, "Consecutive signals that raise the alarm.",
      +[](parse_state& s) -> uint32_t& { return s.group.group.settings.alarm.raise_after; });
  b.integer<uint32_t>(
      S::group, "clear_after", 1, 1000, "Consecutive quiet evaluations that clear a raised alarm.",
      +[](parse_state& s) -> uint32_t& { return s.group.group.settings.alarm.clear_after; });
  b.integer<std::size_t>(
      S::group, "history", 1, 10000, "Alarm raise and clear events kept per stream.",
      +[](parse_state& s) -> std::size_t& { return s.group.group.settings.alarm.history_limit; });
  return std::move(b.specs);
}

}  // namespace

const std::vector<option_spec>& option_specs() {
  static const std::vector<option_spec> specs = build();
  return specs;
}

const option_spec* find_spec(option_section section, std::string_view key) {
  for (const option_spec& s : option_specs())
    if (s.info.section == section && s.info.key == key) return &s;
  return nullptr;
}

}  // namespace detail

const std::vector<option_info>& option_table() {
  static const std::vector<option_info> table = [] {
    std::vector<option_info> t;
    for (const detail::option_spec& s : detail::option_specs())
      t.push_back(s.info);
    return t;
  }();
  return table;
}

const option_info* find_option(option_section section, std::string_view key) {
  for (const option_info& o : option_table())
    if (o.section == section && o.key == key) return &o;
  return nullptr;
}

}  // namespace plumbline::config
