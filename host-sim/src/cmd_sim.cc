// `holdfast sim`: run a scenario (config/SCENARIO.md) on a segment of a site
// through the method-of-characteristics simulator and write DIR/readings.csv
// and DIR/truth.json.
#include <cstdio>
#include <memory>
#include <string>
#include <vector>

#include "cli_commands.h"
#include "readings_csv.h"
#include "scenario.h"
#include "simulate.h"
#include "site_file.h"

namespace holdfast::cli {
namespace {

struct SimArgs {
  std::string config, scenario, out;
  double duration_s = 0.0;  // 0: the scenario's
  bool quiet = false;
};

int RunSim(const SimArgs& a) {
  Site site;
  std::vector<ConfigProblem> problems;
  if (!LoadSiteOrSay(a.config, &site)) return 2;
  sim::Scenario scenario;
  if (!sim::LoadScenarioFile(a.scenario, site, &scenario, &problems)) {
    for (const auto& p : problems) std::fprintf(stderr, "%s\n", p.ToString().c_str());
    std::fprintf(stderr, "%s: %zu problem%s (format: config/SCENARIO.md)\n", a.scenario.c_str(), problems.size(),
                 problems.size() == 1 ? "" : "s");
    return 2;
  }
  if (a.duration_s > 0.0) scenario.duration_s = a.duration_s;
  sim::SimulationResult result;
  std::string why;
  if (!sim::Simulate(site, scenario, &result, &why)) {
    std::fprintf(stderr, "%s: %s\n", a.scenario.c_str(), why.c_str());
    return 2;
  }
  if (!sim::WriteSimulation(site, scenario, result, a.out, &why)) {
    std::fprintf(stderr, "--out: %s\n", why.c_str());
    return 1;
  }
  if (!a.quiet) {
    const std::string& seg = site.segments[static_cast<size_t>(scenario.segment)].id;
    std::fprintf(stderr, "%s: segment %s, %s to %s\n", a.scenario.c_str(), seg.c_str(),
                 FormatIsoUtc(scenario.start_epoch_s, 0).c_str(),
                 FormatIsoUtc(scenario.start_epoch_s + scenario.duration_s, 0).c_str());
    for (const std::string& n : result.notes) std::fprintf(stderr, "  %s\n", n.c_str());
    std::fprintf(stderr, "  %d nodes, dt %.4f s, %llu steps in %.2f s: %.1f million node updates/s\n", result.nodes,
                 result.dt_s, static_cast<unsigned long long>(result.steps), result.wall_s,
                 result.node_updates_per_s / 1e6);
    std::fprintf(stderr, "  mass: in %.1f kg, out %.1f kg, leak %.1f kg; inventory %.1f -> %.1f kg; residual %.3g kg\n",
                 result.in_kg, result.out_kg, result.leak_kg, result.inventory_start_kg, result.inventory_end_kg,
                 result.residual_kg);
    std::fprintf(stderr, "  wrote %zu readings to %s/readings.csv and the truth to %s/truth.json\n", result.readings.size(),
                 a.out.c_str(), a.out.c_str());
  }
  return 0;
}

void Register(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<SimArgs>();
  CLI::App* cmd = app.add_subcommand(
      "sim", "Simulate a scenario (method of characteristics); write DIR/readings.csv and DIR/truth.json");
  cmd->add_option("--config", args->config, "Site config (JSON)")->required()->check(CLI::ExistingFile);
  cmd->add_option("--scenario", args->scenario, "Scenario (JSON, \"holdfast-scenario/1\")")->required();
  cmd->add_option("--out", args->out, "Output directory (created if needed)")->required();
  cmd->add_option("--duration", args->duration_s, "Simulate only this many seconds from the start (default: the scenario's)")
      ->check(CLI::PositiveNumber);
  cmd->add_flag("--quiet", args->quiet, "No summary on standard error");
  cmd->callback([args, exit_code] { *exit_code = RunSim(*args); });
}

}  // namespace
HOLDFAST_REGISTER_COMMAND(Register);
}  // namespace holdfast::cli
