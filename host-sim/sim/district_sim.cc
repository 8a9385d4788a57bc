// District scenario generator. See district_sim.h and config/WATER.md.
#include "district_sim.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <map>
#include <string>

#include <nlohmann/json.hpp>

#include "district_driver.h"
#include "readings_csv.h"
#include "water_files.h"

namespace holdfast::sim {
namespace {

using nlohmann::json;
constexpr const char* kFormat = "holdfast-district-scenario/1";
constexpr double kRhoG = 1000.0 * kStandardGravity_m_s2;  // Pa per metre of water head

double InterpolateLevel(const ReservoirSpec& r, double volume_m3) {
  const auto& s = r.strapping;
  size_t i = 1;
  while (i + 1 < s.size() && volume_m3 > s[i].volume_m3) ++i;
  const StrapPoint& a = s[i - 1];
  const StrapPoint& b = s[i];
  return a.level_m + (volume_m3 - a.volume_m3) * (b.level_m - a.level_m) / (b.volume_m3 - a.volume_m3);
}

double InterpolateVolume(const ReservoirSpec& r, double level_m) {
  const auto& s = r.strapping;
  size_t i = 1;
  while (i + 1 < s.size() && level_m > s[i].level_m) ++i;
  const StrapPoint& a = s[i - 1];
  const StrapPoint& b = s[i];
  return a.volume_m3 + (level_m - a.level_m) * (b.volume_m3 - a.volume_m3) / (b.level_m - a.level_m);
}

std::string Num(double v, int decimals) {
  char buf[48];
  std::snprintf(buf, sizeof buf, "%.*f", decimals, v);
  return buf;
}

}  // namespace

bool CompileDistrictScenario(const json& doc, const std::string& file, const Site& site, DistrictScenario* out,
                             std::vector<ConfigProblem>* problems) {
  JsonChecker c(file, problems);
  if (!doc.is_object()) {
    c.Add("", std::string("the document must be a JSON object with \"format\": \"") + kFormat + "\"");
    return false;
  }
  c.Keys(doc, "",
         {"format", "name", "district", "start", "duration_days", "step_s", "seed", "demand", "hydraulics",
          "reservoir", "outlet_mean_m3_h", "bursts", "instruments"});
  DistrictScenario sc;
  std::string format;
  if (c.String(doc, "format", "", true, &format) && format != kFormat)
    c.Add("/format", "unsupported format \"" + format + "\"; this build reads \"" + kFormat + "\"");
  c.String(doc, "name", "", false, &sc.name);
  std::string id;
  if (c.String(doc, "district", "", true, &id)) {
    for (size_t i = 0; i < site.districts.size(); ++i)
      if (site.districts[i].id == id) sc.district = static_cast<int>(i);
    if (sc.district < 0) {
      std::string known;
      for (const DistrictSpec& d : site.districts) known += (known.empty() ? "" : ", ") + d.id;
      c.Add("/district", "district \"" + id + "\" is not defined in the site's /districts" +
                             (known.empty() ? std::string(" (the site has none)") : "; defined: " + known));
    }
  }
  std::string start;
  if (c.String(doc, "start", "", true, &start) && !ParseTime(start, &sc.start_epoch_s))
    c.Add("/start", "must be an ISO 8601 time with a zone, e.g. \"2026-04-06T00:00:00Z\" (got \"" + start + "\")");
  double days = 28.0;
  if (c.Number(doc, "duration_days", "", false, &days, 1.0 / 24.0, 400.0, "in [1/24, 400] days"))
    sc.duration_s = days * 86400.0;
  c.Number(doc, "step_s", "", false, &sc.step_s, 1.0, 900.0, "in [1, 900] s");
  double seed = 1.0;
  if (c.Number(doc, "seed", "", false, &seed, 0.0, 9e15, "a whole number >= 0")) sc.seed = static_cast<uint64_t>(seed);
  if (const json* d = c.Object(doc, "demand", "", false)) {
    const std::string p = "/demand";
    c.Keys(*d, p,
           {"household_daily_m3", "non_household_daily_m3", "household_night_l_h", "non_household_night_l_h",
            "day_to_day_pct", "noise_pct", "noise_correlation_s", "day_pattern", "night_to_night_pct",
            "weekend_night_pct", "weekend_day_pct", "weekend_shift_h", "unmetered_bias_pct"});
    c.Number(*d, "night_to_night_pct", p, false, &sc.night_to_night_pct, 0.0, 50.0, "in [0, 50] %");
    c.Number(*d, "weekend_night_pct", p, false, &sc.weekend_night_pct, -50.0, 100.0, "in [-50, 100] %");
    c.Number(*d, "weekend_day_pct", p, false, &sc.weekend_day_pct, -50.0, 100.0, "in [-50, 100] %");
    c.Number(*d, "weekend_shift_h", p, false, &sc.weekend_shift_h, 0.0, 6.0, "in [0, 6] h");
    c.Number(*d, "unmetered_bias_pct", p, false, &sc.unmetered_bias_pct, -50.0, 50.0, "in [-50, 50] %");
    c.Number(*d, "household_daily_m3", p, false, &sc.household_daily_m3, 0.0, 100.0, "in [0, 100] m3");
    c.Number(*d, "non_household_daily_m3", p, false, &sc.non_household_daily_m3, 0.0, 1e4, "in [0, 1e4] m3");
    c.Number(*d, "household_night_l_h", p, false, &sc.household_night_l_h, 0.0, 100.0, "in [0, 100] L/h");
    c.Number(*d, "non_household_night_l_h", p, false, &sc.non_household_night_l_h, 0.0, 1e4, "in [0, 1e4] L/h");
    c.Number(*d, "day_to_day_pct", p, false, &sc.day_to_day_pct, 0.0, 50.0, "in [0, 50] %");
    c.Number(*d, "noise_pct", p, false, &sc.noise_pct, 0.0, 50.0, "in [0, 50] %");
    c.Number(*d, "noise_correlation_s", p, false, &sc.noise_correlation_s, 1.0, 86400.0, "in [1, 86400] s");
    if (const json* pat = c.Array(*d, "day_pattern", p, false)) {
      if (pat->size() != 24) {
        c.Add(p + "/day_pattern", "must list 24 hourly factors (got " + std::to_string(pat->size()) + ")");
      } else {
        double sum = 0.0;
        for (size_t i = 0; i < 24; ++i) {
          const json& v = (*pat)[i];
          if (!v.is_number() || !(v.get<double>() >= 0.0)) {
            c.Add(p + "/day_pattern/" + std::to_string(i), "must be a number >= 0");
          } else {
            sc.day_pattern[i] = v.get<double>();
            sum += sc.day_pattern[i];
          }
        }
        if (!(sum > 0.0)) c.Add(p + "/day_pattern", "needs at least one positive factor");
      }
    }
  }
  if (const json* h = c.Object(doc, "hydraulics", "", false)) {
    const std::string p = "/hydraulics";
    c.Keys(*h, p, {"base_head_m", "headloss_m_at_100_m3_h", "background_leakage_m3_h_at_50m", "n1", "burst_n1"});
    c.Number(*h, "base_head_m", p, false, &sc.base_head_m, 1.0, 300.0, "in [1, 300] m");
    c.Number(*h, "headloss_m_at_100_m3_h", p, false, &sc.headloss_m_at_100_m3_h, 0.0, 100.0, "in [0, 100] m");
    c.Number(*h, "background_leakage_m3_h_at_50m", p, false, &sc.background_leakage_m3_h_at_50m, 0.0, 1e4,
             "in [0, 1e4] m3/h");
    c.Number(*h, "n1", p, false, &sc.n1, 0.0, 3.0, "in [0, 3]");
    c.Number(*h, "burst_n1", p, false, &sc.burst_n1, 0.0, 3.0, "in [0, 3]");
  }
  if (const json* r = c.Object(doc, "reservoir", "", false)) {
    const std::string p = "/reservoir";
    c.Keys(*r, p, {"initial_level_m", "fill_on_level_m", "fill_off_level_m", "fill_rate_m3_h"});
    c.Number(*r, "initial_level_m", p, false, &sc.initial_level_m, 0.0, 100.0, "in [0, 100] m");
    c.Number(*r, "fill_on_level_m", p, false, &sc.fill_on_level_m, 0.0, 100.0, "in [0, 100] m");
    c.Number(*r, "fill_off_level_m", p, false, &sc.fill_off_level_m, 0.0, 100.0, "in [0, 100] m");
    c.Number(*r, "fill_rate_m3_h", p, false, &sc.fill_rate_m3_h, 0.0, 1e5, "in [0, 1e5] m3/h");
    if (!(sc.fill_off_level_m > sc.fill_on_level_m))
      c.Add(p + "/fill_off_level_m", "must be above fill_on_level_m");
  }
  c.Number(doc, "outlet_mean_m3_h", "", false, &sc.outlet_mean_m3_h, 0.0, 1e5, "in [0, 1e5] m3/h");
  if (const json* b = c.Array(doc, "bursts", "", false)) {
    for (size_t i = 0; i < b->size(); ++i) {
      const std::string p = "/bursts/" + std::to_string(i);
      const json& e = (*b)[i];
      if (!e.is_object()) {
        c.Add(p, "must be an object {\"start_day\", \"rate_m3_h_at_50m\"[, \"end_day\"]}");
        continue;
      }
      c.Keys(e, p, {"start_day", "rate_m3_h_at_50m", "end_day"});
      DistrictBurst burst;
      double sd = 0.0, ed = -1.0;
      const bool a = c.Number(e, "start_day", p, true, &sd, 0.0, 400.0, "in [0, 400] days since the start");
      const bool r = c.Number(e, "rate_m3_h_at_50m", p, true, &burst.rate_m3_h_at_50m, 0.0, 1e4, "in [0, 1e4] m3/h");
      if (c.Number(e, "end_day", p, false, &ed, 0.0, 400.0, "in [0, 400] days since the start") && a && !(ed > sd))
        c.Add(p + "/end_day", "must be after start_day");
      burst.start_s = sd * 86400.0;
      burst.end_s = ed >= 0.0 ? ed * 86400.0 : -1.0;
      if (a && r) sc.bursts.push_back(burst);
    }
  }
  // Instruments: every point of the district, from its declared accuracy.
  if (sc.district >= 0) {
    const DistrictSpec& d = site.districts[sc.district];
    std::vector<int> pts(d.inlets);
    pts.insert(pts.end(), d.outlets.begin(), d.outlets.end());
    for (const ReservoirSpec& r : d.reservoirs) pts.push_back(r.level_point);
    pts.push_back(d.pressure_point);
    // Interval and register kinds of customer meter are written by the
    // generator itself (exact totals); a spot rate goes through an instrument.
    if (d.customer_meter_point >= 0 && d.customer_meter_reading == DistrictSpec::MeterReading::kSpot)
      pts.push_back(d.customer_meter_point);
    if (d.reservoirs.size() > 1) c.Add("/district", "the generator models at most one reservoir per district");
    for (int pt : pts) {
      const PointSpec& ps = site.points[pt];
      InstrumentSpec s;
      s.sample_period_s = sc.step_s;
      s.decimals = ps.kind == PointKind::kFlow ? 3 : 3;
      if (ps.kind == PointKind::kFlow) {
        s.noise_fraction = ps.random_sigma;
        s.bias_draw_sigma_fraction = ps.systematic_sigma;
      } else {
        s.noise = ps.random_sigma / ps.unit.factor;
        s.bias_draw_sigma = ps.systematic_sigma / ps.unit.factor;
      }
      sc.points.push_back(pt);
      sc.instruments.push_back(s);
    }
    if (const json* ins = c.Object(doc, "instruments", "", false)) {
      for (auto it = ins->begin(); it != ins->end(); ++it) {
        const std::string p = "/instruments/" + it.key();
        const auto f = std::find_if(sc.points.begin(), sc.points.end(),
                                    [&](int pt) { return site.points[pt].id == it.key(); });
        if (f == sc.points.end()) {
          c.Add(p, "point \"" + it.key() + "\" is not a point of district \"" + d.id + "\"");
          continue;
        }
        if (!it->is_object()) {
          c.Add(p, "must be an object");
          continue;
        }
        InstrumentSpec& s = sc.instruments[static_cast<size_t>(f - sc.points.begin())];
        c.Keys(*it, p, {"noise_pct", "bias_pct", "noise", "bias", "quantum", "dropouts"});
        double v = 0.0;
        if (c.Number(*it, "noise_pct", p, false, &v, 0.0, 50.0, "in [0, 50] %")) s.noise_fraction = v / 100.0;
        if (c.Number(*it, "bias_pct", p, false, &v, -50.0, 50.0, "in [-50, 50] %")) {
          s.bias_fraction = v / 100.0;
          s.bias_draw_sigma_fraction = 0.0;
        }
        if (c.Number(*it, "noise", p, false, &v, 0.0, 1e6, ">= 0 (point unit)")) s.noise = v;
        if (c.Number(*it, "bias", p, false, &v, -1e6, 1e6, "finite (point unit)")) {
          s.bias = v;
          s.bias_draw_sigma = 0.0;
        }
        if (c.Number(*it, "quantum", p, false, &v, 0.0, 1e6, ">= 0 (point unit)")) s.quantum = v;
        if (const json* dr = c.Array(*it, "dropouts", p, false)) {
          for (size_t i = 0; i < dr->size(); ++i) {
            const json& w = (*dr)[i];
            if (!w.is_array() || w.size() != 2 || !w[0].is_number() || !w[1].is_number() ||
                !(w[1].get<double>() > w[0].get<double>())) {
              c.Add(p + "/dropouts/" + std::to_string(i), "must be [from_day, to_day] with to after from");
              continue;
            }
            s.dropouts.push_back({w[0].get<double>() * 86400.0, w[1].get<double>() * 86400.0});
          }
        }
      }
    }
  }
  if (!c.ok()) return false;
  *out = std::move(sc);
  return true;
}

bool LoadDistrictScenarioFile(const std::string& path, const Site& site, DistrictScenario* sc,
                              std::vector<ConfigProblem>* problems) {
  json doc;
  if (!ReadJsonFile(path, &doc, problems)) return false;
  return CompileDistrictScenario(doc, path, site, sc, problems);
}

bool SimulateDistrict(const Site& site, const DistrictScenario& sc, DistrictSimResult* out, std::string* why) {
  if (sc.district < 0 || sc.district >= static_cast<int>(site.districts.size())) {
    *why = "no district";
    return false;
  }
  const DistrictSpec& d = site.districts[sc.district];
  const bool has_res = !d.reservoirs.empty();
  water::UtcOffsetSchedule tz;
  if (!DistrictOffsets(d, &tz, why)) return false;
  std::vector<Instrument> instruments(sc.points.size());
  for (size_t i = 0; i < sc.points.size(); ++i) {
    std::string bad;
    if (!sc.instruments[i].IsValid(&bad)) {
      *why = site.points[sc.points[i]].id + ": " + bad;
      return false;
    }
    instruments[i].Init(sc.points[i], site.points[sc.points[i]].id, sc.instruments[i], sc.seed, sc.duration_s);
  }
  Rng rng(StreamSeed(sc.seed, "district/demand"));
  Rng rng_u(StreamSeed(sc.seed, "district/unmetered"));
  const double dt = sc.step_s;
  const double night_use_m3_h = (d.households * sc.household_night_l_h + d.non_households * sc.non_household_night_l_h) / 1000.0;
  const double daily_m3 = d.households * sc.household_daily_m3 + d.non_households * sc.non_household_daily_m3;
  double pat_mean = 0.0;
  for (double p : sc.day_pattern) pat_mean += p / 24.0;
  const double day_comp_m3_h = std::max(0.0, daily_m3 / 24.0 - night_use_m3_h) / pat_mean;
  const double rho = std::exp(-dt / sc.noise_correlation_s);
  const double hl = sc.headloss_m_at_100_m3_h / (100.0 * 100.0);
  // Customer meters: a metered share f of the properties and an unmetered
  // rest, each with its own demand noise (independent properties: the
  // relative noise of a group of share f is noise / sqrt(f)), sharing the
  // daily and nightly levels.
  const bool metered = d.customer_meter_point >= 0;
  const double f = metered ? d.customer_meter_coverage : 1.0;
  const double sd_m = sc.noise_pct / 100.0 / std::sqrt(f);
  const double sd_u = f < 1.0 ? sc.noise_pct / 100.0 / std::sqrt(1.0 - f) : 0.0;
  const double bias_u = 1.0 + sc.unmetered_bias_pct / 100.0;
  const DistrictSpec::MeterReading kind = d.customer_meter_reading;
  const double iv = d.customer_meter_interval_s;
  const PointSpec* cust_ps = metered ? &site.points[d.customer_meter_point] : nullptr;

  DistrictSimResult r;
  double level = has_res ? sc.initial_level_m : 0.0;
  double volume = has_res ? InterpolateVolume(d.reservoirs[0], level) : 0.0;
  r.storage_start_m3 = volume;
  bool filling = level < sc.fill_on_level_m;
  double noise_m = 0.0, noise_u = 0.0, day_level = 1.0, night_level = 1.0;
  bool weekend = false;
  double cust_acc_m3 = 0.0, cust_register_m3 = 0.0;
  int64_t cur_day = INT64_MIN;
  double head = sc.base_head_m + level;
  // Night truth accumulators for the local day.
  double n_leak = 0.0, n_use = 0.0, n_head = 0.0, d_leak = 0.0;
  int n_count = 0;
  auto close_day = [&](int64_t day) {
    if (n_count > 0) {
      DistrictNightTruth t;
      t.local_day = day;
      t.night_leakage_m3_h = n_leak / n_count;
      t.legit_night_use_m3_h = n_use / n_count;
      t.night_head_m = n_head / n_count;
      t.daily_leakage_m3 = d_leak;
      r.nights.push_back(t);
    }
    n_leak = n_use = n_head = d_leak = 0.0;
    n_count = 0;
  };
  const int64_t steps = static_cast<int64_t>(std::floor(sc.duration_s / dt + 1e-9));
  std::vector<double> value(sc.points.size(), 0.0);
  bool full_day = false;
  const double kDay = 86400.0;
  for (int64_t k = 0; k <= steps; ++k) {
    const double t = static_cast<double>(k) * dt;
    const double epoch = sc.start_epoch_s + t;
    const double local = tz.Local(epoch);
    const int64_t day = static_cast<int64_t>(std::floor(local / kDay));
    if (day != cur_day) {
      if (cur_day != INT64_MIN && full_day) close_day(cur_day);
      n_leak = n_use = n_head = d_leak = 0.0;
      n_count = 0;
      // Every day is whole but the first, which is whole when the run starts at local midnight.
      full_day = cur_day != INT64_MIN || std::fabs(std::fmod(local, kDay)) < dt * 0.5;
      cur_day = day;
      const int wd = static_cast<int>(((day + 4) % 7 + 7) % 7);  // 0 = Sunday
      weekend = wd == 0 || wd == 6;
      day_level = 1.0 + sc.day_to_day_pct / 100.0 * rng.Normal() + (weekend ? sc.weekend_day_pct / 100.0 : 0.0);
      night_level = 1.0 + sc.night_to_night_pct / 100.0 * rng.Normal() + (weekend ? sc.weekend_night_pct / 100.0 : 0.0);
    }
    const double hour = (local - static_cast<double>(day) * kDay) / 3600.0;
    // Weekend mornings start later: the pattern is read earlier by up to
    // weekend_shift_h between 04:00 and 14:00.
    double ph = hour;
    if (weekend && hour > 4.0 && hour < 14.0) ph -= sc.weekend_shift_h * std::min({1.0, (hour - 4.0) / 1.0, (14.0 - hour) / 2.0});
    if (ph < 0.0) ph += 24.0;
    const int h0 = static_cast<int>(ph) % 24;
    const double w = ph - std::floor(ph);
    const double pat = sc.day_pattern[h0] * (1.0 - w) + sc.day_pattern[(h0 + 1) % 24] * w;
    noise_m = rho * noise_m + std::sqrt(1.0 - rho * rho) * sd_m * rng.Normal();
    noise_u = rho * noise_u + std::sqrt(1.0 - rho * rho) * sd_u * rng_u.Normal();
    auto group = [&](double n) {
      return night_use_m3_h * night_level * (1.0 + 0.5 * n) + day_comp_m3_h * pat * day_level * (1.0 + n);
    };
    const double use_m = std::max(0.0, f * group(noise_m));
    const double use_u = f < 1.0 ? std::max(0.0, (1.0 - f) * bias_u * group(noise_u)) : 0.0;
    const double use = use_m + use_u;
    const double q_out = sc.outlet_mean_m3_h * (0.6 + 0.4 * pat / pat_mean);
    // FAVAD leakage at the previous step's head.
    const double hr = std::max(head, 0.0) / 50.0;
    double leak = sc.background_leakage_m3_h_at_50m * std::pow(hr, sc.n1);
    for (const DistrictBurst& b : sc.bursts)
      if (t >= b.start_s && (b.end_s < 0.0 || t < b.end_s)) leak += b.rate_m3_h_at_50m * std::pow(hr, sc.burst_n1);
    const double q_zone = use + leak;
    head = sc.base_head_m + level - hl * (q_zone + q_out) * (q_zone + q_out);
    double q_in = q_zone + q_out;
    if (has_res) {
      if (level <= sc.fill_on_level_m) filling = true;
      if (level >= sc.fill_off_level_m) filling = false;
      q_in = filling ? sc.fill_rate_m3_h : 0.0;
    }
    // Truth for the night window and the day.
    if (hour >= d.night_start_h && hour < d.night_end_h) {
      n_leak += leak;
      n_use += use;
      n_head += head;
      ++n_count;
    }
    // Interval and register customer meters: written at the end of each
    // interval (exact aggregate, to the litre).
    if (metered && kind != DistrictSpec::MeterReading::kSpot && k > 0 &&
        std::fabs(std::remainder(epoch, iv)) < 0.5 * dt) {
      SimReading sr;
      sr.point = d.customer_meter_point;
      sr.time_s = epoch;
      sr.quality = Quality::kGood;
      if (kind == DistrictSpec::MeterReading::kIntervalTotal) {
        sr.value = std::round(cust_acc_m3 * 1000.0) / 1000.0 / d.customer_meter_volume_m3;
      } else if (kind == DistrictSpec::MeterReading::kIntervalMean) {
        sr.value = cust_ps->unit.FromSi(cust_acc_m3 / iv);
      } else {
        cust_register_m3 += cust_acc_m3;
        sr.value = std::round(cust_register_m3 * 1000.0) / 1000.0 / d.customer_meter_volume_m3;
      }
      cust_acc_m3 = 0.0;
      r.readings.push_back(sr);
    }
    // Sample the meters at this step (state at time t).
    size_t vi = 0;
    const double n_in = static_cast<double>(d.inlets.size());
    const double n_out = std::max<double>(1.0, static_cast<double>(d.outlets.size()));
    for (size_t i = 0; i < d.inlets.size(); ++i) value[vi++] = q_in / n_in / 3600.0;
    for (size_t i = 0; i < d.outlets.size(); ++i) value[vi++] = q_out / n_out / 3600.0;
    if (has_res) value[vi++] = level;
    value[vi++] = site.atmospheric_pressure_pa + kRhoG * (head - d.pressure_head_offset_m);
    if (metered && kind == DistrictSpec::MeterReading::kSpot) value[vi++] = use_m / 3600.0;
    for (size_t i = 0; i < instruments.size(); ++i) {
      Instrument& ins = instruments[i];
      const PointSpec& ps = site.points[sc.points[i]];
      while (ins.next_sample_s() <= t + 1e-9) {
        SimReading sr;
        if (ins.Sample(ps.unit.FromSi(value[i]), &sr)) {
          sr.time_s += sc.start_epoch_s;
          r.readings.push_back(sr);
        }
      }
    }
    if (k == steps) break;
    // Advance the state over [t, t + dt].
    const double dv = (q_in - q_zone - q_out) * dt / 3600.0;
    if (has_res) {
      volume = std::max(0.0, volume + dv);
      level = InterpolateLevel(d.reservoirs[0], volume);
    }
    cust_acc_m3 += use_m * dt / 3600.0;
    r.total_input_m3 += q_in * dt / 3600.0;
    r.total_customer_m3 += use * dt / 3600.0;
    r.total_leakage_m3 += leak * dt / 3600.0;
    r.total_outlet_m3 += q_out * dt / 3600.0;
    d_leak += leak * dt / 3600.0;
  }
  r.storage_end_m3 = volume;
  r.mass_residual_m3 = has_res ? r.total_input_m3 - r.total_customer_m3 - r.total_leakage_m3 - r.total_outlet_m3 -
                                     (r.storage_end_m3 - r.storage_start_m3)
                               : 0.0;
  // Truth for evaluation.
  double mean_night_head = 0.0;
  for (const DistrictNightTruth& n : r.nights) mean_night_head += n.night_head_m / static_cast<double>(std::max<size_t>(1, r.nights.size()));
  r.truth.start_s = sc.start_epoch_s;
  r.truth.end_s = sc.start_epoch_s + static_cast<double>(steps) * dt;
  r.truth.nights = r.nights;
  for (const DistrictBurst& b : sc.bursts) {
    DistrictBurstTruth bt;
    bt.start_s = sc.start_epoch_s + b.start_s;
    bt.end_s = b.end_s >= 0.0 ? sc.start_epoch_s + b.end_s : INFINITY;
    bt.rate_m3_h_at_50m = b.rate_m3_h_at_50m;
    bt.rate_at_night_m3_h = b.rate_m3_h_at_50m * std::pow(std::max(mean_night_head, 0.0) / 50.0, sc.burst_n1);
    r.truth.bursts.push_back(bt);
  }
  std::stable_sort(r.readings.begin(), r.readings.end(),
                   [](const SimReading& a, const SimReading& b) { return a.time_s < b.time_s; });
  // Truth.
  std::string j = "{\n  \"format\": \"holdfast-district-truth/1\",\n  \"district\": \"" + d.id + "\",\n";
  j += "  \"start\": \"" + FormatIsoUtc(sc.start_epoch_s, 3) + "\",\n";
  j += "  \"end\": \"" + FormatIsoUtc(sc.start_epoch_s + static_cast<double>(steps) * dt, 3) + "\",\n";
  j += "  \"legit_night_use_model_m3_h\": " + Num(night_use_m3_h, 4) + ",\n";
  j += "  \"bursts\": [";
  for (size_t i = 0; i < sc.bursts.size(); ++i) {
    const DistrictBurstTruth& bt = r.truth.bursts[i];
    j += std::string(i ? ", " : "") + "{\"start\": \"" + FormatIsoUtc(bt.start_s, 3) + "\", \"end\": " +
         (std::isfinite(bt.end_s) ? "\"" + FormatIsoUtc(bt.end_s, 3) + "\"" : std::string("null")) +
         ", \"rate_m3_h_at_50m\": " + Num(bt.rate_m3_h_at_50m, 4) + ", \"rate_at_night_m3_h\": " +
         Num(bt.rate_at_night_m3_h, 4) + "}";
  }
  j += "],\n  \"nights\": [\n";
  for (size_t i = 0; i < r.nights.size(); ++i) {
    const DistrictNightTruth& t = r.nights[i];
    j += "    {\"local_day\": " + std::to_string(t.local_day) + ", \"date\": \"" +
         FormatIsoUtc(static_cast<double>(t.local_day) * 86400.0, 0).substr(0, 10) +
         "\", \"night_leakage_m3_h\": " + Num(t.night_leakage_m3_h, 4) + ", \"legit_night_use_m3_h\": " +
         Num(t.legit_night_use_m3_h, 4) + ", \"daily_leakage_m3\": " + Num(t.daily_leakage_m3, 3) +
         ", \"night_head_m\": " + Num(t.night_head_m, 3) + "}" + (i + 1 < r.nights.size() ? ",\n" : "\n");
  }
  j += "  ],\n  \"totals_m3\": {\"input\": " + Num(r.total_input_m3, 3) + ", \"customer\": " +
       Num(r.total_customer_m3, 3) + ", \"leakage\": " + Num(r.total_leakage_m3, 3) + ", \"outlet\": " +
       Num(r.total_outlet_m3, 3) + ", \"storage_change\": " + Num(r.storage_end_m3 - r.storage_start_m3, 3) + "}\n}\n";
  r.truth_json = std::move(j);
  *out = std::move(r);
  return true;
}

bool WriteDistrictSimulation(const Site& site, const DistrictSimResult& r, const std::string& dir, std::string* why) {
  std::error_code ec;
  std::filesystem::create_directories(dir, ec);
  if (ec) {
    *why = "cannot create " + dir + ": " + ec.message();
    return false;
  }
  auto write = [&](const std::string& name, const std::string& text) {
    const std::string path = (std::filesystem::path(dir) / name).string();
    std::FILE* f = std::fopen(path.c_str(), "wb");
    if (f == nullptr) {
      *why = "cannot write " + path;
      return false;
    }
    const bool ok = std::fwrite(text.data(), 1, text.size(), f) == text.size();
    const bool closed = std::fclose(f) == 0;
    if (!ok || !closed) *why = "cannot write " + path;
    return ok && closed;
  };
  std::string csv;
  csv.reserve(r.readings.size() * 48 + 32);
  csv += "time,point,value,quality\n";
  char buf[64];
  for (const SimReading& s : r.readings) {
    csv += FormatIsoUtc(s.time_s, 3);
    csv += ',';
    csv += site.points[static_cast<size_t>(s.point)].id;
    csv += ',';
    std::snprintf(buf, sizeof buf, "%.4f", s.value);
    const char* text = buf;
    if (buf[0] == '-' && std::strtod(buf, nullptr) == 0.0) ++text;
    csv += text;
    csv += ',';
    csv += QualityName(s.quality);
    csv += '\n';
  }
  return write("readings.csv", csv) && write("truth.json", r.truth_json);
}

}  // namespace holdfast::sim

