// District (DMA) scenario generator for water-utility mode: a lumped model of
// one district of a site, written in the readings format. The scenario file
// ("holdfast-district-scenario/1") is documented in config/WATER.md.
//
// Model, per step dt (explicit, first order):
//   customer use   U(t) = night use + day pattern(t) * daily level * (1 + noise)
//                  night use = households * night rate (+ non-households);
//                  the day pattern (hourly, linear between hours) is zero in the
//                  small hours, so the true legitimate night use is known;
//                  daily level: one draw per day (weather), noise: AR(1).
//   zone pressure  H = base head + reservoir level - c * (Q_zone + Q_out)^2
//                  (head loss in the mains grows with the square of the flow)
//   leakage        background: L_b = L_50 * (H / 50)^N1 (FAVAD, May 1994);
//                  bursts from their start: B * (H / 50)^N1_burst
//   reservoir      dV/dt = Q_in - Q_zone - Q_out, Q_zone = U + leakage; the
//                  inlet fills at a fixed rate between an on and an off level
//   outlet         transfer to a neighbouring district, a diurnal fraction of a
//                  mean rate.
// Meters see the true values through the instrument models (instruments.h):
// noise, bias, quantisation, from the point's declared accuracy unless the
// scenario overrides them.
#pragma once

#include <cstdint>
#include <limits>
#include <string>
#include <vector>

#include "holdfast/site.h"
#include "holdfast/water.h"
#include "district_driver.h"
#include "holdfast/site_config.h"
#include "instruments.h"

namespace holdfast::sim {

struct DistrictBurst {
  double start_s = 0.0;        // since the scenario start
  double rate_m3_h_at_50m = 0.0;
  double end_s = -1.0;         // repaired at (since the start); < 0 = never
};

struct DistrictScenario {
  std::string name;
  int district = -1;
  double start_epoch_s = 0.0;
  double duration_s = 28.0 * 86400.0;
  double step_s = 60.0;
  uint64_t seed = 1;
  // Demand.
  double household_daily_m3 = 0.33;
  double non_household_daily_m3 = 1.2;
  double household_night_l_h = 1.7;      // true legitimate night use per household
  double non_household_night_l_h = 8.0;
  double day_to_day_pct = 6.0;           // sd of the daily level
  double noise_pct = 5.0;                // sd of the AR(1) demand noise
  double noise_correlation_s = 5400.0;   // lag-one autocorrelation 0.85 at 15 min
  // Night use varies from night to night (sd, shared by all properties), and
  // nights before a weekend day are busier; weekend days use more and their
  // morning peak comes later.
  double night_to_night_pct = 6.0;
  double weekend_night_pct = 8.0;
  double weekend_day_pct = 6.0;
  double weekend_shift_h = 1.5;
  // Customer meters: the unmetered properties' use differs from the
  // metered ones' (scaled by coverage) by this fraction (a sampling bias).
  double unmetered_bias_pct = 0.0;
  std::vector<double> day_pattern = {0, 0, 0, 0, 0.05, 0.4, 1.3, 1.9, 1.7, 1.35, 1.2, 1.15,
                                     1.2, 1.1, 1.0, 1.0, 1.1, 1.35, 1.6, 1.55, 1.35, 1.1, 0.7, 0.3};
  // Hydraulics.
  double base_head_m = 48.0;             // zone head with the reservoir empty and no flow
  double headloss_m_at_100_m3_h = 6.0;
  double background_leakage_m3_h_at_50m = 4.0;
  double n1 = 1.0;
  double burst_n1 = 0.5;
  std::vector<DistrictBurst> bursts;
  // Reservoir (the first reservoir of the district, when it has one).
  double initial_level_m = 3.0;
  double fill_on_level_m = 2.5;
  double fill_off_level_m = 4.5;
  double fill_rate_m3_h = 90.0;
  // Transfer to a neighbour (the district's outlets share it equally).
  double outlet_mean_m3_h = 8.0;
  // Instruments per point (from the site's declared accuracy by default).
  std::vector<int> points;
  std::vector<InstrumentSpec> instruments;
};

bool CompileDistrictScenario(const nlohmann::json& doc, const std::string& file, const Site& site,
                             DistrictScenario* sc, std::vector<ConfigProblem>* problems);
bool LoadDistrictScenarioFile(const std::string& path, const Site& site, DistrictScenario* sc,
                              std::vector<ConfigProblem>* problems);

struct DistrictNightTruth {
  int64_t local_day = 0;
  double night_leakage_m3_h = 0.0;   // mean true leakage over the night window
  double legit_night_use_m3_h = 0.0; // mean true customer use over the night window
  double daily_leakage_m3 = 0.0;     // true leakage over the local day
  double night_head_m = 0.0;
};

// Truth about one burst, for evaluation.
struct DistrictBurstTruth {
  double start_s = 0.0;        // epoch s
  double end_s = 0.0;          // epoch s (repair), +inf if never
  double rate_m3_h_at_50m = 0.0;
  double rate_at_night_m3_h = 0.0;  // at the mean night head of the run
};

struct DistrictTruth {
  std::vector<DistrictBurstTruth> bursts;
  std::vector<DistrictNightTruth> nights;
  double start_s = 0.0, end_s = 0.0;
};
bool LoadDistrictTruth(const std::string& path, DistrictTruth* t, std::string* why);

struct DistrictSimResult {
  std::vector<SimReading> readings;  // in time order
  std::vector<DistrictNightTruth> nights;
  double total_input_m3 = 0.0, total_customer_m3 = 0.0, total_leakage_m3 = 0.0, total_outlet_m3 = 0.0;
  double storage_start_m3 = 0.0, storage_end_m3 = 0.0;
  double mass_residual_m3 = 0.0;
  DistrictTruth truth;
  std::string truth_json;
};

bool SimulateDistrict(const Site& site, const DistrictScenario& sc, DistrictSimResult* out, std::string* why);
// DIR/readings.csv and DIR/truth.json.
bool WriteDistrictSimulation(const Site& site, const DistrictSimResult& r, const std::string& dir, std::string* why);

}  // namespace holdfast::sim

