// `holdfast tune`: learn each segment's residual statistics from leak-free
// data, state what they mean (false alarms at the budget, the smallest leak
// found within a given time), and write them to a tuning file that seeds the
// decision stage (tuning_file.h; config/TUNING.md).
//
// The readings go through a Monitor tick by tick, as in `holdfast balance`.
// Each segment's per-tick decision input is summed into blocks of block_s
// exactly as the decision stage forms them (decision.h): a block starts
// after the previous one, and a tick without a balance (status unavailable,
// or the first tick after one, which only re-baselines the inventory) drops
// the block in progress. The input is the one the detectors see
// (DecisionInput, tuning_file.h): the change of the low-pass filtered
// cumulative imbalance sum(SegmentTick::residual_kg_s * dt). The plain
// residual is blocked beside it and reported for comparison.
//
// The block means are then estimated robustly: bias by the median, sigma by
// 1.4826 * MAD (the normal-consistent median absolute deviation, Hampel 1974,
// J. Amer. Statist. Assoc. 69, from memory; the constant is 1/Phi^-1(3/4)),
// phi by the lag-one autocorrelation of consecutive blocks with deviations
// clipped at 3 sigma (as the decision stage clips its learning).
#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <limits>
#include <memory>
#include <string>
#include <sys/stat.h>
#include <vector>

#include "cli_commands.h"
#include "holdfast/arl.h"
#include "holdfast/decision.h"
#include "holdfast/monitor.h"
#include "readings_csv.h"
#include "replay_driver.h"
#include "site_file.h"
#include "tuner.h"
#include "tuning_file.h"

