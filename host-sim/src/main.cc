// The host command `holdfast`. Each subcommand registers itself from its own file.
//
// Exit status, the same for every subcommand (also in --help):
//   0  success;
//   1  a runtime failure: a broker that cannot be reached or refuses, no
//      reply in time, a report that cannot be rendered, an unexpected error;
//   2  a usage error: bad or missing arguments (every CLI11 parse error,
//      whose own codes are 100 and up), or input files that cannot be read
//      or are invalid (site, readings, tuning, scenario, batch).
#include <cstdio>
#include <exception>

#include <CLI/CLI.hpp>

#include "cli_commands.h"

namespace {
constexpr int kExitRuntime = 1;
constexpr int kExitUsage = 2;
}  // namespace

int main(int argc, char** argv) {
  CLI::App app{"holdfast: pipeline and water-network balance monitor (host tools)"};
  app.require_subcommand(1);
  app.set_version_flag("--version", "holdfast 0.1.0");
  const char* exit_help =
      "Exit status: 0 success; 1 runtime failure (broker unreachable or refusing, no reply in time, report not\n"
      "rendered, unexpected error); 2 usage error (bad or missing arguments, input files unreadable or invalid).";
  app.footer(exit_help);
  int exit_code = 0;
  for (const auto& reg : holdfast::cli::Registry()) reg(app, &exit_code);
  for (CLI::App* sub : app.get_subcommands({})) {
    sub->footer(exit_help);
    for (CLI::App* subsub : sub->get_subcommands({})) subsub->footer(exit_help);
  }
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    // --help and --version come through here with code 0.
    const int code = app.exit(e);
    return code == 0 ? 0 : kExitUsage;
  } catch (const std::exception& e) {
    std::fprintf(stderr, "holdfast: %s\n", e.what());
    return kExitRuntime;
  }
  return exit_code;
}
