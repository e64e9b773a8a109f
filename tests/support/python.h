// support/python.h: run a reference script under Debian's /usr/bin/python3.
//
// Reference tests send a JSON request on the script's stdin and read one JSON
// document from its stdout. A script that fails (SciPy missing, an exception)
// fails the test with the script's exit status; it is never skipped.
#pragma once

#include <cstdio>
#include <fstream>
#include <nlohmann/json.hpp>
#include <stdexcept>
#include <string>
#include <unistd.h>

namespace plumbline::testing {

// Runs PLUMBLINE_PYTHON on `script` (a path relative to the source tree) with
// `request` as stdin; returns the parsed stdout. Throws std::runtime_error on
// any failure, which Catch2 reports as a failed test.
inline nlohmann::json run_python(const std::string& script, const nlohmann::json& request) {
  char in_path[] = "/tmp/plumbline-ref-XXXXXX";
  const int fd = mkstemp(in_path);
  if (fd < 0) throw std::runtime_error("mkstemp failed");
  {
    const std::string text = request.dump();
    if (::write(fd, text.data(), text.size()) != static_cast<ssize_t>(text.size())) {
      ::close(fd);
      throw std::runtime_error("writing the request failed");
    }
    ::close(fd);
  }
  const std::string cmd = std::string(PLUMBLINE_PYTHON) + " " + PLUMBLINE_SOURCE_DIR + "/" +
                          script + " < " + in_path;
  FILE* pipe = ::popen(cmd.c_str(), "r");
  if (!pipe) {
    ::unlink(in_path);
    throw std::runtime_error("cannot start " + cmd);
  }
  std::string out;
  char buf[65536];
  std::size_t got;
  while ((got = std::fread(buf, 1, sizeof buf, pipe)) > 0) out.append(buf, got);
  const int status = ::pclose(pipe);
  ::unlink(in_path);
  if (status != 0)
    throw std::runtime_error(cmd + " failed with status " + std::to_string(status));
  return nlohmann::json::parse(out);
}

}  // namespace plumbline::testing
