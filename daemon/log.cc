// log.cc: see log.h.
#include "daemon/log.h"

#include <unistd.h>

#include <array>
#include <atomic>
#include <chrono>
#include <cstdio>
#include <ctime>

namespace plumbline::log {
namespace {

std::atomic<int> threshold_{static_cast<int>(level::info)};

}  // namespace

std::string_view level_name(level l) {
  switch (l) {
    case level::debug:
      return "debug";
    case level::info:
      return "info";
    case level::warn:
      return "warn";
    case level::error:
      return "error";
  }
  return "info";
}

std::optional<level> parse_level(std::string_view name) {
  for (level l : {level::debug, level::info, level::warn, level::error}) {
    if (level_name(l) == name) return l;
  }
  return std::nullopt;
}

void set_threshold(level l) {
  threshold_.store(static_cast<int>(l), std::memory_order_relaxed);
}
level threshold() {
  return static_cast<level>(threshold_.load(std::memory_order_relaxed));
}
bool enabled(level l) {
  return static_cast<int>(l) >= threshold_.load(std::memory_order_relaxed);
}

std::string format_message(std::string_view message) {
  std::string out;
  out.reserve(message.size());
  static constexpr char hex[] = "0123456789abcdef";
  for (unsigned char c : message) {
    if (c < 0x20 || c == 0x7f) {
      out += "\\x";
      out += hex[c >> 4];
      out += hex[c & 15];
    } else {
      out += static_cast<char>(c);
    }
  }
  return out;
}

void write(level l, std::string_view message) {
  if (!enabled(l)) return;
  const auto now = std::chrono::system_clock::now();
  const auto ms = std::chrono::duration_cast<std::chrono::milliseconds>(now.time_since_epoch());
  const std::time_t secs = static_cast<std::time_t>(ms.count() / 1000);
  std::tm tm{};
  gmtime_r(&secs, &tm);
  std::array<char, 64> stamp{};
  const int n = std::snprintf(stamp.data(), stamp.size(), "%04d-%02d-%02dT%02d:%02d:%02d.%03dZ ",
                              tm.tm_year + 1900, tm.tm_mon + 1, tm.tm_mday, tm.tm_hour, tm.tm_min,
                              tm.tm_sec, static_cast<int>(ms.count() % 1000));
  std::string line(stamp.data(), n > 0 ? static_cast<std::size_t>(n) : 0);
  std::string_view name = level_name(l);
  line += name;
  line.append(6 - name.size(), ' ');
  line += format_message(message);
  line += '\n';
  const char* p = line.data();
  std::size_t left = line.size();
  while (left > 0) {
    const ssize_t w = ::write(STDERR_FILENO, p, left);
    if (w <= 0) break;  // nowhere to report a failing stderr
    p += w;
    left -= static_cast<std::size_t>(w);
  }
}

}  // namespace plumbline::log