namespace holdfast::sim {

bool LoadDistrictTruth(const std::string& path, DistrictTruth* t, std::string* why) {
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
    *t = DistrictTruth{};
    if (!ParseTime(doc.at("start").get<std::string>(), &t->start_s) ||
        !ParseTime(doc.at("end").get<std::string>(), &t->end_s))
      throw std::runtime_error("bad start or end");
    for (const auto& b : doc.at("bursts")) {
      DistrictBurstTruth bt;
      if (!ParseTime(b.at("start").get<std::string>(), &bt.start_s)) throw std::runtime_error("bad burst start");
      bt.end_s = INFINITY;
      if (b.contains("end") && b.at("end").is_string() && !ParseTime(b.at("end").get<std::string>(), &bt.end_s))
        throw std::runtime_error("bad burst end");
      bt.rate_m3_h_at_50m = b.at("rate_m3_h_at_50m").get<double>();
      bt.rate_at_night_m3_h = b.value("rate_at_night_m3_h", bt.rate_m3_h_at_50m);
      t->bursts.push_back(bt);
    }
    for (const auto& n : doc.at("nights")) {
      DistrictNightTruth nt;
      nt.local_day = n.at("local_day").get<int64_t>();
      nt.night_leakage_m3_h = n.at("night_leakage_m3_h").get<double>();
      nt.legit_night_use_m3_h = n.at("legit_night_use_m3_h").get<double>();
      nt.daily_leakage_m3 = n.at("daily_leakage_m3").get<double>();
      nt.night_head_m = n.at("night_head_m").get<double>();
      t->nights.push_back(nt);
    }
  } catch (const std::exception& e) {
    *why = path + ": malformed truth file: " + e.what();
    return false;
  }
  return true;
}

