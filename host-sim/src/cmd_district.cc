// `holdfast district`: run the readings of one district (DMA) through the
// core's district balance (burst alarms: night step and day fast path) and
// minimum night flow analysis. Prints one row per night (local time, zone
// stated) and the burst alarm events, the district's leakage figures (UARL,
// ILI, litres per property per hour, per connection per day); writes nights,
// blocks and events as CSV and JSON Lines on request. With --truth (a
// district-sim truth file) it also evaluates: every burst's detection delay,
// false burst alarms, night-leakage error.
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <memory>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "cli_commands.h"
#include "district_driver.h"
#include "district_sim.h"
#include "readings_csv.h"
#include "site_file.h"
#include "water_files.h"

namespace holdfast::cli {
namespace {

struct Args {
  std::string config, data, district, nights_out, events_out, truth, summary, balance_out;
  double tick_s = 60.0;
};

std::string Fixed(double v, int dec) {
  if (!std::isfinite(v)) return "";
  char buf[48];
  std::snprintf(buf, sizeof buf, "%.*f", dec, v);
  return buf;
}

// Local clock time "HH:MM" of an epoch time.
std::string LocalHm(const water::UtcOffsetSchedule& tz, double t) {
  return FormatIsoUtc(tz.Local(t), 0).substr(11, 5);
}

std::string OffsetText(double off_s) {
  char buf[16];
  const int m = static_cast<int>(std::lround(std::fabs(off_s) / 60.0));
  std::snprintf(buf, sizeof buf, "UTC%c%02d:%02d", off_s < 0 ? '-' : '+', m / 60, m % 60);
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
  sim::DistrictTruth truth;
  std::string why;
  if (!a.truth.empty() && !sim::LoadDistrictTruth(a.truth, &truth, &why)) {
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
  std::FILE* balance = nullptr;
  if (!a.balance_out.empty()) {
    if ((balance = std::fopen(a.balance_out.c_str(), "wb")) == nullptr) {
      if (events) std::fclose(events);
      std::fprintf(stderr, "--balance: cannot write %s\n", a.balance_out.c_str());
      return 1;
    }
    std::fprintf(balance, "start,local_start,weekend,ok,zone_m3_h,customer_m3_h,residual_m3_h,profile_m3_h,sigma_m3_h,z,cusum\n");
  }
  const water::UtcOffsetSchedule& tz = runner.offsets();
  sim::DistrictRunLog log;
  DistrictRunOptions o;
  sim::AttachDistrictLog(&o, &log, false);
  o.on_event = [&](const AlarmEvent& e) {
    log.events.push_back(e);
    const water::BurstReport* b =
        e.cause == AlarmCause::kConditionRaised && !log.bursts.empty() ? &log.bursts.back() : nullptr;
    if (events) std::fprintf(events, "%s\n", DistrictEventJson(site, e, b).c_str());
  };
  o.on_block = [&](const water::DistrictBlock& b) {
    if (balance == nullptr) return;
    const double local = tz.Local(b.start_s);
    const int64_t day = water::LocalDayOf(local);
    const int wd = water::WeekdayOf(day);
    std::fprintf(balance, "%s,%s,%d,%d,%s,%s,%s,%s,%s,%s,%s\n", FormatIsoUtc(b.start_s, 0).c_str(),
                 FormatIsoUtc(local, 0).substr(0, 16).c_str(), wd == 0 || wd == 6 ? 1 : 0, b.ok ? 1 : 0,
                 Fixed(b.zone_m3_h, 4).c_str(), Fixed(b.customer_m3_h, 4).c_str(), Fixed(b.residual_m3_h, 4).c_str(),
                 Fixed(b.profile_m3_h, 4).c_str(), Fixed(b.sigma_m3_h, 4).c_str(), Fixed(b.z, 3).c_str(),
                 Fixed(b.cusum, 3).c_str());
  };
  CsvReadingSource source(&reader);
  log.run = RunDistrict(&runner, &source, o);
  const DistrictRunResult& res = log.run;
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
  if (runner.customer_readings_unused() > 0 || runner.monitor().late_customer_intervals() > 0)
    std::fprintf(stderr, "%s: %llu customer-meter readings not used (bad, late or out of order)\n", a.data.c_str(),
                 static_cast<unsigned long long>(runner.customer_readings_unused() +
                                                 runner.monitor().late_customer_intervals()));
  const std::string zone = d.time_zone.empty() ? OffsetText(d.utc_offset_s) + " (fixed)" : d.time_zone;
  const bool metered = d.customer_meter_point >= 0;
  std::printf("local time: %s; night window %s-%s, quiet hours %s-%s; ", zone.c_str(),
              FormatIsoUtc(d.night_start_h * 3600.0, 0).substr(11, 5).c_str(),
              FormatIsoUtc(d.night_end_h * 3600.0, 0).substr(11, 5).c_str(),
              FormatIsoUtc(d.quiet_start_h * 3600.0, 0).substr(11, 5).c_str(),
              FormatIsoUtc(std::fmod(d.quiet_end_h, 24.0) * 3600.0, 0).substr(11, 5).c_str());
  if (metered) {
    std::printf("night use from customer meters (coverage %.0f %%), FAVAD N1 %.2f\n", 100.0 * d.customer_meter_coverage, d.n1);
  } else {
    std::printf("legitimate night use %.3f m3/h (%s), FAVAD N1 %.2f\n", runner.analyzer().legitimate_night_use_m3_h(),
                d.night_use_per_person ? "per person" : "per property", d.n1);
  }
  std::printf("\n| night (local) | MNF m3/h | at (local) | AZNP m | night use m3/h | night leakage m3/h | HDF h | daily leakage m3 | baseline m3/h | step m3/h | burst |\n");
  std::printf("|---|---|---|---|---|---|---|---|---|---|---|\n");
  std::string csv =
      "date,utc_offset,mnf_time_local,mnf_m3_h,aznp_m,legit_night_use_m3_h,metered,night_leakage_m3_h,hdf_h,"
      "daily_leakage_m3,baseline_m3_h,step_m3_h,step_sigma_m3_h,burst_alarm,cusum,change,trend_m3_h_per_day\n";
  for (const water::NightResult& n : log.nights) {
    const std::string date = FormatIsoUtc(static_cast<double>(n.local_day) * 86400.0, 0).substr(0, 10);
    const std::string at = LocalHm(tz, n.mnf_time_s);
    std::printf("| %s | %.2f | %s | %.1f | %.2f | %.2f | %s | %s | %s | %s | %s |\n", date.c_str(), n.mnf_m3_h, at.c_str(),
                n.night_pressure_head_m, n.legitimate_night_use_m3_h, n.night_leakage_m3_h, Fixed(n.hdf_h, 2).c_str(),
                Fixed(n.daily_leakage_m3, 1).c_str(), Fixed(n.step_baseline_m3_h, 2).c_str(),
                Fixed(n.step_m3_h, 2).c_str(), n.burst_alarm ? "**alarm**" : "");
    csv += date + "," + OffsetText(tz.OffsetAt(n.mnf_time_s)) + "," + FormatIsoUtc(tz.Local(n.mnf_time_s), 0).substr(0, 19) +
           "," + Fixed(n.mnf_m3_h, 4) + "," + Fixed(n.night_pressure_head_m, 3) + "," +
           Fixed(n.legitimate_night_use_m3_h, 4) + "," + (std::isfinite(n.metered_night_use_m3_h) ? "1" : "0") + "," +
           Fixed(n.night_leakage_m3_h, 4) + "," + Fixed(n.hdf_h, 3) + "," + Fixed(n.daily_leakage_m3, 3) + "," +
           Fixed(n.step_baseline_m3_h, 4) + "," + Fixed(n.step_m3_h, 4) + "," + Fixed(n.step_sigma_m3_h, 4) + "," +
           (n.burst_alarm ? "1" : "0") + "," + Fixed(n.cusum, 3) + "," + (n.change ? "1" : "0") + "," +
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
  std::printf("\nburst alarms: %zu\n", log.bursts.size());
  for (const water::BurstReport& b : log.bursts)
    std::printf("  %s (%s local): %s, %.2f +- %.2f m3/h; change at %s +- %.1f h\n", FormatIsoUtc(b.time_s, 0).c_str(),
                LocalHm(tz, b.time_s).c_str(), water::BurstPathName(b.path), b.size_m3_h, b.size_ci95_m3_h,
                FormatIsoUtc(b.change_s, 0).c_str(), b.change_ci_s / 3600.0);

  // District figures from the nights (Lambert et al. 1999 UARL; ILI = CARL / UARL).
  nlohmann::json summary = {{"district", d.id}, {"nights", log.nights.size()}, {"bursts", log.bursts.size()}};
  {
    double p = 0.0, leak = 0.0, daily = 0.0;
    int np = 0, nd = 0;
    for (const water::NightResult& n : log.nights) {
      if (std::isfinite(n.night_pressure_head_m) && std::isfinite(n.night_leakage_m3_h)) {
        p += n.night_pressure_head_m;
        leak += n.night_leakage_m3_h;
        ++np;
      }
      if (std::isfinite(n.daily_leakage_m3)) {
        daily += n.daily_leakage_m3;
        ++nd;
      }
    }
    if (np > 0 && nd > 0 && d.service_connections > 0.0) {
      water::SystemInfrastructure inf;
      inf.mains_length_km.value = d.mains_length_km;
      inf.service_connections.value = d.service_connections;
      inf.private_pipe_length_km.value = d.private_pipe_length_km;
      // The average zone pressure over the day is about the night head
      // divided by the ratio HDF / 24 for N1 = 1; the night head is used here
      // (an upper bound of the average, so the UARL is not understated).
      inf.average_pressure_head_m.value = p / np;
      const water::UarlResult u = water::ComputeUarl(inf);
      const double carl_l_day = daily / nd * 1000.0;
      const double props = d.households + d.non_households;
      std::printf("\ndistrict figures over %d nights: night leakage %.2f m3/h = %.2f L/property/h; real losses %.1f m3/day "
                  "= %.0f L/connection/day; UARL %.1f m3/day at %.1f m; ILI %.2f\n",
                  np, leak / np, props > 0 ? leak / np * 1000.0 / props : NAN, carl_l_day / 1000.0,
                  carl_l_day / d.service_connections, u.litres_per_day.value / 1000.0, p / np,
                  carl_l_day / u.litres_per_day.value);
      if (!u.applicability_note.empty()) std::printf("  (%s)\n", u.applicability_note.c_str());
      summary["night_leakage_l_property_h"] = props > 0 ? leak / np * 1000.0 / props : 0.0;
      summary["real_losses_l_connection_day"] = carl_l_day / d.service_connections;
      summary["uarl_m3_day"] = u.litres_per_day.value / 1000.0;
      summary["ili"] = carl_l_day / u.litres_per_day.value;
    }
  }

  if (!a.truth.empty()) {
    const water::DistrictMonitorOptions mo;
    const sim::DistrictEvaluation ev = sim::EvaluateDistrictLog(truth, log, mo.min_nights);
    std::printf("\nevaluation against %s\n", a.truth.c_str());
    std::printf("  false burst alarms: %d over %.1f days\n", ev.false_alarms, ev.days);
    summary["false_alarms"] = ev.false_alarms;
    nlohmann::json bursts = nlohmann::json::array();
    for (const sim::DistrictBurstOutcome& b : ev.bursts) {
      std::printf("  burst %s local, %.2f m3/h at night pressure%s: %s\n", FormatIsoUtc(tz.Local(b.truth.start_s), 0).substr(0, 16).c_str(),
                  b.truth.rate_at_night_m3_h, b.in_learning ? " (in the learning period)" : "",
                  std::isfinite(b.delay_h) ? ("alarmed after " + Fixed(b.delay_h, 1) + " h (" + b.path + "), estimated " +
                                              Fixed(b.estimate_m3_h, 2) + " m3/h").c_str()
                                           : "NOT alarmed");
      bursts.push_back({{"start", FormatIsoUtc(b.truth.start_s, 0)}, {"rate_at_night_m3_h", b.truth.rate_at_night_m3_h},
                        {"in_learning", b.in_learning},
                        {"delay_h", std::isfinite(b.delay_h) ? nlohmann::json(b.delay_h) : nlohmann::json(nullptr)},
                        {"estimate_m3_h", std::isfinite(b.estimate_m3_h) ? nlohmann::json(b.estimate_m3_h) : nlohmann::json(nullptr)},
                        {"path", b.path}});
    }
    summary["burst_outcomes"] = bursts;
    if (ev.nights > 0) {
      std::printf("  night leakage over %d nights: mean error %+.3f m3/h (%+.1f %%), mean |error| %.3f m3/h (%.1f %% of the "
                  "true mean %.2f m3/h), max |error| %.3f m3/h\n",
                  ev.nights, ev.night_mean_error_m3_h, ev.night_bias_pct, ev.night_mean_abs_error_m3_h,
                  ev.night_abs_error_pct, ev.night_mean_true_m3_h, ev.night_max_abs_error_m3_h);
      summary["night_leakage_mean_error_m3_h"] = ev.night_mean_error_m3_h;
      summary["night_leakage_mean_abs_error_m3_h"] = ev.night_mean_abs_error_m3_h;
      summary["night_leakage_mean_abs_error_pct"] = ev.night_abs_error_pct;
      summary["night_leakage_bias_pct"] = ev.night_bias_pct;
      summary["night_leakage_max_abs_error_m3_h"] = ev.night_max_abs_error_m3_h;
    }
    if (std::isfinite(ev.daily_abs_error_pct)) {
      std::printf("  daily leakage (night leakage x HDF): mean |error| %.1f %%\n", ev.daily_abs_error_pct);
      summary["daily_leakage_mean_abs_error_pct"] = ev.daily_abs_error_pct;
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
  cmd->add_option("--balance", args->balance_out, "Write the district balance blocks (one row per block) as CSV");
  cmd->add_option("--truth", args->truth, "Evaluate against a district-sim truth.json");
  cmd->add_option("--summary", args->summary, "Write the figures and the evaluation as JSON");
  cmd->callback([args, exit_code] { *exit_code = Run(*args); });
}

}  // namespace
HOLDFAST_REGISTER_COMMAND(Register);
}  // namespace holdfast::cli
