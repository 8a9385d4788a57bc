// `holdfast district`: run the readings of one district (DMA) through the
// core's district balance (burst detection) and minimum night flow analysis.
// Prints one row per night and the burst alarm events; writes them as CSV and
// JSON Lines on request. With --truth (a district-sim truth file) it also
// evaluates: burst detection time and night-leakage error.
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <memory>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "cli_commands.h"
#include "district_driver.h"
#include "readings_csv.h"
#include "site_file.h"
#include "water_files.h"

namespace holdfast::cli {
namespace {

struct Args {
  std::string config, data, district, nights_out, events_out, truth, summary, balance_out;
  double tick_s = 60.0;
  int every = 15;
};

struct Truth {
  std::vector<double> burst_start_s;
  std::vector<std::pair<int64_t, double>> night_leak;   // local day -> m3/h
  std::vector<std::pair<int64_t, double>> daily_leak;   // local day -> m3
};

bool LoadTruth(const std::string& path, Truth* t, std::string* why) {
  nlohmann::json doc;
  std::vector<ConfigProblem> problems;
  if (!ReadJsonFile(path, &doc, &problems)) {
    *why = problems.empty() ? path + ": unreadable" : problems[0].ToString();
    return false;
  }
  try {
    if (doc.value("format", "") != "holdfast-district-truth/1") {
      *why = path + ":/format: not a district truth file (\"holdfast-district-truth/1\")";
      return false;
    }
    for (const auto& b : doc.at("bursts")) {
      double s = 0.0;
      if (!ParseTime(b.at("start").get<std::string>(), &s)) throw std::runtime_error("bad burst start");
      t->burst_start_s.push_back(s);
    }
    for (const auto& n : doc.at("nights")) {
      t->night_leak.emplace_back(n.at("local_day").get<int64_t>(), n.at("night_leakage_m3_h").get<double>());
      t->daily_leak.emplace_back(n.at("local_day").get<int64_t>(), n.at("daily_leakage_m3").get<double>());
    }
  } catch (const std::exception& e) {
    *why = path + ": malformed truth file: " + e.what();
    return false;
  }
  return true;
}

std::string Fixed(double v, int dec) {
  if (!std::isfinite(v)) return "";
  char buf[48];
  std::snprintf(buf, sizeof buf, "%.*f", dec, v);
  return buf;
}

int Run(const Args& a) {
  Site site;
  if (!LoadSiteOrSay(a.config, &site)) return 2;
  if (site.districts.empty()) {
    std::fprintf(stderr, "%s: the site has no districts (config/FORMAT.md, \"districts\")\n", a.config.c_str());
    return 2;
  }
  int index = 0;
  if (!a.district.empty()) {
    index = -1;
    for (size_t i = 0; i < site.districts.size(); ++i)
      if (site.districts[i].id == a.district) index = static_cast<int>(i);
    if (index < 0) {
      std::fprintf(stderr, "--district: no district \"%s\" in %s\n", a.district.c_str(), a.config.c_str());
      return 2;
    }
  }
  Truth truth;
  std::string why;
  if (!a.truth.empty() && !LoadTruth(a.truth, &truth, &why)) {
    std::fprintf(stderr, "%s\n", why.c_str());
    return 2;
  }
  DistrictRunner runner;
  if (!runner.Init(site, index, a.tick_s, &why)) {
    std::fprintf(stderr, "%s: %s\n", a.config.c_str(), why.c_str());
    return 2;
  }
  ReadingsCsvReader reader;
  if (!reader.Open(a.data, site, &why)) {
    std::fprintf(stderr, "%s: %s\n", a.data.c_str(), why.c_str());
    return 2;
  }
  std::FILE* events = nullptr;
  if (!a.events_out.empty() && (events = std::fopen(a.events_out.c_str(), "wb")) == nullptr) {
    std::fprintf(stderr, "--events: cannot write %s\n", a.events_out.c_str());
    return 1;
  }
  std::vector<water::NightResult> nights;
  std::vector<AlarmEvent> alarms;
  DistrictRunOptions o;
  o.on_night = [&](const water::NightResult& n) { nights.push_back(n); };
  o.on_event = [&](const AlarmEvent& e) {
    alarms.push_back(e);
    const std::string line = DistrictEventJson(site, e);
    if (events) std::fprintf(events, "%s\n", line.c_str());
  };
  std::FILE* balance = nullptr;
  if (!a.balance_out.empty()) {
    if ((balance = std::fopen(a.balance_out.c_str(), "wb")) == nullptr) {
      if (events) std::fclose(events);
      std::fprintf(stderr, "--balance: cannot write %s\n", a.balance_out.c_str());
      return 1;
    }
    std::fprintf(balance, "time,valid,inflow_m3_h,outflow_m3_h,storage_m3,zone_flow_m3_h,customer_use_m3_h,"
                          "residual_m3_h,pressure_head_m,decision,statistic,threshold\n");
  }
  uint64_t n_tick = 0;
  o.on_tick = [&](double t) {
    if (balance == nullptr || (n_tick++ % static_cast<uint64_t>(a.every)) != 0) return;
    const water::DistrictTick& k = runner.monitor().tick();
    const water::BurstEvidence& ev = runner.monitor().evidence();
    std::fprintf(balance, "%s,%d,%.4f,%.4f,%.3f,%.4f,%s,%s,%.3f,%s,%.4f,%.4f\n", FormatIsoUtc(t, 0).c_str(),
                 k.valid ? 1 : 0, k.inflow_m3_s * 3600.0, k.outflow_m3_s * 3600.0, k.storage_m3,
                 k.zone_flow_m3_s * 3600.0, Fixed(k.customer_use_m3_s * 3600.0, 4).c_str(),
                 Fixed(k.residual_m3_s * 3600.0, 4).c_str(), runner.pressure_head_m(), DecisionStateName(ev.state),
                 ev.statistic, ev.threshold);
  };
  CsvReadingSource source(&reader);
  const DistrictRunResult res = RunDistrict(&runner, &source, o);
  if (events) std::fclose(events);
  if (balance) std::fclose(balance);

  const DistrictSpec& d = site.districts[index];
  std::printf("district %s \"%s\": %llu readings, %llu ticks (%s .. %s), %llu without a balance\n", d.id.c_str(),
              d.name.c_str(), static_cast<unsigned long long>(res.readings_fed),
              static_cast<unsigned long long>(res.ticks),
              std::isfinite(res.first_tick_s) ? FormatIsoUtc(res.first_tick_s, 0).c_str() : "-",
              std::isfinite(res.last_tick_s) ? FormatIsoUtc(res.last_tick_s, 0).c_str() : "-",
              static_cast<unsigned long long>(runner.invalid_ticks()));
  if (reader.bad_rows() > 0) {
    std::fprintf(stderr, "%s: %llu bad rows\n", a.data.c_str(), static_cast<unsigned long long>(reader.bad_rows()));
    for (const CsvRowError& e : reader.errors())
      std::fprintf(stderr, "  %s:%llu: %s\n", a.data.c_str(), static_cast<unsigned long long>(e.line), e.message.c_str());
  }
  std::printf("legitimate night use %.3f m3/h (%s); night window %02d:%02d-%02d:%02d local; FAVAD N1 %.2f\n",
              runner.night().legitimate_night_use_m3_h(),
              d.night_use_per_person ? "per person" : "per property", static_cast<int>(d.night_start_h),
              static_cast<int>(std::lround(std::fmod(d.night_start_h, 1.0) * 60)), static_cast<int>(d.night_end_h),
              static_cast<int>(std::lround(std::fmod(d.night_end_h, 1.0) * 60)), d.n1);
  std::printf("\n| night (local) | MNF m3/h | at | AZNP m | night leakage m3/h | HDF h | daily leakage m3 | cusum | change |\n");
  std::printf("|---|---|---|---|---|---|---|---|---|\n");
  std::string csv = "date,mnf_time,mnf_m3_h,aznp_m,legit_night_use_m3_h,night_leakage_m3_h,hdf_h,daily_leakage_m3,cusum,change,trend_m3_h_per_day\n";
  for (const water::NightResult& n : nights) {
    const std::string date = FormatIsoUtc(static_cast<double>(n.local_day) * 86400.0, 0).substr(0, 10);
    const std::string at = FormatIsoUtc(n.mnf_time_s + d.utc_offset_s, 0).substr(11, 5);
    std::printf("| %s | %.2f | %s | %.1f | %.2f | %s | %s | %.2f | %s |\n", date.c_str(), n.mnf_m3_h, at.c_str(),
                n.night_pressure_head_m, n.night_leakage_m3_h, Fixed(n.hdf_h, 2).c_str(),
                Fixed(n.daily_leakage_m3, 1).c_str(), n.cusum, n.change ? "**step up**" : "");
    csv += date + "," + FormatIsoUtc(n.mnf_time_s, 0) + "," + Fixed(n.mnf_m3_h, 4) + "," + Fixed(n.night_pressure_head_m, 3) +
           "," + Fixed(n.legitimate_night_use_m3_h, 4) + "," + Fixed(n.night_leakage_m3_h, 4) + "," + Fixed(n.hdf_h, 3) +
           "," + Fixed(n.daily_leakage_m3, 3) + "," + Fixed(n.cusum, 3) + "," + (n.change ? "1" : "0") + "," +
           Fixed(n.trend_m3_h_per_day, 5) + "\n";
  }
  if (!a.nights_out.empty()) {
    std::FILE* f = std::fopen(a.nights_out.c_str(), "wb");
    if (f == nullptr || std::fwrite(csv.data(), 1, csv.size(), f) != csv.size()) {
      if (f) std::fclose(f);
      std::fprintf(stderr, "--nights: cannot write %s\n", a.nights_out.c_str());
      return 1;
    }
    std::fclose(f);
  }
  std::printf("\nburst alarm events: %zu\n", alarms.size());
  for (const AlarmEvent& e : alarms) std::printf("  %s\n", DistrictEventJson(site, e).c_str());

  // Evaluation against the generator's truth.
  nlohmann::json summary = {{"district", d.id}, {"nights", nights.size()}, {"events", alarms.size()}};
  if (!a.truth.empty()) {
    std::printf("\nevaluation against %s\n", a.truth.c_str());
    double first_burst = truth.burst_start_s.empty() ? INFINITY : *std::min_element(truth.burst_start_s.begin(), truth.burst_start_s.end());
    int false_alarms = 0;
    double detect_s = NAN, size_m3_h = NAN;
    for (const AlarmEvent& e : alarms) {
      if (e.cause != AlarmCause::kConditionRaised) continue;
      if (e.time_s < first_burst) {
        ++false_alarms;
      } else if (!std::isfinite(detect_s)) {
        detect_s = e.time_s - first_burst;
        size_m3_h = e.evidence.leak_rate_kg_s / 1000.0 * 3600.0;
      }
    }
    summary["false_alarms_before_burst"] = false_alarms;
    std::printf("  burst alarms raised before the first burst (false alarms): %d\n", false_alarms);
    if (!truth.burst_start_s.empty()) {
      if (std::isfinite(detect_s)) {
        std::printf("  burst detection time: %.2f h after the burst started (%s); estimated size %.2f m3/h\n",
                    detect_s / 3600.0, FormatIsoUtc(first_burst, 0).c_str(), size_m3_h);
        summary["burst_detection_h"] = detect_s / 3600.0;
        summary["burst_size_estimate_m3_h"] = size_m3_h;
      } else {
        std::printf("  burst not detected\n");
        summary["burst_detection_h"] = nullptr;
      }
    }
    double sum_err = 0.0, sum_abs = 0.0, max_abs = 0.0, sum_true = 0.0, sum_derr = 0.0, sum_dtrue = 0.0;
    int n = 0, nd = 0;
    for (const water::NightResult& nr : nights) {
      for (size_t i = 0; i < truth.night_leak.size(); ++i) {
        if (truth.night_leak[i].first != nr.local_day) continue;
        const double err = nr.night_leakage_m3_h - truth.night_leak[i].second;
        sum_err += err;
        sum_abs += std::fabs(err);
        max_abs = std::max(max_abs, std::fabs(err));
        sum_true += truth.night_leak[i].second;
        ++n;
        if (std::isfinite(nr.daily_leakage_m3)) {
          sum_derr += std::fabs(nr.daily_leakage_m3 - truth.daily_leak[i].second);
          sum_dtrue += truth.daily_leak[i].second;
          ++nd;
        }
      }
    }
    if (n > 0) {
      std::printf("  night leakage over %d nights: mean error %+.3f m3/h, mean |error| %.3f m3/h (%.1f %% of the true "
                  "mean %.2f m3/h), max |error| %.3f m3/h\n",
                  n, sum_err / n, sum_abs / n, 100.0 * sum_abs / std::max(sum_true, 1e-12), sum_true / n, max_abs);
      summary["night_leakage_mean_error_m3_h"] = sum_err / n;
      summary["night_leakage_mean_abs_error_m3_h"] = sum_abs / n;
      summary["night_leakage_mean_abs_error_pct"] = 100.0 * sum_abs / std::max(sum_true, 1e-12);
      summary["night_leakage_max_abs_error_m3_h"] = max_abs;
    }
    if (nd > 0) {
      std::printf("  daily leakage (night leakage x HDF) over %d days: mean |error| %.1f m3/day (%.1f %% of the true mean %.1f m3/day)\n",
                  nd, sum_derr / nd, 100.0 * sum_derr / std::max(sum_dtrue, 1e-12), sum_dtrue / nd);
      summary["daily_leakage_mean_abs_error_pct"] = 100.0 * sum_derr / std::max(sum_dtrue, 1e-12);
    }
  }
  if (!a.summary.empty()) {
    std::FILE* f = std::fopen(a.summary.c_str(), "wb");
    const std::string text = summary.dump(2) + "\n";
    if (f == nullptr || std::fwrite(text.data(), 1, text.size(), f) != text.size()) {
      if (f) std::fclose(f);
      std::fprintf(stderr, "--summary: cannot write %s\n", a.summary.c_str());
      return 1;
    }
    std::fclose(f);
  }
  return 0;
}

void Register(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<Args>();
  CLI::App* cmd = app.add_subcommand(
      "district", "Run a district's readings through the DMA balance (burst alarms) and minimum night flow analysis");
  cmd->add_option("--config", args->config, "Site config with a districts section (JSON)")->required()->check(CLI::ExistingFile);
  cmd->add_option("--data", args->data, "Readings CSV (time,point,value,quality)")->required();
  cmd->add_option("--district", args->district, "District id (default: the first)");
  cmd->add_option("--tick", args->tick_s, "Tick, s (default 60)")->check(CLI::Range(1.0, 900.0));
  cmd->add_option("--nights", args->nights_out, "Write the nights table as CSV");
  cmd->add_option("--events", args->events_out, "Write burst alarm events as JSON Lines");
  cmd->add_option("--balance", args->balance_out, "Write the district balance as CSV (one row every --every ticks)");
  cmd->add_option("--every", args->every, "Balance rows every N ticks (default 15)")->check(CLI::Range(1, 1000000));
  cmd->add_option("--truth", args->truth, "Evaluate against a district-sim truth.json");
  cmd->add_option("--summary", args->summary, "Write the evaluation summary as JSON");
  cmd->callback([args, exit_code] { *exit_code = Run(*args); });
}

}  // namespace
HOLDFAST_REGISTER_COMMAND(Register);
}  // namespace holdfast::cli
