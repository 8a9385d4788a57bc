// See district_driver.h.
#include "district_driver.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <string>

#include "event_json.h"
#include "readings_csv.h"
#include "time_zone.h"

namespace holdfast {

constexpr double kDistrictFlatline_s = 3.0 * 86400.0;

water::NightFlowOptions NightOptionsFor(const DistrictSpec& d, double tick_s, const water::UtcOffsetSchedule& tz) {
  water::NightFlowOptions o;
  o.offsets = tz;
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

water::DistrictMonitorOptions MonitorOptionsFor(const DistrictSpec& d, const water::UtcOffsetSchedule& tz) {
  water::DistrictMonitorOptions o;
  o.offsets = tz;
  o.quiet_start_h = d.quiet_start_h;
  o.quiet_end_h = d.quiet_end_h;
  o.night_start_h = d.night_start_h;
  o.night_end_h = d.night_end_h;
  o.profile_days = std::clamp(d.profile_learning_days, 3, 28);
  o.night_alarm_sigmas = d.night_alarm_sigmas;
  o.night_confirm_sigmas = std::min(o.night_confirm_sigmas, d.night_alarm_sigmas);
  o.suspect_sigmas = std::min(o.suspect_sigmas, o.night_confirm_sigmas);
  o.min_step_m3_h = d.min_step_m3_h;
  o.day_step_m3_h = d.day_step_m3_h;
  o.false_alarm_interval_days = d.false_alarm_interval_s / 86400.0;
  if (d.customer_meter_point >= 0 && d.customer_meter_reading != DistrictSpec::MeterReading::kSpot) {
    // Blocks as long as the meter interval (hourly totals: hourly blocks).
    const double iv = d.customer_meter_interval_s;
    if (iv > 3600.0) o.block_s = 3600.0;
    else if (iv >= 300.0 && std::fmod(86400.0, iv) == 0.0) o.block_s = std::max(o.block_s, iv);
    o.customer_wait_s = std::max(o.customer_wait_s, 2.0 * iv);
  }
  o.alarm.latching = false;
  o.alarm.priority = AlarmPriority::kHigh;
  return o;
}

bool DistrictOffsets(const DistrictSpec& d, water::UtcOffsetSchedule* out, std::string* why) {
  if (d.time_zone.empty()) {
    *out = water::UtcOffsetSchedule::Fixed(d.utc_offset_s);
    return true;
  }
  // 2000-01-01 .. 2100-01-01.
  if (!BuildOffsetSchedule(d.time_zone, 946684800.0, 4102444800.0, out, why)) {
    if (why) *why = "district " + d.id + ": " + *why;
    return false;
  }
  return true;
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
  if (!DistrictOffsets(*spec_, &offsets_, why)) return false;
  // Flows of a district may sit at exactly zero for hours (a reservoir inlet
  // valve closed overnight): the flatline check only catches transmitters
  // frozen for days.
  DataQualityOptions dq;
  dq.flatline_s = kDistrictFlatline_s;
  // Water loggers step legitimately (a pump, a valve, a reservoir filling):
  // no one-sample confirmation of jumps.
  dq.spike_check = false;
  aligner_.Reset(site, dq);
  events_.Clear();
  water::DistrictProperties props{spec_->households, spec_->non_households, spec_->population};
  if (!night_.Init(NightOptionsFor(*spec_, tick_s, offsets_), props, why)) return false;
  if (!monitor_.Init(district, MonitorOptionsFor(*spec_, offsets_), spec_->customer_meter_point >= 0, &seq_, &events_,
                     why))
    return false;
  have_last_ = false;
  invalid_ticks_ = customer_unused_ = 0;
  have_register_ = false;
  level_f_.assign(spec_->reservoirs.size(), 0.0);
  level_ok_.assign(spec_->reservoirs.size(), 0);
  waiting_.clear();
  waiting_.reserve(8);
  published_ = water::NightResult{};
  return true;
}

void DistrictRunner::Feed(const Reading& r) {
  const DistrictSpec& d = *spec_;
  if (r.point != d.customer_meter_point || d.customer_meter_reading == DistrictSpec::MeterReading::kSpot) {
    aligner_.Feed(r);
    return;
  }
  if (r.quality == Quality::kBad || !std::isfinite(r.value) || !std::isfinite(r.time_s)) {
    ++customer_unused_;
    return;
  }
  const double cov = d.customer_meter_coverage;
  const double iv = d.customer_meter_interval_s;
  switch (d.customer_meter_reading) {
    case DistrictSpec::MeterReading::kIntervalTotal:
      monitor_.AddCustomerVolume(r.time_s - iv, r.time_s, r.value * d.customer_meter_volume_m3 / cov);
      break;
    case DistrictSpec::MeterReading::kIntervalMean:
      monitor_.AddCustomerVolume(r.time_s - iv, r.time_s, site_->points[r.point].unit.ToSi(r.value) * iv / cov);
      break;
    case DistrictSpec::MeterReading::kCumulative:
      // Register: the difference of two readings over their interval. A
      // register running backwards (replaced meter) re-baselines.
      if (have_register_ && r.time_s > register_t_ && r.value >= register_v_) {
        monitor_.AddCustomerVolume(register_t_, r.time_s, (r.value - register_v_) * d.customer_meter_volume_m3 / cov);
      } else if (have_register_) {
        ++customer_unused_;
      }
      have_register_ = true;
      register_t_ = r.time_s;
      register_v_ = r.value;
      break;
    case DistrictSpec::MeterReading::kSpot:
      break;
  }
}

bool DistrictRunner::PublishMatching(const water::DistrictNight* n) {
  // Pairs the analyzer's night with the monitor's view of the same local
  // day; an analyzer night left alone for more than a day goes out as it is.
  for (size_t i = 0; i < waiting_.size(); ++i) {
    water::NightResult& r = waiting_[i];
    if (n != nullptr && r.local_day == n->local_day) {
      if (n->usable) {
        r.step_baseline_m3_h = n->baseline_m3_h;
        r.step_m3_h = n->step_m3_h;
        r.step_sigma_m3_h = n->sigma_m3_h;
      }
      r.burst_alarm = n->alarm;
      if (std::isfinite(n->window_customer_m3_h) && std::isfinite(n->window_zone_m3_h)) {
        // Night use calibrated from the customer meters (scaled by
        // coverage): leakage is the balance over the night window.
        r.window_zone_flow_m3_h = n->window_zone_m3_h;
        r.metered_night_use_m3_h = n->window_customer_m3_h;
        r.legitimate_night_use_m3_h = n->window_customer_m3_h;
        r.night_leakage_m3_h = n->window_zone_m3_h - n->window_customer_m3_h;
        r.daily_leakage_m3 = std::isfinite(r.hdf_h) ? r.night_leakage_m3_h * r.hdf_h : kNaN;
      }
      published_ = r;
      waiting_.erase(waiting_.begin() + static_cast<long>(i));
      return true;
    }
  }
  return false;
}

bool DistrictRunner::Advance(double t) {
  aligner_.SetTickTime(t);
  const DistrictSpec& d = *spec_;
  const double dt = have_last_ ? t - last_t_ : tick_s_;
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
  for (size_t i = 0; i < d.reservoirs.size(); ++i) {
    const ReservoirSpec& r = d.reservoirs[i];
    const bool ok = aligner_.Usable(r.level_point, t);
    valid = valid && ok;
    double level = aligner_.value(r.level_point);
    if (d.level_smoothing_s > 0.0 && ok) {
      // Optional first-order smoothing of the level (restarts after a gap).
      if (!level_ok_[i]) level_f_[i] = level;
      else level_f_[i] += (1.0 - std::exp(-dt / d.level_smoothing_s)) * (level - level_f_[i]);
      level = level_f_[i];
    }
    level_ok_[i] = ok ? 1 : 0;
    storage += ReservoirVolume_m3(r, level);
  }
  const bool spot_customer =
      d.customer_meter_point >= 0 && d.customer_meter_reading == DistrictSpec::MeterReading::kSpot;
  bool cust_ok = false;
  if (spot_customer) {
    cust_ok = aligner_.Usable(d.customer_meter_point, t);
    cust = aligner_.value(d.customer_meter_point) / d.customer_meter_coverage;
  }
  const bool p_ok = aligner_.Usable(d.pressure_point, t);
  head_m_ = (aligner_.value(d.pressure_point) - site_->atmospheric_pressure_pa) / (1000.0 * kStandardGravity_m_s2) +
            d.pressure_head_offset_m;
  last_t_ = t;
  have_last_ = true;
  if (!valid) ++invalid_ticks_;
  // A spot customer rate is held over the tick before it.
  if (spot_customer && cust_ok && dt > 0.0) monitor_.AddCustomerVolume(t - dt, t, cust * dt);
  monitor_.Step(t, dt, valid, in, out, storage);
  const water::DistrictTick& k = monitor_.tick();
  if (night_.Step(t, valid && p_ok, k.zone_flow_m3_s, head_m_)) {
    if (waiting_.size() >= 8) waiting_.erase(waiting_.begin());
    waiting_.push_back(night_.result());
  }
  bool published = false;
  if (monitor_.night_done()) published = PublishMatching(&monitor_.night());
  if (!published && !waiting_.empty() && t > waiting_.front().mnf_time_s + 1.5 * 86400.0) {
    published_ = waiting_.front();
    waiting_.erase(waiting_.begin());
    published = true;
  }
  return published;
}

bool DistrictRunner::Finish() {
  if (night_.Finish()) waiting_.push_back(night_.result());
  if (waiting_.empty()) return false;
  published_ = waiting_.front();
  waiting_.erase(waiting_.begin());
  return true;
}

DistrictRunResult RunDistrict(DistrictRunner* runner, ReadingSource* source, const DistrictRunOptions& options) {
  DistrictRunResult res;
  if (runner == nullptr || source == nullptr) return res;
  // The data-time driver of replay_driver.h: the same tick rule, window and
  // start/until as every other command.
  auto tick = [&](double t) {
    if (runner->Advance(t)) {
      ++res.nights;
      if (options.on_night) options.on_night(runner->night());
    }
    const water::DistrictMonitor& m = runner->monitor();
    if (options.on_block)
      for (int i = 0; i < m.new_blocks(); ++i) options.on_block(m.block(i));
    if (m.burst_raised() && options.on_burst) options.on_burst(m.last_burst());
    AlarmEvent e;
    while (runner->PopEvent(&e)) {
      ++res.events;
      if (options.on_event) options.on_event(e);
    }
    if (options.on_tick) options.on_tick(t);
    return true;
  };
  const ReplayResult drive =
      DriveTicks(source, runner->tick_s(), static_cast<int>(runner->aligner().point_count()), options.timing,
                 [runner](const Reading& r) { runner->Feed(r); }, tick);
  res.readings_fed = drive.readings_fed;
  res.ticks = drive.ticks;
  res.first_tick_s = drive.first_tick_s;
  res.last_tick_s = drive.last_tick_s;
  if (drive.ticks > 0) {
    while (runner->Finish()) {
      ++res.nights;
      if (options.on_night) options.on_night(runner->night());
    }
  }
  return res;
}

std::string DistrictEventJson(const Site& site, const AlarmEvent& e, const water::BurstReport* burst) {
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
  if (burst != nullptr && std::isfinite(burst->change_s)) {
    s += "\"" + FormatIsoUtc(burst->change_s, 0) + "\"";
  } else if (std::isfinite(e.evidence.window_s)) {
    s += "\"" + FormatIsoUtc(e.time_s - e.evidence.window_s, 3) + "\"";
  } else {
    s += "null";
  }
  s += ",\"statistic\":";
  num(e.evidence.statistic, 4);
  s += ",\"threshold\":";
  num(e.evidence.threshold, 4);
  if (burst != nullptr) {
    s += ",\"path\":";
    AppendJsonString(water::BurstPathName(burst->path), &s);
    s += ",\"burst_ci95_m3_h\":";
    num(burst->size_ci95_m3_h, 3);
    s += ",\"change_ci_h\":";
    num(burst->change_ci_s / 3600.0, 2);
  }
  s += ",\"user\":";
  AppendJsonString(e.user, &s);
  s += "}";
  return s;
}

}  // namespace holdfast
