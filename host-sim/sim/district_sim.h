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
#include <string>
#include <vector>

#include "holdfast/site.h"
#include "holdfast/site_config.h"
#include "instruments.h"

namespace holdfast::sim {

struct DistrictBurst {
  double start_s = 0.0;        // since the scenario start
  double rate_m3_h_at_50m = 0.0;
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
  double day_to_day_pct = 4.0;           // sd of the daily level
  double noise_pct = 4.0;                // sd of the AR(1) demand noise
  double noise_correlation_s = 1800.0;
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

struct DistrictSimResult {
  std::vector<SimReading> readings;  // in time order
  std::vector<DistrictNightTruth> nights;
  double total_input_m3 = 0.0, total_customer_m3 = 0.0, total_leakage_m3 = 0.0, total_outlet_m3 = 0.0;
  double storage_start_m3 = 0.0, storage_end_m3 = 0.0;
  double mass_residual_m3 = 0.0;
  std::string truth_json;
};

bool SimulateDistrict(const Site& site, const DistrictScenario& sc, DistrictSimResult* out, std::string* why);
// DIR/readings.csv and DIR/truth.json.
bool WriteDistrictSimulation(const Site& site, const DistrictSimResult& r, const std::string& dir, std::string* why);

}  // namespace holdfast::sim
