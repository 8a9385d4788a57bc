// The host command `holdfast`. Each subcommand registers itself from its own file.
#include <CLI/CLI.hpp>

#include "cli_commands.h"

int main(int argc, char** argv) {
  CLI::App app{"holdfast: pipeline and water-network balance monitor (host tools)"};
  app.require_subcommand(1);
  app.set_version_flag("--version", "holdfast 0.1.0");
  int exit_code = 0;
  for (const auto& reg : holdfast::cli::Registry()) reg(app, &exit_code);
  CLI11_PARSE(app, argc, argv);
  return exit_code;
}
