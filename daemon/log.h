// log.h: the daemon's event log, one line per event on stderr.
//
// Purpose. Operators read the log when something surprised them; scripts
// grep it. Each event is one line:
//
//   2026-12-01T23:40:12.345Z info  plumbline listening: ingest_tcp=127.0.0.1:7301 ...
//
// (UTC time with milliseconds, the level padded to five characters, the
// message). Messages never contain a newline: any control character in a
// message (for instance from a stream name or a file's contents) is written as
// \xHH, so one event is always one line.
//
// Thread-safety. All functions may be called from any thread; a line is
// written with a single write(2), so lines from different threads never
// interleave. The level threshold is an atomic.
#pragma once

#include <optional>
#include <string>
#include <string_view>

namespace plumbline::log {

enum class level { debug, info, warn, error };

// "debug", "info", "warn", "error".
std::string_view level_name(level l);
std::optional<level> parse_level(std::string_view name);

// Events below the threshold are dropped. Default: info.
void set_threshold(level l);
level threshold();
bool enabled(level l);

// Writes one event line (see above).
void write(level l, std::string_view message);

inline void debug(std::string_view m) {
  if (enabled(level::debug)) write(level::debug, m);
}
inline void info(std::string_view m) {
  write(level::info, m);
}
inline void warn(std::string_view m) {
  write(level::warn, m);
}
inline void error(std::string_view m) {
  write(level::error, m);
}

// The line `write` would print, without the time stamp; exposed for tests.
std::string format_message(std::string_view message);

}  // namespace plumbline::log