namespace holdfast::cli {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
// Fewer blocks than a day's worth and the estimates are called rough.
constexpr double kRoughBelow_s = 86400.0;

struct TuneArgs {
  std::string config, data, out = "tuning.json", until;
  double block_s = 60.0;
  double budget_days = 90.0;
};

// ---------------------------------------------------------------------------
// The report
// ---------------------------------------------------------------------------

std::string Duration(double s) {
  char buf[32];
  if (!std::isfinite(s)) return "-";
  if (s < 120.0) std::snprintf(buf, sizeof buf, "%.0f s", s);
  else if (s < 7200.0) std::snprintf(buf, sizeof buf, "%.1f min", s / 60.0);
  else if (s < 3.0 * 86400.0) std::snprintf(buf, sizeof buf, "%.1f h", s / 3600.0);
  else std::snprintf(buf, sizeof buf, "%.1f days", s / 86400.0);
  return buf;
}

void Report(const SegmentSpec& spec, const SegmentTuning& s, const TunerSegmentReport& x, double budget_s) {
  std::printf("\nSegment %s (%s)\n", spec.id.c_str(), spec.name.c_str());
  std::printf("  data          %s .. %s: %lld blocks of %g s used; %lld left out while the filter\n"
              "                settled, %lld dropped over gaps (unavailable %s)\n",
              FormatIsoUtc(s.first_time_s, 0).c_str(), FormatIsoUtc(s.last_time_s, 0).c_str(),
              static_cast<long long>(s.blocks), s.block_s, static_cast<long long>(x.settling_blocks),
              static_cast<long long>(s.blocks_dropped), Duration(x.unavailable_s).c_str());
  // Standard error of a median, 1.2533 sigma / sqrt(n) for normal data
  // (sqrt(pi/2); asymptotic), with the autocorrelated sigma.
  const double se = 1.2533 * s.sigma_eff_kg_s / std::sqrt(static_cast<double>(s.blocks));
  std::printf("  bias          %+.4f kg/s (median, standard error %.4f)    mean %+.4f kg/s\n", s.bias_kg_s, se,
              s.bias_mean_kg_s);
  std::printf("  sigma         %.4f kg/s (1.4826 MAD)  plain sd %.4f kg/s\n", s.sigma_kg_s, s.sigma_sd_kg_s);
  std::printf("  phi           %.3f (lag one, %lld pairs); sigma x %.3f -> %.4f kg/s for the detectors\n", s.phi,
              static_cast<long long>(s.block_pairs), std::sqrt(x.inflation), s.sigma_eff_kg_s);
  std::printf("  unfiltered    plain balance residual: bias %+.4f kg/s, sigma %.4f kg/s, phi %.3f\n"
              "                (for comparison; the detectors see the filtered imbalance above)\n",
              x.raw.median, x.raw.sigma, x.raw.phi);
  std::printf("  transients    block inventory rate %+.3f kg/s, spread %.3f kg/s (1.4826 MAD); "
              "%lld block(s) beyond %g spreads\n",
              s.inventory_rate_kg_s, s.inventory_rate_sigma_kg_s, static_cast<long long>(x.transient_blocks),
              kTransientSigmas);
  std::printf("  step check    second half against first: %+.4f kg/s (%.1f standard errors; warned beyond %g)\n",
              x.drift_kg_s, x.drift_z, Tuner::kDriftWarnZ);
  if (std::isfinite(s.nominal_flow_kg_s))
    std::printf("  nominal flow  %.2f kg/s\n", s.nominal_flow_kg_s);

  std::printf("  false alarms  per-detector in-control ARL %.0f blocks (%s) from the budget\n", s.arl0_blocks,
              Duration(s.arl0_blocks * s.block_s).c_str());
  if (s.detectors.empty()) {
    std::printf("                no nominal flow: the segment has no decision stage, no bank to check\n");
  } else {
    std::printf("      target kg/s   %% nominal        k         h   ARL0 back (days)\n");
    for (const TuningDetector& d : s.detectors) {
      // h = 0 (alarm on one block beyond k) can leave a detector far inside
      // its share of the budget: its ARL is then astronomically long.
      const double days = d.arl0_blocks * s.block_s / 86400.0;
      char arl[32];
      if (std::isfinite(days) && days < 1e6) std::snprintf(arl, sizeof arl, "%.2f", days);
      else std::snprintf(arl, sizeof arl, "> 1e6");
      std::printf("      %11.4f   %9.2f  %7.4f  %8.3f   %14s\n", d.target_kg_s, 100.0 * d.target_fraction, d.k, d.h,
                  arl);
    }
    const bool met = s.bank_false_alarm_interval_s >= budget_s * (1.0 - 1e-3);
    std::printf("      bank: at most one false alarm per %.1f days (union bound); budget %.1f days: %s\n",
                s.bank_false_alarm_interval_s / 86400.0, budget_s / 86400.0, met ? "met" : "NOT met");
  }

  std::printf("  minimum detectable step leak (a CUSUM tuned to it, k = shift/2, sigma %.4f kg/s)\n",
              s.sigma_eff_kg_s);
  std::printf("      detected within     leak kg/s   %% nominal   shift (sigma)   expected delay\n");
  for (const TuningDetection& d : s.detection) {
    if (!std::isfinite(d.leak_kg_s)) {
      std::printf("      %15s     %9s   %9s   %13s   (shorter than a block)\n", Duration(d.detection_s).c_str(), "-",
                  "-", "-");
      continue;
    }
    char frac[32] = "-";
    if (std::isfinite(d.leak_fraction)) std::snprintf(frac, sizeof frac, "%.3f", 100.0 * d.leak_fraction);
    std::printf("      %15s     %9.4f   %9s   %13.3f   %s\n", Duration(d.detection_s).c_str(), d.leak_kg_s, frac,
                d.shift_sigma, Duration(d.delay_s).c_str());
  }

  if (static_cast<double>(s.blocks) * s.block_s < kRoughBelow_s)
    std::printf("  note: %s of blocks only; the estimates are rough. Tune on days to weeks of leak-free\n"
                "        operation that include the line's usual operating changes.\n",
                Duration(static_cast<double>(s.blocks) * s.block_s).c_str());
  if (s.sigma_sd_kg_s > 1.5 * s.sigma_kg_s)
    std::printf("  note: the plain sd is %.1f times the robust sigma: heavy tails (outliers or transients) in the\n"
                "        data; the detectors use the robust sigma and will see those as evidence.\n",
                s.sigma_sd_kg_s / s.sigma_kg_s);
  if (std::fabs(x.drift_z) > Tuner::kDriftWarnZ)
    std::printf("  WARNING: the mean residual moves by %+.4f kg/s (%.1f standard errors) between the first and\n"
                "        second half of the data. A leak (or a change of meter bias) in the data would do that;\n"
                "        the tuning data must be leak-free.\n",
                x.drift_kg_s, x.drift_z);
}

bool IsDirectory(const std::string& path) {
  struct stat st;
  return ::stat(path.c_str(), &st) == 0 && S_ISDIR(st.st_mode);
}

int RunTune(const TuneArgs& a) {
  Site site;
  if (!LoadSiteOrSay(a.config, &site)) return 2;
  DecisionOptions dopt;
  dopt.block_s = a.block_s;
  dopt.false_alarm_interval_s = a.budget_days * 86400.0;
  std::string why;
  if (!(a.block_s >= site.tick_s)) {
    std::fprintf(stderr, "--block-s: %g s is shorter than the tick of %s (%g s)\n", a.block_s, a.config.c_str(),
                 site.tick_s);
    return 2;
  }
  if (!dopt.IsValid(&why)) {
    std::fprintf(stderr, "--block-s %g --budget-days %g: %s\n", a.block_s, a.budget_days, why.c_str());
    return 2;
  }
  double until = kNaN;
  if (!a.until.empty() && !ParseTime(a.until, &until)) {
    std::fprintf(stderr, "--until: cannot read '%s' as a time; use ISO 8601 with a zone, e.g. "
                 "2026-03-14T08:00:00Z\n", a.until.c_str());
    return 2;
  }
  std::string out_path = a.out;
  if (IsDirectory(out_path)) out_path += (out_path.back() == '/' ? "" : "/") + std::string("tuning.json");

  Monitor monitor;
  Monitor::Options mopt;
  mopt.decision = dopt;
  if (!monitor.Init(site, mopt, &why)) {
    std::fprintf(stderr, "%s: %s\n", a.config.c_str(), why.c_str());
    return 2;
  }
  ReadingsCsvReader reader;
  if (!reader.Open(a.data, site, &why)) {
    std::fprintf(stderr, "%s\n", why.c_str());
    return 2;
  }

  Tuner tuner;
  if (!tuner.Init(site, mopt, &why)) {
    std::fprintf(stderr, "--block-s %g --budget-days %g: %s\n", a.block_s, a.budget_days, why.c_str());
    return 2;
  }
  CsvReadingSource source(&reader);
  ReplayOptions ropt;
  ropt.until_s = until;
  ropt.on_tick = [&](double t) {
    tuner.Tick(monitor, t);
    return true;
  };
  const ReplayResult run = RunReplay(&monitor, &source, site.tick_s, ropt);
  std::fprintf(stderr, "%s: %llu rows, %llu bad; %llu ticks; readings %s\n", reader.path().c_str(),
               static_cast<unsigned long long>(reader.rows()), static_cast<unsigned long long>(reader.bad_rows()),
               static_cast<unsigned long long>(run.ticks), ReadingCounts(monitor.counters()).c_str());
  for (const auto& e : reader.errors())
    std::fprintf(stderr, "%s:%llu: %s\n", reader.path().c_str(), static_cast<unsigned long long>(e.line),
                 e.message.c_str());
  if (run.ticks == 0) {
    std::fprintf(stderr, "%s: no readings%s; nothing to tune\n", reader.path().c_str(),
                 std::isfinite(until) ? " up to --until" : "");
    return 2;
  }

  TuningFile file;
  std::vector<TunerSegmentReport> reports;
  const bool any = tuner.Finish(&file, &reports);
  int skipped = 0;
  for (size_t i = 0; i < site.segments.size(); ++i) {
    if (reports[i].not_tuned.empty()) continue;
    std::fprintf(stderr, "%s: segment %s not tuned: %s\n", a.data.c_str(), site.segments[i].id.c_str(),
                 reports[i].not_tuned.c_str());
    ++skipped;
  }
  if (!any) {
    std::fprintf(stderr, "%s: no segment could be tuned; no tuning file written\n", a.data.c_str());
    return 2;
  }
  file.site = site.name;
  file.data = a.data;
  file.until_s = until;

  std::printf("holdfast tune: %s, readings %s%s%s\n", site.name.c_str(), a.data.c_str(),
              std::isfinite(until) ? " until " : "", std::isfinite(until) ? FormatIsoUtc(until, 0).c_str() : "");
  std::printf("blocks of %g s of the imbalance low-pass filtered over %g s; false-alarm budget\n"
              "one per %g days per segment, shared by a bank of %d detectors\n",
              dopt.block_s, mopt.decision_inventory_filter_s, a.budget_days, file.detectors_in_bank);
  size_t next = 0;
  for (size_t i = 0; i < site.segments.size(); ++i) {
    if (!reports[i].not_tuned.empty()) {
      std::printf("\nSegment %s (%s)\n  not tuned: %s\n", site.segments[i].id.c_str(),
                  site.segments[i].name.c_str(), reports[i].not_tuned.c_str());
      continue;
    }
    Report(site.segments[i], file.segments[next++], reports[i], dopt.false_alarm_interval_s);
  }
  if (!WriteTuningFile(out_path, file, &why)) {
    std::fprintf(stderr, "%s\n", why.c_str());
    return 2;
  }
  std::printf("\nwrote %s (%zu segment(s)%s)\n", out_path.c_str(), file.segments.size(),
              skipped ? ", some not tuned" : "");
  return 0;
}

void Register(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<TuneArgs>();
  CLI::App* cmd = app.add_subcommand(
      "tune", "Learn each segment's residual statistics from leak-free readings; write a tuning file");
  cmd->add_option("--config", args->config, "Site config (JSON)")->required();
  cmd->add_option("--data", args->data, "Leak-free readings CSV (time,point,value,quality); - for stdin")->required();
  cmd->add_option("--out", args->out, "Tuning file to write (default tuning.json; a directory gets tuning.json)");
  cmd->add_option("--block-s", args->block_s, "Residual block length, s (default 60; the decision stage's)");
  cmd->add_option("--budget-days", args->budget_days,
                  "False-alarm budget: mean days between false alarms per segment (default 90)");
  cmd->add_option("--until", args->until, "Stop reading at this time (ISO 8601, e.g. 2026-03-14T08:00:00Z)");
  cmd->callback([args, exit_code] { *exit_code = RunTune(*args); });
}

}  // namespace
HOLDFAST_REGISTER_COMMAND(Register);
}  // namespace holdfast::cli
