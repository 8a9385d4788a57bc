#include "simulate.h"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <string>
#include <system_error>

#include <nlohmann/json.hpp>

#include "holdfast/fluid.h"
#include "moc.h"
#include "readings_csv.h"

namespace holdfast::sim {
namespace {

using ordered_json = nlohmann::ordered_json;
constexpr double kG = kStandardGravity_m_s2;

double Round(double v, double quantum) { return std::round(v / quantum) * quantum; }

// What the point sees, in SI, at the current (previous = false) or the
// previous step.
struct Probe {
  const PointPlan* plan = nullptr;
  MocModel::Probe at;
  double z_pipe = 0.0;
};

class Truth {
 public:
  Truth(const Site& site, const Scenario& sc, const MocModel& moc) : moc_(moc) {
    rho_std_ = FluidDensity(sc.moc.fluid, site.standard_pressure_pa, site.standard_temperature_k);
  }

  double Si(const Probe& p, bool previous) const {
    const PointPlan& plan = *p.plan;
    switch (plan.measure) {
      case Measure::kInletFlow: return Flow(p, moc_.inlet_flow_kg_s(previous), previous, false);
      case Measure::kPipeOutletFlow: return Flow(p, moc_.pipe_outlet_flow_kg_s(previous), previous, false);
      case Measure::kTankOutflow: return Flow(p, moc_.tank_outflow_kg_s(previous), previous, true);
      case Measure::kLateralFlow: return Flow(p, std::fabs(moc_.lateral_flow_kg_s(plan.lateral, previous)), previous, false);
      case Measure::kPressure: {
        // The transmitter reads the line pressure less the static head of its
        // impulse line (above the pipe: less).
        const double pipe = moc_.Pressure(p.at, previous);
        const double rho = moc_.Density(pipe, moc_.Temperature(p.at, previous));
        const double z_tx = std::isfinite(plan.elevation_m) ? plan.elevation_m : p.z_pipe;
        return pipe - rho * kG * (z_tx - p.z_pipe);
      }
      case Measure::kTemperature: return moc_.Temperature(p.at, previous);
      case Measure::kTankLevel: return moc_.tank_level_m(previous);
      case Measure::kTankTemperature: return moc_.tank_temperature_k();
    }
    return 0.0;
  }

 private:
  double Flow(const Probe& p, double mass_kg_s, bool previous, bool tank) const {
    switch (p.plan->meter) {
      case MeterKind::kMass: return mass_kg_s;
      case MeterKind::kStandardVolume: return mass_kg_s / rho_std_;
      case MeterKind::kLineVolume: {
        const double pr = moc_.Pressure(p.at, previous);
        const double t = tank ? moc_.tank_temperature_k() : moc_.Temperature(p.at, previous);
        return mass_kg_s / moc_.Density(pr, t);
      }
    }
    return mass_kg_s;
  }

