// main.cc: the `plumbline` command line. Subcommands are declared in their
// own files; exceptions are caught only here.
#include <CLI/CLI.hpp>
#include <exception>
#include <iostream>

#include "daemon/check_config.h"
#include "daemon/compare.h"
#include "daemon/serve.h"

#ifndef PLUMBLINE_VERSION
#define PLUMBLINE_VERSION "0.0.0"
#endif

int main(int argc, char** argv) {
  CLI::App app{"plumbline: streaming quality monitoring with permutation tests and bootstrap "
               "drift intervals"};
  app.set_version_flag("--version", std::string("plumbline ") + PLUMBLINE_VERSION);
  app.require_subcommand(1);
  plumbline::compare_args compare;
  CLI::App* compare_cmd = plumbline::add_compare_command(app, compare);
  plumbline::check_config_args check_config;
  CLI::App* check_config_cmd = plumbline::add_check_config_command(app, check_config);
  plumbline::serve_args serve;
  CLI::App* serve_cmd = plumbline::add_serve_command(app, serve);
  try {
    app.parse(argc, argv);
  } catch (const CLI::CallForHelp& e) {
    return app.exit(e);
  } catch (const CLI::CallForAllHelp& e) {
    return app.exit(e);
  } catch (const CLI::CallForVersion& e) {
    return app.exit(e);
  } catch (const CLI::ParseError& e) {
    std::cerr << "plumbline: " << e.what() << " (see plumbline --help)\n";
    return 2;
  }
  try {
    if (compare_cmd->parsed()) return plumbline::run_compare(compare);
    if (check_config_cmd->parsed()) return plumbline::run_check_config(check_config);
    if (serve_cmd->parsed()) return plumbline::run_serve(serve, PLUMBLINE_VERSION);
  } catch (const std::exception& e) {
    std::cerr << "plumbline: internal error: " << e.what() << "\n";
    return 1;
  }
  return 2;
}
