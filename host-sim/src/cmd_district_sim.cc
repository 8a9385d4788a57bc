// `holdfast district-sim`: generate readings for one district (DMA) of a site
// from a "holdfast-district-scenario/1" file (config/WATER.md) and write
// DIR/readings.csv and DIR/truth.json.
#include <cstdio>
#include <memory>
#include <string>
#include <vector>

#include "cli_commands.h"
#include "district_sim.h"
#include "readings_csv.h"
#include "site_file.h"

namespace holdfast::cli {
namespace {

struct Args {
  std::string config, scenario, out;
  bool quiet = false;
};

int Run(const Args& a) {
  Site site;
  std::vector<ConfigProblem> problems;
  if (!LoadSiteOrSay(a.config, &site)) return 2;
  sim::DistrictScenario sc;
  if (!sim::LoadDistrictScenarioFile(a.scenario, site, &sc, &problems)) {
    for (const auto& p : problems) std::fprintf(stderr, "%s\n", p.ToString().c_str());
    std::fprintf(stderr, "%s: %zu problem%s (format: config/WATER.md)\n", a.scenario.c_str(), problems.size(),
                 problems.size() == 1 ? "" : "s");
    return 2;
  }
  sim::DistrictSimResult r;
  std::string why;
  if (!sim::SimulateDistrict(site, sc, &r, &why)) {
    std::fprintf(stderr, "%s: %s\n", a.scenario.c_str(), why.c_str());
    return 2;
  }
  if (!sim::WriteDistrictSimulation(site, r, a.out, &why)) {
    std::fprintf(stderr, "--out: %s\n", why.c_str());
    return 1;
  }
  if (!a.quiet) {
    std::fprintf(stderr, "%s: district %s, %s to %s, %zu burst%s\n", a.scenario.c_str(),
                 site.districts[sc.district].id.c_str(), FormatIsoUtc(sc.start_epoch_s, 0).c_str(),
                 FormatIsoUtc(sc.start_epoch_s + sc.duration_s, 0).c_str(), sc.bursts.size(),
                 sc.bursts.size() == 1 ? "" : "s");
    std::fprintf(stderr,
                 "  volumes: input %.1f m3, customers %.1f m3, leakage %.1f m3, outlet %.1f m3, storage change %.1f m3; "
                 "balance residual %.3g m3\n",
                 r.total_input_m3, r.total_customer_m3, r.total_leakage_m3, r.total_outlet_m3,
                 r.storage_end_m3 - r.storage_start_m3, r.mass_residual_m3);
    std::fprintf(stderr, "  wrote %zu readings to %s/readings.csv and the truth to %s/truth.json\n", r.readings.size(),
                 a.out.c_str(), a.out.c_str());
  }
  return 0;
}

void Register(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<Args>();
  CLI::App* cmd = app.add_subcommand(
      "district-sim", "Generate a district (DMA) scenario: write DIR/readings.csv and DIR/truth.json");
  cmd->add_option("--config", args->config, "Site config with a districts section (JSON)")->required()->check(CLI::ExistingFile);
  cmd->add_option("--scenario", args->scenario, "District scenario (JSON, \"holdfast-district-scenario/1\")")->required();
  cmd->add_option("--out", args->out, "Output directory (created if needed)")->required();
  cmd->add_flag("--quiet", args->quiet, "No summary on standard error");
  cmd->callback([args, exit_code] { *exit_code = Run(*args); });
}

}  // namespace
HOLDFAST_REGISTER_COMMAND(Register);
}  // namespace holdfast::cli
