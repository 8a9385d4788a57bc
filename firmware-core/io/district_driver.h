// Water-utility mode at the file boundary: one district (DMA) of a site run
// through the core's DistrictMonitor (burst detection) and NightFlowAnalyzer
// (minimum night flow), driven by the data-time driver of replay_driver.h.
//
//   holdfast::DistrictRunner runner;
//   runner.Init(site, district_index, tick_s, &why);
//   holdfast::DistrictRunOptions o;  o.on_night = ...;  o.on_event = ...;
//   holdfast::RunDistrict(&runner, &source, o);
//
// Boundary conversions happen here: volume flows are summed per role in m3/s,
// reservoir levels become volumes through their strapping tables, and the
// pressure reference becomes gauge head in metres of water,
//     head_m = (p_abs - p_atm) / (1000 kg/m3 * g) + head_offset_m
// (1000 kg/m3: the conventional density of a metre of water head).
#pragma once

#include <cstdint>
#include <functional>
#include <string>
#include <vector>

#include "holdfast/aligner.h"
#include "holdfast/alarm.h"
#include "holdfast/site.h"
#include "holdfast/water.h"
#include "replay_driver.h"

namespace holdfast {

// The district's Options built from its config entry (defaults from water.h)
// and its local-time schedule (time_zone.h).
water::NightFlowOptions NightOptionsFor(const DistrictSpec& d, double tick_s, const water::UtcOffsetSchedule& tz);
water::DistrictMonitorOptions MonitorOptionsFor(const DistrictSpec& d, const water::UtcOffsetSchedule& tz);
// The district's offset schedule: its time_zone, or its fixed utc offset.
// Covers 2000..2100.
bool DistrictOffsets(const DistrictSpec& d, water::UtcOffsetSchedule* out, std::string* why);

class DistrictRunner {
 public:
  bool Init(const Site& site, int district, double tick_s, std::string* why);
  // Customer-meter readings of a declared interval or register kind are
  // turned into volumes over their intervals here and go to the monitor;
  // everything else goes to the aligner.
  void Feed(const Reading& r);
  // One tick at time t. Returns true when a night was completed (night()).
  bool Advance(double t);
  // Closes the night in progress at the end of the data. True if one was.
  bool Finish();
  bool PopEvent(AlarmEvent* e) { return events_.Pop(e); }

  const water::DistrictMonitor& monitor() const { return monitor_; }
  water::DistrictMonitor& monitor() { return monitor_; }
  const water::NightFlowAnalyzer& analyzer() const { return night_; }
  // The last completed night: MNF and HDF from the analyzer, metered night
  // use and the step detector's view from the monitor.
  const water::NightResult& night() const { return published_; }
  const water::UtcOffsetSchedule& offsets() const { return offsets_; }
  double pressure_head_m() const { return head_m_; }
  const DistrictSpec& spec() const { return *spec_; }
  const Aligner& aligner() const { return aligner_; }
  uint64_t invalid_ticks() const { return invalid_ticks_; }
  uint64_t customer_readings_unused() const { return customer_unused_; }
  double tick_s() const { return tick_s_; }

 private:
  bool PublishMatching(const water::DistrictNight* n);
  const Site* site_ = nullptr;
  const DistrictSpec* spec_ = nullptr;
  int district_ = 0;
  double tick_s_ = 60.0;
  water::UtcOffsetSchedule offsets_;
  Aligner aligner_;
  SequenceCounter seq_;
  AlarmEventRing<64> events_;
  water::DistrictMonitor monitor_;
  water::NightFlowAnalyzer night_;
  double last_t_ = 0.0;
  bool have_last_ = false;
  double head_m_ = 0.0;
  uint64_t invalid_ticks_ = 0, customer_unused_ = 0;
  // Register readings (cumulative kind).
  bool have_register_ = false;
  double register_t_ = 0.0, register_v_ = 0.0;
  // Smoothed reservoir levels.
  std::vector<double> level_f_;
  std::vector<uint8_t> level_ok_;
  // Analyzer nights waiting for the monitor's view of the same night.
  std::vector<water::NightResult> waiting_;
  water::NightResult published_;
};

struct DistrictRunOptions {
  std::function<void(const AlarmEvent&)> on_event;
  std::function<void(const water::BurstReport&)> on_burst;     // each burst reported
  std::function<void(const water::DistrictBlock&)> on_block;   // each decided block
  std::function<void(const water::NightResult&)> on_night;
  std::function<void(double t)> on_tick;
  // start_s / until_s and the reorder window of the data-time driver
  // (replay_driver.h; its on_event and on_tick are not used here).
  ReplayOptions timing;
};

struct DistrictRunResult {
  uint64_t readings_fed = 0, ticks = 0, events = 0, nights = 0;
  double first_tick_s = kNaN, last_tick_s = kNaN;
};

DistrictRunResult RunDistrict(DistrictRunner* runner, ReadingSource* source, const DistrictRunOptions& options);

// One alarm event of a district as a single-line JSON object (config/WATER.md):
// time, district, type "burst", state, from, cause, priority, seq,
// burst_m3_h (estimated burst size), change_point (ISO time), statistic,
// threshold, user; with the burst's report (for the raising event) also
// path, burst_ci95_m3_h and change_ci_h.
std::string DistrictEventJson(const Site& site, const AlarmEvent& event, const water::BurstReport* burst = nullptr);

// Interpolated reservoir volume (m3) at `level_m`; levels beyond the table
// extrapolate the end segments' slope. NaN for an empty table.
double ReservoirVolume_m3(const ReservoirSpec& r, double level_m);

}  // namespace holdfast