DistrictEvaluation EvaluateDistrict(const DistrictTruth& truth, const std::vector<DistrictAlarmSeen>& alarms,
                                    const std::vector<DistrictNightSeen>& nights, double learning_end_s) {
  DistrictEvaluation ev;
  ev.days = (truth.end_s - truth.start_s) / 86400.0;
  for (const DistrictBurstTruth& b : truth.bursts) {
    DistrictBurstOutcome o;
    o.truth = b;
    o.in_learning = b.start_s < learning_end_s;
    ev.bursts.push_back(o);
  }
  std::vector<size_t> order(ev.bursts.size());
  for (size_t i = 0; i < order.size(); ++i) order[i] = i;
  std::sort(order.begin(), order.end(),
            [&](size_t a, size_t b) { return ev.bursts[a].truth.start_s < ev.bursts[b].truth.start_s; });
  for (const DistrictAlarmSeen& a : alarms) {
    bool matched = false;
    for (size_t i : order) {
      DistrictBurstOutcome& o = ev.bursts[i];
      if (o.truth.start_s <= a.time_s && !std::isfinite(o.delay_h)) {
        o.delay_h = (a.time_s - o.truth.start_s) / 3600.0;
        o.estimate_m3_h = a.size_m3_h;
        o.path = a.path;
        matched = true;
        break;
      }
    }
    if (!matched) ++ev.false_alarms;
  }
  double se = 0.0, sa = 0.0, mx = 0.0, st = 0.0, sde = 0.0, sdt = 0.0;
  int n = 0, nd = 0;
  for (const DistrictNightSeen& s : nights) {
    for (const DistrictNightTruth& t : truth.nights) {
      if (t.local_day != s.local_day) continue;
      if (!std::isfinite(s.night_leakage_m3_h)) break;
      const double e = s.night_leakage_m3_h - t.night_leakage_m3_h;
      se += e;
      sa += std::fabs(e);
      mx = std::max(mx, std::fabs(e));
      st += t.night_leakage_m3_h;
      ++n;
      if (std::isfinite(s.daily_leakage_m3)) {
        sde += std::fabs(s.daily_leakage_m3 - t.daily_leakage_m3);
        sdt += t.daily_leakage_m3;
        ++nd;
      }
      break;
    }
  }
  ev.nights = n;
  if (n > 0) {
    ev.night_mean_error_m3_h = se / n;
    ev.night_mean_abs_error_m3_h = sa / n;
    ev.night_max_abs_error_m3_h = mx;
    ev.night_mean_true_m3_h = st / n;
    ev.night_abs_error_pct = 100.0 * sa / std::max(st, 1e-12);
    ev.night_bias_pct = 100.0 * se / std::max(st, 1e-12);
  }
  if (nd > 0) ev.daily_abs_error_pct = 100.0 * sde / std::max(sdt, 1e-12);
  return ev;
}

}  // namespace holdfast::sim

