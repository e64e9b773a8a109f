// options.cc: listening addresses, the default configuration, group lookup.
// See options.h.
//
// Design note on addresses. IPv4 and IPv6 literals are checked with
// inet_pton (POSIX), so exactly the forms the socket layer accepts pass.
// Anything else must be a host name in the RFC 1123 sense (section 2.1):
// dot-separated labels of 1 to 63 letters, digits and hyphens, neither
// starting nor ending with a hyphen, 253 characters at most. A host of
// digits and dots only is taken as an IPv4 address, never as a name.
#include "config/options.h"

#include <arpa/inet.h>

#include <algorithm>
#include <cctype>

#include "config/glob.h"

namespace plumbline::config {

namespace {

bool valid_host_name(std::string_view h) {
  if (h.empty() || h.size() > 253) return false;
  std::size_t label = 0;
  char prev = '.';
  for (char c : h) {
    if (c == '.') {
      if (label == 0 || prev == '-') return false;
      label = 0;
    } else if (std::isalnum(static_cast<unsigned char>(c)) || c == '-') {
      if (label == 0 && c == '-') return false;
      if (++label > 63) return false;
    } else {
      return false;
    }
    prev = c;
  }
  return label > 0 && prev != '-';
}

expected<uint16_t> parse_port(std::string_view text, std::string_view whole) {
  if (text.empty() || text.size() > 5 || !std::all_of(text.begin(), text.end(), [](char c) {
        return std::isdigit(static_cast<unsigned char>(c));
      }))
    return make_error("\"" + std::string(whole) +
                      "\": the port must be a number from 0 to 65535 (0 = any free port)");
  unsigned long v = 0;
  for (char c : text)
    v = v * 10 + static_cast<unsigned long>(c - '0');
  if (v > 65535)
    return make_error("\"" + std::string(whole) + "\": port " + std::string(text) +
                      " is above 65535");
  return static_cast<uint16_t>(v);
}

}  // namespace

expected<host_port> parse_host_port(std::string_view text) {
  if (text.empty() || text == "off") return host_port{"", 0, false};
  const std::string whole(text);
  if (text.size() > 300)
    return make_error("address is too long (" + std::to_string(text.size()) +
                      " characters; at most 300)");
  std::string_view host, port;
  if (text.front() == '[') {
    const std::size_t close = text.find(']');
    if (close == std::string_view::npos)
      return make_error("\"" + whole + "\": '[' without a closing ']'");
    host = text.substr(1, close - 1);
    if (close + 1 >= text.size() || text[close + 1] != ':')
      return make_error("\"" + whole + "\": expected HOST:PORT, e.g. [::1]:7301");
    port = text.substr(close + 2);
    in6_addr a6;
    if (host.empty() || ::inet_pton(AF_INET6, std::string(host).c_str(), &a6) != 1)
      return make_error("\"" + whole + "\": \"" + std::string(host) +
                        "\" is not a valid IPv6 address");
  } else {
    const std::size_t colon = text.rfind(':');
    if (colon == std::string_view::npos)
      return make_error("\"" + whole + "\": expected HOST:PORT, e.g. 127.0.0.1:7301, or \"off\"");
    if (text.find(':') != colon)
      return make_error("\"" + whole + "\": an IPv6 address goes in brackets, e.g. [::1]:7301");
    host = text.substr(0, colon);
    port = text.substr(colon + 1);
    if (host.empty())
      return make_error("\"" + whole +
                        "\": the host is missing (0.0.0.0 listens on every IPv4 address)");
    const bool numeric = std::all_of(host.begin(), host.end(), [](char c) {
      return c == '.' || std::isdigit(static_cast<unsigned char>(c));
    });
    if (numeric) {
      in_addr a4;
      if (::inet_pton(AF_INET, std::string(host).c_str(), &a4) != 1)
        return make_error("\"" + whole + "\": \"" + std::string(host) +
                          "\" is not a valid IPv4 address");
    } else if (!valid_host_name(host)) {
      return make_error("\"" + whole + "\": \"" + std::string(host) +
                        "\" is not a valid host name (letters, digits, '-' and '.')");
    }
  }
  auto p = parse_port(port, text);
  if (!p) return p.err();
  return host_port{std::string(host), p.value(), true};
}

std::string format_host_port(const host_port& hp) {
  if (!hp.enabled) return "off";
  const std::string port = std::to_string(hp.port);
  if (hp.host.find(':') != std::string::npos) return "[" + hp.host + "]:" + port;
  return hp.host + ":" + port;
}

daemon_config default_config() {
  daemon_config c;
  stream_group g;
  g.name = "default";
  g.match = "*";
  c.groups.push_back(std::move(g));
  return c;
}

const stream_group* find_group(const daemon_config& config, std::string_view stream) {
  for (const stream_group& g : config.groups)
    if (glob_match(g.match, stream)) return &g;
  return nullptr;
}

}  // namespace plumbline::config