  const MocModel& moc_;
  double rho_std_ = 0.0;
};

struct Sample {
  double t = 0.0;
  double linepack = 0.0, tank = 0.0, inventory = 0.0;
  double inlet = 0.0, pipe_out = 0.0, tank_out = 0.0, delivery = 0.0, injection = 0.0, leak = 0.0;  // kg/s
  double in_kg = 0.0, out_kg = 0.0, leak_kg = 0.0;
  double p_in = 0.0, p_out = 0.0, level = 0.0, t_mean = 0.0, t_out = 0.0;
};

Sample TakeSample(const MocModel& moc, const MocModel::Probe& in, const MocModel::Probe& out) {
  Sample s;
  s.t = moc.time_s();
  s.linepack = moc.Linepack();
  s.tank = moc.has_tank() ? moc.tank_mass_kg() : 0.0;
  s.inventory = s.linepack + s.tank;
  s.inlet = moc.inlet_flow_kg_s();
  s.pipe_out = moc.pipe_outlet_flow_kg_s();
  s.tank_out = moc.has_tank() ? moc.tank_outflow_kg_s() : 0.0;
  const MassTotals& tt = moc.totals();
  s.in_kg = tt.inlet_kg + tt.injection_kg;
  s.out_kg = tt.delivery_kg + (moc.has_tank() ? tt.tank_outflow_kg : tt.pipe_outlet_kg);
  s.leak_kg = tt.leak_kg;
  s.p_in = moc.Pressure(in);
  s.p_out = moc.Pressure(out);
  s.level = moc.has_tank() ? moc.tank_level_m() : 0.0;
  // Mean temperature over the length (trapezoid in chainage).
  const std::vector<double>& x = moc.node_chainage();
  double sum = 0.0, len = 0.0;
  for (size_t i = 1; i < x.size(); ++i) {
    const double dx = x[i] - x[i - 1];
    if (dx <= 0.0) continue;
    sum += 0.5 * dx * (moc.node_temperature(static_cast<int>(i - 1)) + moc.node_temperature(static_cast<int>(i)));
    len += dx;
  }
  s.t_mean = len > 0.0 ? sum / len : 0.0;
  s.t_out = moc.Temperature(out);
  return s;
}

Sample Lerp(const Sample& a, const Sample& b, double w) {
  auto l = [w](double u, double v) { return u + w * (v - u); };
  Sample s;
  s.t = l(a.t, b.t);
  s.linepack = l(a.linepack, b.linepack);
  s.tank = l(a.tank, b.tank);
  s.inventory = l(a.inventory, b.inventory);
  s.inlet = l(a.inlet, b.inlet);
  s.pipe_out = l(a.pipe_out, b.pipe_out);
  s.tank_out = l(a.tank_out, b.tank_out);
  s.delivery = l(a.delivery, b.delivery);
  s.injection = l(a.injection, b.injection);
  s.leak = l(a.leak, b.leak);
  s.in_kg = l(a.in_kg, b.in_kg);
  s.out_kg = l(a.out_kg, b.out_kg);
  s.leak_kg = l(a.leak_kg, b.leak_kg);
  s.p_in = l(a.p_in, b.p_in);
  s.p_out = l(a.p_out, b.p_out);
  s.level = l(a.level, b.level);
  s.t_mean = l(a.t_mean, b.t_mean);
  s.t_out = l(a.t_out, b.t_out);
  return s;
}

}  // namespace

bool Simulate(const Site& site, const Scenario& sc, SimulationResult* result, std::string* why) {
  *result = SimulationResult{};
  const auto wall0 = std::chrono::steady_clock::now();
  MocModel moc;
  std::string reason;
  if (!moc.Init(sc.moc, &reason)) {
    *why = "segment " + site.segments[static_cast<size_t>(sc.segment)].id + ": " + reason;
    return false;
  }
  const double duration = sc.duration_s;
  const size_t nlat = sc.moc.laterals.size(), nleak = sc.moc.leaks.size();

  // Instruments and what each one sees.
  std::vector<Instrument> inst(sc.points.size());
  std::vector<Probe> probes(sc.points.size());
  result->decimals.assign(site.points.size(), -1);
  uint64_t capacity = 0;
  for (size_t i = 0; i < sc.points.size(); ++i) {
    const PointPlan& p = sc.points[i];
    const PointSpec& ps = site.points[static_cast<size_t>(p.point)];
    inst[i].Init(p.point, ps.id, p.instrument, sc.seed, sc.instrument_set_seed, duration);
    probes[i].plan = &p;
    probes[i].at = moc.MakeProbe(p.chainage_m);
    probes[i].z_pipe = moc.Elevation(probes[i].at);
    result->decimals[static_cast<size_t>(p.point)] = inst[i].decimals();
    capacity += inst[i].MaxReadings();
  }
  result->readings.reserve(static_cast<size_t>(capacity));
  Truth truth(site, sc, moc);
  auto sample_due = [&](double t0, double t1) {
    const double dt = t1 - t0;
    for (size_t i = 0; i < inst.size(); ++i) {
      Instrument& in = inst[i];
      while (in.next_sample_s() <= t1) {
        const double ts = in.next_sample_s();
        const double w = dt > 0.0 ? std::min(1.0, std::max(0.0, (ts - t0) / dt)) : 1.0;
        const double prev = truth.Si(probes[i], true), cur = truth.Si(probes[i], false);
        const double si = prev + w * (cur - prev);
        const double value = site.points[static_cast<size_t>(sc.points[i].point)].unit.FromSi(si);
        SimReading r;
        if (in.Sample(value, &r)) result->readings.push_back(r);
      }
    }
  };

  // Truth series at exact multiples of truth_every_s (linear between steps).
  const MocModel::Probe pin = moc.MakeProbe(0.0);
  const MocModel::Probe pout = moc.MakeProbe(sc.moc.sections.empty() ? 0.0 : 1e300);
  std::vector<Sample> series;
  series.reserve(static_cast<size_t>(duration / sc.truth_every_s) + 2);
  auto with_laterals = [&](Sample s) {
    for (size_t k = 0; k < nlat; ++k) {
      const double q = moc.lateral_flow_kg_s(static_cast<int>(k));
      if (sc.moc.laterals[k].injection) {
        s.injection -= q;
      } else {
        s.delivery += q;
      }
    }
    for (size_t k = 0; k < nleak; ++k) s.leak += moc.leak_flow_kg_s(static_cast<int>(k));
    return s;
  };
  Sample before = with_laterals(TakeSample(moc, pin, pout));
  series.push_back(before);
  double next_mark = sc.truth_every_s;
  const double inv0 = moc.Inventory();

  // Leak bookkeeping: the rate when each leak is fully open.
  std::vector<double> leak_full(nleak, kNaN);

  sample_due(0.0, 0.0);
  const uint64_t steps = static_cast<uint64_t>(std::ceil(duration / moc.dt_s() - 1e-9));
  for (uint64_t n = 0; n < steps; ++n) {
    const bool crossing = moc.time_s() + moc.dt_s() >= next_mark - 1e-9 && next_mark <= duration + 1e-9;
    if (crossing) before = with_laterals(TakeSample(moc, pin, pout));
    const double t0 = moc.time_s();
    moc.Step();
    const double t1 = moc.time_s();
    sample_due(t0, t1);
    for (size_t k = 0; k < nleak; ++k) {
      const LeakSetup& l = sc.moc.leaks[k];
      if (!std::isfinite(leak_full[k]) && t1 >= l.onset_s + l.ramp_s) leak_full[k] = moc.leak_flow_kg_s(static_cast<int>(k));
    }
    if (crossing) {
      const Sample after = with_laterals(TakeSample(moc, pin, pout));
      while (next_mark <= t1 + 1e-9 && next_mark <= duration + 1e-9) {
        const double w = (next_mark - t0) / (t1 - t0);
        Sample s = Lerp(before, after, std::min(1.0, std::max(0.0, w)));
        s.t = next_mark;
        series.push_back(s);
        next_mark += sc.truth_every_s;
      }
    }
  }
  const auto wall1 = std::chrono::steady_clock::now();

  // File order: arrival, then the scenario's point order, then sequence.
  std::vector<int> order(site.points.size(), 0);
  for (size_t i = 0; i < sc.points.size(); ++i) order[static_cast<size_t>(sc.points[i].point)] = static_cast<int>(i);
  std::sort(result->readings.begin(), result->readings.end(), [&](const SimReading& a, const SimReading& b) {
    if (a.arrival_s != b.arrival_s) return a.arrival_s < b.arrival_s;
    const int oa = order[static_cast<size_t>(a.point)], ob = order[static_cast<size_t>(b.point)];
    if (oa != ob) return oa < ob;
    return a.sequence < b.sequence;
  });

  // Totals.
  const MassTotals& tt = moc.totals();
  const double in = tt.inlet_kg + tt.injection_kg;
  const double out = tt.delivery_kg + (moc.has_tank() ? tt.tank_outflow_kg : tt.pipe_outlet_kg);
  const double inv1 = moc.Inventory();
  result->steps = moc.steps();
  result->nodes = moc.node_count();
  result->dt_s = moc.dt_s();
  result->wall_s = std::chrono::duration<double>(wall1 - wall0).count();
  result->node_updates_per_s = result->wall_s > 0.0 ? static_cast<double>(moc.steps()) * moc.node_count() / result->wall_s : 0.0;
  result->inventory_start_kg = inv0;
  result->inventory_end_kg = inv1;
  result->in_kg = in;
  result->out_kg = out;
  result->leak_kg = tt.leak_kg;
  result->residual_kg = (inv1 - inv0) - (in - out - tt.leak_kg);

  // The truth document.
  const SegmentSpec& seg = site.segments[static_cast<size_t>(sc.segment)];
  ordered_json doc;
  doc["format"] = "holdfast-sim-truth/1";
  doc["description"] = "Ground truth of a holdfast sim run (invented scenario data)";
  doc["site"] = site.name;
  doc["segment"] = seg.id;
  doc["scenario"] = sc.name;
  doc["start"] = FormatIsoUtc(sc.start_epoch_s, 3);
  doc["end"] = FormatIsoUtc(sc.start_epoch_s + duration, 3);
  doc["duration_s"] = duration;
  doc["seed"] = sc.seed;
  ordered_json grid;
  grid["time_step_s"] = moc.dt_s();
  grid["nodes"] = moc.node_count();
  grid["steps"] = moc.steps();
  grid["property_step_s"] = moc.property_every_steps() * moc.dt_s();
  grid["wave_speed_reference"] = {{"pressure_pa", Round(moc.reference_pressure_pa(), 1.0)},
                                  {"temperature_k", Round(moc.reference_temperature_k(), 1e-3)}};
  ordered_json sections = ordered_json::array();
  for (const GridSection& g : moc.grid()) {
    sections.push_back({{"length_m", g.length_m},
                        {"reaches", g.reaches},
                        {"dx_m", Round(g.dx_m, 1e-4)},
                        {"wave_speed_model_m_s", Round(g.wave_speed_model_m_s, 1e-3)},
                        {"wave_speed_grid_m_s", Round(g.wave_speed_grid_m_s, 1e-3)},
                        {"adjustment_pct", Round(100.0 * g.adjustment(), 1e-4)}});
    char line[200];
    std::snprintf(line, sizeof line, "section %.0f m: %d reaches of %.2f m, wave speed %.1f m/s (Korteweg %.1f, adjusted %+.3f %%)",
                  g.length_m, g.reaches, g.dx_m, g.wave_speed_grid_m_s, g.wave_speed_model_m_s, 100.0 * g.adjustment());
    result->notes.push_back(line);
  }
  grid["sections"] = sections;
  doc["grid"] = grid;
  doc["boundaries"] = {{"upstream", sc.upstream_text}, {"downstream", sc.downstream_text}};
  doc["operations"] = sc.operations_text;
  ordered_json leaks = ordered_json::array();
  for (size_t k = 0; k < nleak; ++k) {
    const LeakSetup& ls = sc.moc.leaks[k];  // as run
    const std::string size = k < sc.leaks.size() ? sc.leaks[k].size : std::string();
    ordered_json l;
    l["onset"] = FormatIsoUtc(sc.start_epoch_s + ls.onset_s, 3);
    l["onset_s"] = ls.onset_s;
    l["ramp_s"] = ls.ramp_s;
    l["chainage_m"] = ls.chainage_m;
    l["node_chainage_m"] = Round(moc.leak_node_chainage_m(static_cast<int>(k)), 1e-3);
    l["size"] = size;
    l["cda_m2"] = std::isfinite(moc.leak_cda_m2(static_cast<int>(k))) ? ordered_json(moc.leak_cda_m2(static_cast<int>(k)))
                                                                       : ordered_json(nullptr);
    l["rate_when_open_kg_s"] = std::isfinite(leak_full[k]) ? ordered_json(Round(leak_full[k], 1e-5)) : ordered_json(nullptr);
    l["rate_at_end_kg_s"] = Round(moc.leak_flow_kg_s(static_cast<int>(k)), 1e-5);
    leaks.push_back(l);
    char line[240];
    std::snprintf(line, sizeof line, "leak at %.0f m (node %.0f m) from %s: %s; %.4f kg/s when open", ls.chainage_m,
                  moc.leak_node_chainage_m(static_cast<int>(k)), FormatIsoUtc(sc.start_epoch_s + ls.onset_s, 3).c_str(),
                  size.c_str(), std::isfinite(leak_full[k]) ? leak_full[k] : 0.0);
    result->notes.push_back(line);
  }
  doc["leaks"] = leaks;
  ordered_json lats = ordered_json::array();
  for (size_t k = 0; k < nlat; ++k) {
    lats.push_back({{"point", sc.lateral_points[k]},
                    {"role", sc.moc.laterals[k].injection ? "injection" : "delivery"},
                    {"chainage_m", sc.moc.laterals[k].chainage_m},
                    {"node_chainage_m", Round(moc.lateral_node_chainage_m(static_cast<int>(k)), 1e-3)}});
  }
  doc["laterals"] = lats;
  doc["totals"] = {{"in_kg", Round(in, 1e-3)},
                   {"out_kg", Round(out, 1e-3)},
                   {"leak_kg", Round(tt.leak_kg, 1e-3)},
                   {"inlet_kg", Round(tt.inlet_kg, 1e-3)},
                   {"injection_kg", Round(tt.injection_kg, 1e-3)},
                   {"delivery_kg", Round(tt.delivery_kg, 1e-3)},
                   {"pipe_outlet_kg", Round(tt.pipe_outlet_kg, 1e-3)},
                   {"tank_outflow_kg", Round(tt.tank_outflow_kg, 1e-3)},
                   {"inventory_start_kg", Round(inv0, 1e-3)},
                   {"inventory_end_kg", Round(inv1, 1e-3)},
                   {"inventory_change_kg", Round(inv1 - inv0, 1e-3)},
                   {"residual_kg", result->residual_kg},
                   {"mass_fixer_kg", tt.fixer_kg}};
  ordered_json instruments;
  for (size_t i = 0; i < sc.points.size(); ++i) {
    const PointPlan& p = sc.points[i];
    const PointSpec& ps = site.points[static_cast<size_t>(p.point)];
    ordered_json e;
    e["measures"] = MeasureName(p.measure);
    e["chainage_m"] = p.chainage_m;
    e["unit"] = ps.unit_name;
    if (ps.kind == PointKind::kFlow) {
      e["meter"] = MeterKindName(p.meter);
      e["bias_pct"] = Round(100.0 * inst[i].bias_fraction(), 1e-6);
      e["noise_pct"] = 100.0 * p.instrument.noise_fraction;
    } else {
      e["bias"] = Round(inst[i].bias(), 1e-9);
      e["noise"] = p.instrument.noise;
    }
    e["sample_period_s"] = p.instrument.sample_period_s;
    e["samples"] = inst[i].samples();
    e["readings"] = inst[i].sent();
    instruments[ps.id] = e;
  }
  doc["instruments"] = instruments;
  doc["diagnostics"] = {{"low_pressure_property_steps", moc.low_pressure_steps()},
                        {"min_pressure_pa", Round(moc.min_pressure_pa(), 1.0)},
                        {"density_table_clamps", moc.density_table_clamps()},
                        {"parcel_overflows", moc.parcel_overflows()}};
  doc["series_every_s"] = sc.truth_every_s;
  ordered_json rows = ordered_json::array();
  for (const Sample& s : series) {
    ordered_json r;
    r["time"] = FormatIsoUtc(sc.start_epoch_s + s.t, 3);
    r["t_s"] = Round(s.t, 1e-6);
    r["linepack_kg"] = Round(s.linepack, 1e-3);
    r["tank_kg"] = Round(s.tank, 1e-3);
    r["inventory_kg"] = Round(s.inventory, 1e-3);
    r["inlet_kg_s"] = Round(s.inlet, 1e-5);
    r["delivery_kg_s"] = Round(s.delivery, 1e-5);
    r["injection_kg_s"] = Round(s.injection, 1e-5);
    r["pipe_outlet_kg_s"] = Round(s.pipe_out, 1e-5);
    r["tank_outflow_kg_s"] = Round(s.tank_out, 1e-5);
    r["leak_kg_s"] = Round(s.leak, 1e-5);
    r["in_kg"] = Round(s.in_kg, 1e-3);
    r["out_kg"] = Round(s.out_kg, 1e-3);
    r["leak_kg"] = Round(s.leak_kg, 1e-3);
    r["inlet_pressure_pa"] = Round(s.p_in, 0.1);
    r["outlet_pressure_pa"] = Round(s.p_out, 0.1);
    r["tank_level_m"] = Round(s.level, 1e-6);
    r["mean_temperature_k"] = Round(s.t_mean, 1e-5);
    r["outlet_temperature_k"] = Round(s.t_out, 1e-5);
    rows.push_back(r);
  }
  doc["series"] = rows;
  result->truth_json = doc.dump(1) + "\n";
  return true;
}

std::string ReadingsCsv(const Site& site, const Scenario& sc, const SimulationResult& result) {
  std::string out;
  out.reserve(result.readings.size() * 48 + 32);
  out += "time,point,value,quality\n";
  char buf[64];
  for (const SimReading& r : result.readings) {
    out += FormatIsoUtc(sc.start_epoch_s + r.time_s, 3);
    out += ',';
    out += site.points[static_cast<size_t>(r.point)].id;
    out += ',';
    const int decimals = std::max(0, result.decimals[static_cast<size_t>(r.point)]);
    std::snprintf(buf, sizeof buf, "%.*f", decimals, r.value);
    const char* text = buf;
    // "-0.00" reads as zero; write it without the sign.
    if (buf[0] == '-' && std::strtod(buf, nullptr) == 0.0) ++text;
    out += text;
    out += ',';
    out += QualityName(r.quality);
    out += '\n';
  }
  return out;
}

bool WriteSimulation(const Site& site, const Scenario& sc, const SimulationResult& result, const std::string& dir,
                     std::string* why) {
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
  return write("readings.csv", ReadingsCsv(site, sc, result)) && write("truth.json", result.truth_json);
}

}  // namespace holdfast::sim