namespace holdfast::sim {
namespace {
class SimSource final : public ReadingSource {
 public:
  explicit SimSource(const std::vector<SimReading>& v) : v_(v) {}
  bool Next(Reading* r) override {
    if (i_ >= v_.size()) return false;
    const SimReading& s = v_[i_++];
    r->point = s.point;
    r->time_s = s.time_s;
    r->value = s.value;
    r->quality = s.quality;
    return true;
  }

 private:
  const std::vector<SimReading>& v_;
  size_t i_ = 0;
};
}  // namespace

void AttachDistrictLog(DistrictRunOptions* o, DistrictRunLog* log, bool keep_blocks) {
  o->on_night = [log](const water::NightResult& n) { log->nights.push_back(n); };
  o->on_event = [log](const AlarmEvent& e) { log->events.push_back(e); };
  o->on_burst = [log](const water::BurstReport& b) { log->bursts.push_back(b); };
  if (keep_blocks) o->on_block = [log](const water::DistrictBlock& b) { log->blocks.push_back(b); };
}

bool RunDistrictOnSim(const Site& site, int district, const DistrictSimResult& sim, double tick_s,
                      DistrictRunLog* log, std::string* why) {
  DistrictRunner runner;
  if (!runner.Init(site, district, tick_s, why)) return false;
  DistrictRunOptions o;
  AttachDistrictLog(&o, log, false);
  SimSource src(sim.readings);
  log->run = RunDistrict(&runner, &src, o);
  return true;
}

DistrictEvaluation EvaluateDistrictLog(const DistrictTruth& truth, const DistrictRunLog& log, double learning_days) {
  std::vector<DistrictAlarmSeen> alarms;
  for (const water::BurstReport& b : log.bursts) alarms.push_back({b.time_s, b.size_m3_h, water::BurstPathName(b.path)});
  std::vector<DistrictNightSeen> nights;
  for (const water::NightResult& n : log.nights) nights.push_back({n.local_day, n.night_leakage_m3_h, n.daily_leakage_m3});
  return EvaluateDistrict(truth, alarms, nights, truth.start_s + learning_days * 86400.0);
}

}  // namespace holdfast::sim
