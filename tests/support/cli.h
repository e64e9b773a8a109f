// support/cli.h: running the built `plumbline` binary from tests.
//
// A temporary directory per test case, shell quoting, and a runner that
// captures stdout through a pipe and stderr through a file, returning the
// exit code. Used by the suites in tests/cli/.
#pragma once

#include <sys/wait.h>
#include <unistd.h>

#include <catch2/catch.hpp>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>
#include <stdexcept>
#include <string>
#include <vector>

namespace plumbline::testing {

namespace fs = std::filesystem;

// A directory that lives as long as the test case.
class temp_dir {
 public:
  temp_dir() {
    std::string pattern = (fs::temp_directory_path() / "plumbline-cli-XXXXXX").string();
    if (::mkdtemp(pattern.data()) == nullptr) throw std::runtime_error("mkdtemp failed");
    path_ = pattern;
  }
  ~temp_dir() {
    std::error_code ec;
    fs::remove_all(path_, ec);
  }
  temp_dir(const temp_dir&) = delete;
  temp_dir& operator=(const temp_dir&) = delete;

  // Writes `text` to `name` in the directory; returns the full path.
  std::string write(const std::string& name, const std::string& text) const {
    const std::string p = (path_ / name).string();
    std::ofstream out(p, std::ios::binary);
    out << text;
    if (!out) throw std::runtime_error("cannot write " + p);
    return p;
  }
  std::string file(const std::string& name) const { return (path_ / name).string(); }
  const fs::path& path() const { return path_; }

 private:
  fs::path path_;
};

inline std::string shell_quote(const std::string& s) {
  std::string out = "'";
  for (char c : s)
    out += c == '\'' ? std::string("'\\''") : std::string(1, c);
  return out + "'";
}

inline std::string slurp(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  std::ostringstream buf;
  buf << in.rdbuf();
  return buf.str();
}

struct run_result {
  int exit_code = -1;
  std::string out, err;
};

// Runs `program args...` with stdout captured through a pipe and stderr
// through a file in `dir`.
inline run_result run_program(const temp_dir& dir, const std::string& program,
                       const std::vector<std::string>& args) {
  const std::string err_path = dir.file("stderr.txt");
  std::string cmd = shell_quote(program);
  for (const std::string& a : args)
    cmd += " " + shell_quote(a);
  cmd += " 2>" + shell_quote(err_path) + " </dev/null";
  FILE* pipe = ::popen(cmd.c_str(), "r");
  if (!pipe) throw std::runtime_error("cannot start " + cmd);
  run_result r;
  char buf[65536];
  std::size_t got;
  while ((got = std::fread(buf, 1, sizeof buf, pipe)) > 0)
    r.out.append(buf, got);
  const int status = ::pclose(pipe);
  r.exit_code = WIFEXITED(status) ? WEXITSTATUS(status) : -1;
  r.err = slurp(err_path);
  return r;
}

inline run_result run_plumbline(const temp_dir& dir, const std::vector<std::string>& args) {
  return run_program(dir, PLUMBLINE_BINARY, args);
}

inline run_result compare(const temp_dir& dir, const std::string& ref, const std::string& rec,
                   std::vector<std::string> extra = {}) {
  std::vector<std::string> args = {"compare", "--reference", ref, "--recent", rec};
  args.insert(args.end(), extra.begin(), extra.end());
  return run_plumbline(dir, args);
}

inline nlohmann::json compare_json(const temp_dir& dir, const std::string& ref, const std::string& rec,
                  std::vector<std::string> extra = {}) {
  extra.push_back("--json");
  const run_result r = compare(dir, ref, rec, extra);
  INFO("stderr: " << r.err);
  REQUIRE(r.exit_code == 0);
  REQUIRE(r.err.empty());
  return nlohmann::json::parse(r.out);
}

inline std::string column_csv(const std::string& header, const std::vector<double>& v) {
  std::ostringstream o;
  o.precision(17);
  if (!header.empty()) o << header << "\n";
  for (double x : v)
    o << x << "\n";
  return o.str();
}

}  // namespace plumbline::testing
