// `holdfast check-config FILE`: compile a site config and say what is in it,
// or list every problem with its JSON path (exit code 2).
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <memory>
#include <string>
#include <vector>

#include "cli_commands.h"
#include "district_driver.h"
#include "holdfast/fluid.h"
#include "holdfast/pipe.h"
#include "holdfast/site.h"
#include "holdfast/site_config.h"
#include "site_file.h"

namespace holdfast::cli {
namespace {

// Reaches as the inventory builds them: each section split into reaches of at
// most reach_length_m.
int ReachCount(const SegmentSpec& seg) {
  int n = 0;
  for (const PipeSection& s : seg.sections) {
    n += std::max(1, static_cast<int>(std::ceil(s.length_m / seg.reach_length_m - 1e-9)));
  }
  return n;
}

// Korteweg wave speed of each section with the fluid at standard conditions
// (an estimate: the operating pressure and temperature shift it a little for
// liquids, and a gas's isothermal value is below its adiabatic one).
void WaveSpeedRange(const Site& site, const SegmentSpec& seg, double* lo, double* hi) {
  *lo = *hi = kNaN;
  const FluidSpec& fluid = site.fluids[seg.fluid];
  const double p = site.standard_pressure_pa;
  const double t = site.standard_temperature_k;
  const double rho = FluidDensity(fluid, p, t);
  const double kappa = FluidCompressibility(fluid, p, t);
  if (!(rho > 0.0) || !(kappa > 0.0)) return;
  for (const PipeSection& s : seg.sections) {
    const double a = WaveSpeed(1.0 / kappa, rho, s);
    if (!std::isfinite(a)) continue;
    if (std::isnan(*lo) || a < *lo) *lo = a;
    if (std::isnan(*hi) || a > *hi) *hi = a;
  }
}

void PrintSegment(const Site& site, const SegmentSpec& seg) {
  int in = 0;
  int out = 0;
  for (const MeterSpec& m : seg.meters) (MeterRoleIsIn(m.role) ? in : out)++;
  std::printf("  %s", seg.id.c_str());
  if (seg.name != seg.id) std::printf(" \"%s\"", seg.name.c_str());
  std::printf(": %.3f km in %zu section%s, %d reaches; fluid %s (%s); meters %d in / %d out; "
              "%zu pressure, %zu temperature transmitters",
              seg.length_m() / 1000.0, seg.sections.size(), seg.sections.size() == 1 ? "" : "s",
              ReachCount(seg), site.fluid_ids[seg.fluid].c_str(),
              FluidKindName(site.fluids[seg.fluid].kind), in, out, seg.pressure_gauges.size(),
              seg.temperature_gauges.size());
  if (!seg.tanks.empty()) std::printf("; %zu tank%s", seg.tanks.size(), seg.tanks.size() == 1 ? "" : "s");
  double lo = 0.0;
  double hi = 0.0;
  WaveSpeedRange(site, seg, &lo, &hi);
  if (std::isfinite(lo) && std::isfinite(hi)) {
    if (std::lround(lo) == std::lround(hi)) {
      std::printf("; wave speed ~%.0f m/s at standard conditions", lo);
    } else {
      std::printf("; wave speed ~%.0f-%.0f m/s at standard conditions", lo, hi);
    }
  }
  std::printf("\n");
}

// Water-utility mode: one line per district (config/FORMAT.md, "districts").
void PrintDistrict(const Site& site, const DistrictSpec& d) {
  std::printf("  district %s", d.id.c_str());
  if (d.name != d.id) std::printf(" \"%s\"", d.name.c_str());
  std::printf(": %zu inlet%s, %zu outlet%s, %zu reservoir%s; pressure reference %s; %.0f households, %.0f "
              "non-households, %.0f connections; mains %.1f km; customer use %s\n",
              d.inlets.size(), d.inlets.size() == 1 ? "" : "s", d.outlets.size(), d.outlets.size() == 1 ? "" : "s",
              d.reservoirs.size(), d.reservoirs.size() == 1 ? "" : "s", site.points[d.pressure_point].id.c_str(),
              d.households, d.non_households, d.service_connections, d.mains_length_km,
              d.customer_meter_point >= 0 ? "from aggregated smart meters" : "from the learnt demand profile");
  std::printf("    burst detection: night step above %.3g robust spreads and %.3g m3/h; day path (hourly CUSUM) "
              "target step %.3g m3/h, false-alarm budget one per %.0f days\n",
              d.night_alarm_sigmas, d.min_step_m3_h, d.day_step_m3_h, d.false_alarm_interval_s / 86400.0);
  std::string why;
  water::UtcOffsetSchedule tz;
  if (!DistrictOffsets(d, &tz, &why)) std::printf("    warning: %s\n", why.c_str());
  // A reservoir inside the district: the zone flow is inflow - outflow -
  // dV/dt, so level-transmitter noise enters the night flow directly, and the
  // MNF (a minimum over the window) takes the low side of it.
  for (const ReservoirSpec& r : d.reservoirs) {
    double area_m2 = 0.0;
    for (size_t i = 1; i < r.strapping.size(); ++i) {
      const double dl = r.strapping[i].level_m - r.strapping[i - 1].level_m;
      if (dl > 0.0) area_m2 = std::max(area_m2, (r.strapping[i].volume_m3 - r.strapping[i - 1].volume_m3) / dl);
    }
    const double sigma_m = site.points[r.level_point].random_sigma;
    // Two level readings bound each averaging span: sqrt(2) sigma A / T.
    const double noise_m3_h = std::sqrt(2.0) * sigma_m * area_m2 / d.night_averaging_s * 3600.0;
    std::printf("    warning: reservoir %s (about %.0f m2) is inside the district: its level noise (%.1f mm) gives about "
                "%.2f m3/h of noise on the night flow averaged over %.0f s, and the minimum night flow reads low by "
                "about that much; use a longer night averaging_s, \"level_smoothing_s\", or meter the reservoir's "
                "outlet instead%s\n",
                r.id.c_str(), area_m2, sigma_m * 1000.0, noise_m3_h, d.night_averaging_s,
                d.level_smoothing_s > 0.0 ? " (level smoothing is on)" : "");
  }
}

int RunCheckConfig(const std::string& file) {
  Site site;
  std::vector<ConfigProblem> problems;
  if (!LoadSiteFile(file, &site, &problems)) {
    for (const ConfigProblem& p : problems) std::printf("%s\n", p.ToString().c_str());
    std::printf("%s: %zu problem%s\n", file.c_str(), problems.size(), problems.size() == 1 ? "" : "s");
    return 2;
  }
  std::printf("%s: OK \u2014 %zu segment%s, %zu points", file.c_str(), site.segments.size(),
              site.segments.size() == 1 ? "" : "s", site.points.size());
  if (!site.districts.empty())
    std::printf(", %zu district%s", site.districts.size(), site.districts.size() == 1 ? "" : "s");
  std::printf("\n");
  for (const SegmentSpec& seg : site.segments) PrintSegment(site, seg);
  for (const DistrictSpec& d : site.districts) PrintDistrict(site, d);
  return 0;
}

void Register(CLI::App& app, int* exit_code) {
  auto file = std::make_shared<std::string>();
  CLI::App* cmd = app.add_subcommand(
      "check-config", "Check a site config; print a summary, or every problem with its JSON path (exit 2)");
  cmd->add_option("FILE", *file, "Site config (JSON, format holdfast-site/1)")->required();
  cmd->callback([file, exit_code] { *exit_code = RunCheckConfig(*file); });
}

}  // namespace
HOLDFAST_REGISTER_COMMAND(Register);
}  // namespace holdfast::cli
