// See district_driver.h.
#include "district_driver.h"

#include <cmath>
#include <cstdio>
#include <string>

#include "event_json.h"
#include "readings_csv.h"

namespace holdfast {

constexpr double kDistrictFlatline_s = 3.0 * 86400.0;

water::NightFlowOptions NightOptionsFor(const DistrictSpec& d, double tick_s) {
  water::NightFlowOptions o;
  o.utc_offset_s = d.utc_offset_s;
  o.window_start_h = d.night_start_h;
  o.window_end_h = d.night_end_h;
  o.averaging_s = d.night_averaging_s;
  o.step_s = tick_s;
  o.household_l_per_property_h = d.household_night_use_l_h;
  o.person_l_per_h = d.person_night_use_l_h;
  o.per_person = d.night_use_per_person;
  o.non_household_l_per_property_h = d.non_household_night_use_l_h;
  o.exceptional_night_use_m3_h = d.exceptional_night_use_m3_h;
  o.n1 = d.n1;
  return o;
}

water::DistrictMonitorOptions MonitorOptionsFor(const DistrictSpec& d) {
  water::DistrictMonitorOptions o;
  o.false_alarm_interval_s = d.false_alarm_interval_s;
  o.profile_learning_days = d.profile_learning_days;
  o.alarm.latching = false;
  o.utc_offset_s = d.utc_offset_s;
  o.alarm.priority = AlarmPriority::kHigh;
  return o;
}

double ReservoirVolume_m3(const ReservoirSpec& r, double level_m) {
  const auto& s = r.strapping;
  if (s.empty()) return kNaN;
  if (s.size() == 1) return s[0].volume_m3;
  size_t i = 1;
  while (i + 1 < s.size() && level_m > s[i].level_m) ++i;
  const StrapPoint& a = s[i - 1];
  const StrapPoint& b = s[i];
  return a.volume_m3 + (level_m - a.level_m) * (b.volume_m3 - a.volume_m3) / (b.level_m - a.level_m);
}

bool DistrictRunner::Init(const Site& site, int district, double tick_s, std::string* why) {
  if (district < 0 || district >= static_cast<int>(site.districts.size())) {
    if (why) *why = "no district with index " + std::to_string(district);
    return false;
  }
  if (!(tick_s > 0.0) || !std::isfinite(tick_s)) {
    if (why) *why = "tick must be positive";
    return false;
  }
  site_ = &site;
  spec_ = &site.districts[district];
  district_ = district;
  tick_s_ = tick_s;
  // Flows of a district may sit at exactly zero for hours (a reservoir inlet
  // valve closed overnight): the flatline check only catches transmitters
  // frozen for days.
  DataQualityOptions dq;
  dq.flatline_s = kDistrictFlatline_s;
  aligner_.Reset(site, dq);
  events_.Clear();
  water::DistrictProperties props{spec_->households, spec_->non_households, spec_->population};
  if (!night_.Init(NightOptionsFor(*spec_, tick_s), props, why)) return false;
  if (!monitor_.Init(district, MonitorOptionsFor(*spec_), spec_->customer_meter_point >= 0, &seq_, &events_, why))
    return false;
  have_last_ = false;
  invalid_ticks_ = 0;
  return true;
}

bool DistrictRunner::Advance(double t) {
  aligner_.SetTickTime(t);
  const DistrictSpec& d = *spec_;
  bool valid = true;
  double in = 0.0, out = 0.0, storage = 0.0, cust = 0.0;
  for (int p : d.inlets) {
    valid = valid && aligner_.Usable(p, t);
    in += aligner_.value(p);
  }
  for (int p : d.outlets) {
    valid = valid && aligner_.Usable(p, t);
    out += aligner_.value(p);
  }
  for (const ReservoirSpec& r : d.reservoirs) {
    valid = valid && aligner_.Usable(r.level_point, t);
    storage += ReservoirVolume_m3(r, aligner_.value(r.level_point));
  }
  if (d.customer_meter_point >= 0) {
    valid = valid && aligner_.Usable(d.customer_meter_point, t);
    cust = aligner_.value(d.customer_meter_point) / d.customer_meter_coverage;
  }
  const bool p_ok = aligner_.Usable(d.pressure_point, t);
  head_m_ = (aligner_.value(d.pressure_point) - site_->atmospheric_pressure_pa) / (1000.0 * kStandardGravity_m_s2) +
            d.pressure_head_offset_m;
  const double dt = have_last_ ? t - last_t_ : tick_s_;
  last_t_ = t;
  have_last_ = true;
  if (!valid) ++invalid_ticks_;
  monitor_.Step(t, dt, valid, in, out, storage, cust);
  const water::DistrictTick& k = monitor_.tick();
  return night_.Step(t, valid && p_ok, k.zone_flow_m3_s, head_m_);
}

DistrictRunResult RunDistrict(DistrictRunner* runner, ReadingSource* source, const DistrictRunOptions& options) {
  DistrictRunResult res;
  if (runner == nullptr || source == nullptr) return res;
  const double tick_s = runner->tick_s();
  double first_tick = 0.0, next_tick = 0.0, last_time = 0.0;
  uint64_t k = 0;
  bool started = false;
  // The tick rule of replay_driver.h: a reading belongs to the first tick at
  // or after its time.
  auto tick = [&](double t) {
    if (runner->Advance(t)) {
      ++res.nights;
      if (options.on_night) options.on_night(runner->night().result());
    }
    AlarmEvent e;
    while (runner->PopEvent(&e)) {
      ++res.events;
      if (options.on_event) options.on_event(e);
    }
    if (res.ticks == 0) res.first_tick_s = t;
    res.last_tick_s = t;
    ++res.ticks;
    ++k;
    next_tick = first_tick + static_cast<double>(k) * tick_s;
    if (options.on_tick) options.on_tick(t);
  };
  Reading r;
  while (source->Next(&r)) {
    if (!started) {
      first_tick = std::ceil(r.time_s / tick_s) * tick_s;
      next_tick = first_tick;
      last_time = r.time_s;
      started = true;
    }
    while (r.time_s > next_tick) tick(next_tick);
    runner->Feed(r);
    ++res.readings_fed;
    if (r.time_s > last_time) last_time = r.time_s;
  }
  if (started) {
    while (next_tick <= last_time + 1e-9) tick(next_tick);
    if (runner->Finish()) {
      ++res.nights;
      if (options.on_night) options.on_night(runner->night().result());
    }
  }
  return res;
}

std::string DistrictEventJson(const Site& site, const AlarmEvent& e) {
  std::string s = "{\"time\":\"" + FormatIsoUtc(e.time_s, 3) + "\",\"district\":";
  const std::string id =
      e.segment >= 0 && e.segment < static_cast<int>(site.districts.size()) ? site.districts[e.segment].id : "?";
  AppendJsonString(id, &s);
  s += ",\"type\":\"burst\",\"state\":\"";
  s += AlarmStateName(e.to);
  s += "\",\"from\":\"";
  s += AlarmStateName(e.from);
  s += "\",\"cause\":\"";
  s += AlarmCauseName(e.cause);
  s += "\",\"priority\":\"";
  s += AlarmPriorityName(e.priority);
  char buf[160];
  std::snprintf(buf, sizeof buf, "\",\"seq\":%llu,\"burst_m3_h\":", static_cast<unsigned long long>(e.seq));
  s += buf;
  auto num = [&](double v, int dec) {
    if (!std::isfinite(v)) { s += "null"; return; }
    std::snprintf(buf, sizeof buf, "%.*f", dec, v);
    s += buf;
  };
  num(e.evidence.leak_rate_kg_s / 1000.0 * 3600.0, 3);
  s += ",\"change_point\":";
  if (std::isfinite(e.evidence.window_s)) {
    s += "\"" + FormatIsoUtc(e.time_s - e.evidence.window_s, 3) + "\"";
  } else {
    s += "null";
  }
  s += ",\"statistic\":";
  num(e.evidence.statistic, 4);
  s += ",\"threshold\":";
  num(e.evidence.threshold, 4);
  s += ",\"user\":";
  AppendJsonString(e.user, &s);
  s += "}";
  return s;
}

}  // namespace holdfast
