// `holdfast district-eval`: the burst-detection and night-leakage evaluation
// of water mode on a family of generated districts (config/WATER.md,
// "Evaluation"). For each seed of the chosen set (tuning or hold-out, from
// the family file) it draws a district's demand and leakage from the
// family's ranges, generates a burst-free run and a run with bursts of 1.5 to
// 6.5 m3/h at random hours, runs both through `DistrictRunner`, and prints
// one table row per burst and per seed, and the acceptance figures:
//   * every burst of 1.5 m3/h or more at night pressure alarmed within 30 h,
//   * every burst of 5 m3/h or more within 6 h,
//   * no false burst alarm (over the burst-free run and between bursts),
//   * night-leakage mean |error| within 3 %.
#include <algorithm>
#include <atomic>
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <memory>
#include <mutex>
#include <string>
#include <thread>
#include <vector>

#include <nlohmann/json.hpp>

#include "cli_commands.h"
#include "district_driver.h"
#include "district_sim.h"
#include "instruments.h"
#include "readings_csv.h"
#include "site_file.h"
#include "water_files.h"

namespace holdfast::cli {
namespace {

struct Args {
  std::string config, family, set = "tuning", out_json, out_csv, dump;
  bool no_meters = false, meter_bias = false;
  int threads = 1;
  std::vector<int> seeds;  // overrides the set
};

struct Family {
  std::string base_scenario;
  double duration_days = 60.0;
  std::string start = "2026-03-02T00:00:00Z";
  std::vector<uint64_t> tuning, holdout, retired;  // retired: an earlier hold-out, already looked at
};

bool LoadFamily(const std::string& path, Family* f, std::string* why) {
  nlohmann::json doc;
  std::vector<ConfigProblem> problems;
  if (!ReadJsonFile(path, &doc, &problems)) {
    *why = problems.empty() ? path + ": unreadable" : problems[0].ToString();
    return false;
  }
  try {
    if (doc.value("format", "") != "holdfast-district-family/1") {
      *why = path + ":/format: not a district family file (\"holdfast-district-family/1\")";
      return false;
    }
    const std::filesystem::path dir = std::filesystem::path(path).parent_path();
    f->base_scenario = (dir / doc.at("base_scenario").get<std::string>()).string();
    f->duration_days = doc.value("duration_days", 60.0);
    f->start = doc.value("start", f->start);
    for (const auto& s : doc.at("tuning_seeds")) f->tuning.push_back(s.get<uint64_t>());
    for (const auto& s : doc.at("holdout_seeds")) f->holdout.push_back(s.get<uint64_t>());
    if (doc.contains("retired_holdout_seeds"))
      for (const auto& s : doc.at("retired_holdout_seeds")) f->retired.push_back(s.get<uint64_t>());
  } catch (const std::exception& e) {
    *why = path + ": " + e.what();
    return false;
  }
  return true;
}

// One member of the family: the base scenario with demand and leakage drawn
// from the ranges below (documented in config/WATER.md).
sim::DistrictScenario Draw(const sim::DistrictScenario& base, uint64_t seed, double start_s, double days, bool bursts) {
  sim::Rng rng(sim::StreamSeed(seed, "district-family"));
  auto U = [&](double a, double b) { return a + (b - a) * rng.Uniform(); };
  sim::DistrictScenario sc = base;
  sc.seed = seed * 7919 + (bursts ? 1 : 0);
  sc.start_epoch_s = start_s;
  sc.duration_s = days * 86400.0;
  sc.household_daily_m3 = U(0.28, 0.40);
  sc.household_night_l_h = U(1.3, 2.3);       // the config's 1.7 is a guess
  sc.non_household_night_l_h = U(5.0, 12.0);
  sc.day_to_day_pct = U(4.0, 9.0);
  sc.noise_pct = U(3.0, 7.0);
  sc.noise_correlation_s = U(3600.0, 7200.0);
  sc.night_to_night_pct = U(3.0, 8.0);
  sc.weekend_night_pct = U(0.0, 12.0);
  sc.weekend_day_pct = U(0.0, 10.0);
  sc.weekend_shift_h = U(0.5, 2.5);
  sc.unmetered_bias_pct = U(-4.0, 4.0);
  sc.background_leakage_m3_h_at_50m = U(2.5, 8.0);
  sc.initial_level_m = U(2.6, 4.4);
  sc.fill_rate_m3_h = U(80.0, 120.0);
  // Burst draws come after the demand draws, so that the burst-free and the
  // burst run of a seed share their district.
  sc.bursts.clear();
  const double sizes[4][2] = {{1.5, 2.5}, {2.5, 4.0}, {5.0, 6.5}, {1.5, 6.5}};
  std::vector<double> order = {0, 1, 2, 3};
  for (int i = 3; i > 0; --i) std::swap(order[i], order[static_cast<int>(rng.Uniform() * (i + 1)) % (i + 1)]);
  const double night_head = sc.base_head_m + sc.initial_level_m;
  for (int i = 0; i < 4; ++i) {
    const int k = static_cast<int>(order[i]);
    const double size_night = U(sizes[k][0], sizes[k][1]);
    sim::DistrictBurst b;
    // After the learning period (8 days), one in each 12-day slot, any hour.
    b.start_s = (9.0 + 12.0 * i + U(0.0, 6.0)) * 86400.0;
    b.rate_m3_h_at_50m = size_night / std::pow(night_head / 50.0, sc.burst_n1);
    if (bursts && b.start_s < sc.duration_s - 2.0 * 86400.0) sc.bursts.push_back(b);
  }
  return sc;
}

struct SeedResult {
  uint64_t seed = 0;
  int false_clean = 0, false_burst = 0;
  double clean_days = 0.0;
  sim::DistrictEvaluation burst_eval, clean_eval;
  std::string error;
};

std::string F(double v, int d) {
  if (!std::isfinite(v)) return "-";
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.*f", d, v);
  return buf;
}

int Run(const Args& a) {
  Site site;
  if (!LoadSiteOrSay(a.config, &site)) return 2;
  Family fam;
  std::string why;
  if (!LoadFamily(a.family, &fam, &why)) {
    std::fprintf(stderr, "%s\n", why.c_str());
    return 2;
  }
  std::vector<ConfigProblem> problems;
  sim::DistrictScenario base;
  if (!sim::LoadDistrictScenarioFile(fam.base_scenario, site, &base, &problems)) {
    for (const auto& p : problems) std::fprintf(stderr, "%s\n", p.ToString().c_str());
    return 2;
  }
  if (a.no_meters) site.districts[base.district].customer_meter_point = -1;
  double start_s = 0.0;
  if (!ParseTime(fam.start, &start_s)) {
    std::fprintf(stderr, "%s:/start: not an ISO time\n", a.family.c_str());
    return 2;
  }
  std::vector<uint64_t> seeds;
  if (!a.seeds.empty()) {
    for (int s : a.seeds) seeds.push_back(static_cast<uint64_t>(s));
  } else if (a.set == "tuning") {
    seeds = fam.tuning;
  } else if (a.set == "holdout") {
    seeds = fam.holdout;
  } else if (a.set == "retired-holdout") {
    seeds = fam.retired;
  } else {
    std::fprintf(stderr, "--set: \"tuning\", \"holdout\" or \"retired-holdout\" (got \"%s\")\n", a.set.c_str());
    return 2;
  }
  const water::DistrictMonitorOptions mo;
  std::vector<SeedResult> results(seeds.size());
  std::atomic<size_t> next{0};
  auto worker = [&] {
    for (size_t i = next++; i < seeds.size(); i = next++) {
      SeedResult& r = results[i];
      r.seed = seeds[i];
      for (int run = 0; run < 2; ++run) {
        sim::DistrictScenario sc = Draw(base, seeds[i], start_s, fam.duration_days, run == 1);
        if (!a.meter_bias) {
          // The method's own error: meters with their random noise but no
          // systematic error (see config/WATER.md for what a bias does).
          for (sim::InstrumentSpec& ins : sc.instruments) {
            ins.bias_draw_sigma = ins.bias_draw_sigma_fraction = 0.0;
            ins.bias = ins.bias_fraction = 0.0;
          }
        }
        sim::DistrictSimResult simr;
        sim::DistrictRunLog log;
        std::string err;
        if (!sim::SimulateDistrict(site, sc, &simr, &err) || !sim::RunDistrictOnSim(site, sc.district, simr, 60.0, &log, &err)) {
          r.error = err;
          break;
        }
        if (!a.dump.empty()) {
          std::string e2;
          sim::WriteDistrictSimulation(site, simr, a.dump + "/" + std::to_string(seeds[i]) + (run ? "-bursts" : "-free"), &e2);
        }
        const sim::DistrictEvaluation ev = sim::EvaluateDistrictLog(simr.truth, log, mo.min_nights);
        if (run == 0) {
          r.clean_eval = ev;
          r.false_clean = ev.false_alarms;
          r.clean_days = ev.days;
        } else {
          r.burst_eval = ev;
          r.false_burst = ev.false_alarms;
        }
      }
    }
  };
  std::vector<std::thread> pool;
  for (int k = 0; k < std::max(1, a.threads); ++k) pool.emplace_back(worker);
  for (auto& t : pool) t.join();

  std::printf("district family %s, %s seeds, %s, %.0f days per run\n\n", a.family.c_str(),
              a.seeds.empty() ? a.set.c_str() : "given", a.no_meters ? "WITHOUT customer meters" : "with the site's customer meters",
              fam.duration_days);
  std::printf("| seed | burst start (UTC) | size at night m3/h | alarmed after h | path | estimate m3/h |\n|---|---|---|---|---|---|\n");
  int n_small = 0, ok_small = 0, n_big = 0, ok_big = 0, false_total = 0, failed = 0;
  double worst_small = 0.0, worst_big = 0.0, days_total = 0.0, worst_night_pct = 0.0, sum_night_pct = 0.0;
  int n_night = 0;
  std::string csv = "seed,run,burst_start,size_night_m3_h,delay_h,path,estimate_m3_h\n";
  nlohmann::json out = nlohmann::json::array();
  for (const SeedResult& r : results) {
    if (!r.error.empty()) {
      std::printf("| %llu | error: %s |||||\n", static_cast<unsigned long long>(r.seed), r.error.c_str());
      ++failed;
      continue;
    }
    for (const sim::DistrictBurstOutcome& b : r.burst_eval.bursts) {
      const double size = b.truth.rate_at_night_m3_h;
      const bool found = std::isfinite(b.delay_h);
      if (size >= 1.5) {
        ++n_small;
        if (found && b.delay_h <= 30.0) ++ok_small;
        worst_small = std::max(worst_small, found ? b.delay_h : INFINITY);
      }
      if (size >= 5.0) {
        ++n_big;
        if (found && b.delay_h <= 6.0) ++ok_big;
        worst_big = std::max(worst_big, found ? b.delay_h : INFINITY);
      }
      std::printf("| %llu | %s | %.2f | %s | %s | %s |\n", static_cast<unsigned long long>(r.seed),
                  FormatIsoUtc(b.truth.start_s, 0).substr(0, 16).c_str(), size, found ? F(b.delay_h, 1).c_str() : "NOT",
                  b.path.c_str(), F(b.estimate_m3_h, 2).c_str());
      csv += std::to_string(r.seed) + ",burst," + FormatIsoUtc(b.truth.start_s, 0) + "," + F(size, 3) + "," +
             (found ? F(b.delay_h, 2) : "") + "," + b.path + "," + F(b.estimate_m3_h, 3) + "\n";
    }
    false_total += r.false_clean + r.false_burst;
    days_total += r.clean_days + r.burst_eval.days;
    for (const sim::DistrictEvaluation* e : {&r.clean_eval, &r.burst_eval}) {
      worst_night_pct = std::max(worst_night_pct, e->night_abs_error_pct);
      sum_night_pct += e->night_abs_error_pct;
      ++n_night;
    }
    out.push_back({{"seed", r.seed}, {"false_alarms_clean", r.false_clean}, {"false_alarms_burst_run", r.false_burst},
                   {"night_abs_error_pct_clean", r.clean_eval.night_abs_error_pct},
                   {"night_abs_error_pct_burst_run", r.burst_eval.night_abs_error_pct},
                   {"night_bias_pct_clean", r.clean_eval.night_bias_pct}});
  }
  std::printf("\n| seed | false alarms, burst-free run | false alarms, burst run | night leakage mean abs error %% (free / burst run) | bias %% |\n|---|---|---|---|---|\n");
  for (const SeedResult& r : results) {
    if (!r.error.empty()) continue;
    std::printf("| %llu | %d | %d | %.1f / %.1f | %+.1f |\n", static_cast<unsigned long long>(r.seed), r.false_clean,
                r.false_burst, r.clean_eval.night_abs_error_pct, r.burst_eval.night_abs_error_pct, r.clean_eval.night_bias_pct);
  }
  const bool pass = failed == 0 && ok_small == n_small && ok_big == n_big && false_total == 0 && worst_night_pct <= 3.0;
  std::printf("\nbursts >= 1.5 m3/h alarmed within 30 h: %d of %d (worst %s h)\n", ok_small, n_small, F(worst_small, 1).c_str());
  std::printf("bursts >= 5 m3/h alarmed within 6 h: %d of %d (worst %s h)\n", ok_big, n_big, F(worst_big, 1).c_str());
  std::printf("false burst alarms: %d over %.0f district-days\n", false_total, days_total);
  std::printf("night leakage mean |error|: mean over runs %.2f %%, worst run %.2f %%\n",
              n_night > 0 ? sum_night_pct / n_night : NAN, worst_night_pct);
  std::printf("%s\n", pass ? "PASS" : "FAIL");
  if (!a.out_csv.empty()) {
    std::FILE* f = std::fopen(a.out_csv.c_str(), "wb");
    if (f == nullptr) {
      std::fprintf(stderr, "--csv: cannot write %s\n", a.out_csv.c_str());
      return 1;
    }
    std::fwrite(csv.data(), 1, csv.size(), f);
    std::fclose(f);
  }
  if (!a.out_json.empty()) {
    std::FILE* f = std::fopen(a.out_json.c_str(), "wb");
    if (f == nullptr) {
      std::fprintf(stderr, "--json: cannot write %s\n", a.out_json.c_str());
      return 1;
    }
    const nlohmann::json doc = {{"seeds", out}, {"bursts_small", n_small}, {"bursts_small_ok", ok_small},
                                {"bursts_big", n_big}, {"bursts_big_ok", ok_big}, {"false_alarms", false_total},
                                {"district_days", days_total}, {"worst_night_abs_error_pct", worst_night_pct},
                                {"pass", pass}};
    const std::string text = doc.dump(2) + "\n";
    std::fwrite(text.data(), 1, text.size(), f);
    std::fclose(f);
  }
  return pass ? 0 : 3;
}

void Register(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<Args>();
  CLI::App* cmd = app.add_subcommand(
      "district-eval", "Evaluate burst alarms and night leakage on a family of generated districts (tuning or hold-out seeds)");
  cmd->add_option("--config", args->config, "Site config with a districts section (JSON)")->required()->check(CLI::ExistingFile);
  cmd->add_option("--family", args->family, "District family (JSON, \"holdfast-district-family/1\")")->required()->check(CLI::ExistingFile);
  cmd->add_option("--set", args->set, "Seed set from the family file: tuning (default), holdout, or retired-holdout (an earlier hold-out)");
  cmd->add_option("--seeds", args->seeds, "Explicit seeds instead of a set");
  cmd->add_flag("--no-meters", args->no_meters, "Ignore the district's customer meters");
  cmd->add_flag("--meter-bias", args->meter_bias, "Draw the meters' systematic errors from the site's accuracy (default: none)");
  cmd->add_option("--dump", args->dump, "Write each run's readings and truth under DIR/SEED-free and DIR/SEED-bursts");
  cmd->add_option("--threads", args->threads, "Worker threads (default 1)")->check(CLI::Range(1, 16));
  cmd->add_option("--csv", args->out_csv, "Write the burst table as CSV");
  cmd->add_option("--json", args->out_json, "Write the per-seed figures as JSON");
  cmd->callback([args, exit_code] { *exit_code = Run(*args); });
}

}  // namespace
HOLDFAST_REGISTER_COMMAND(Register);
}  // namespace holdfast::cli