namespace holdfast::sim {

// --- Evaluation of a district run against its truth ------------------------

struct DistrictAlarmSeen {
  double time_s = 0.0;
  double size_m3_h = 0.0;
  std::string path;
};

struct DistrictNightSeen {
  int64_t local_day = 0;
  double night_leakage_m3_h = 0.0;
  double daily_leakage_m3 = 0.0;
};

struct DistrictBurstOutcome {
  DistrictBurstTruth truth;
  bool in_learning = false;       // started before the detector's baseline formed
  double delay_h = std::numeric_limits<double>::quiet_NaN();  // NaN = not alarmed
  double estimate_m3_h = std::numeric_limits<double>::quiet_NaN();
  std::string path;
};

struct DistrictEvaluation {
  std::vector<DistrictBurstOutcome> bursts;
  int false_alarms = 0;
  double days = 0.0;
  int nights = 0;
  double night_mean_error_m3_h = 0.0, night_mean_abs_error_m3_h = 0.0, night_max_abs_error_m3_h = 0.0;
  double night_mean_true_m3_h = 0.0;
  double night_abs_error_pct = 0.0;   // mean |error| / mean true
  double night_bias_pct = 0.0;        // mean error / mean true
  double daily_abs_error_pct = std::numeric_limits<double>::quiet_NaN();
};

// Alarms are matched in time order to the earliest burst that has started
// and is not yet alarmed; an alarm with none is a false alarm. Bursts that
// start before `learning_end_s` are marked in_learning.
DistrictEvaluation EvaluateDistrict(const DistrictTruth& truth, const std::vector<DistrictAlarmSeen>& alarms,
                                    const std::vector<DistrictNightSeen>& nights, double learning_end_s);

// Everything a district run produced, collected through DistrictRunOptions.
struct DistrictRunLog {
  std::vector<water::NightResult> nights;
  std::vector<AlarmEvent> events;
  std::vector<water::BurstReport> bursts;
  std::vector<water::DistrictBlock> blocks;  // only when asked for
  DistrictRunResult run;
};
void AttachDistrictLog(DistrictRunOptions* o, DistrictRunLog* log, bool keep_blocks);
// Runs generated readings through a DistrictRunner (the tick rule of the
// file loop).
bool RunDistrictOnSim(const Site& site, int district, const DistrictSimResult& sim, double tick_s,
                      DistrictRunLog* log, std::string* why);
// The evaluation of a run: alarms are the bursts reported; nights use the
// published night leakage. Bursts before start + min_nights days are in the
// learning period.
DistrictEvaluation EvaluateDistrictLog(const DistrictTruth& truth, const DistrictRunLog& log, double learning_days);

}  // namespace holdfast::sim
