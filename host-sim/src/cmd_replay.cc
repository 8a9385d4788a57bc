// `holdfast replay`: run a logged readings file through the very same core
// the edge monitor runs (Monitor, through the shared tick loop of
// replay_driver.h) and write the alarm events it raises as JSON Lines
// (event_json.h). Optionally seeded from a tuning file, paced against the
// wall clock, and with synthetic leaks superimposed on the logged data.
//
// The synthetic leak (--inject-leak) is quasi-steady and mass-consistent:
//   * the inlet flow is held (a flow-controlled or positive-displacement
//     inlet), deliveries and injections are held (controlled takes);
//   * the mass the leak removes is missing downstream: at the segment's tank
//     (its level reads lower by the leaked volume at the tank's density) or,
//     without a tank, at the outlet meter (it reads lower by the leak rate,
//     converted to the meter's kind and unit);
//   * pressures follow the steady Darcy-Weisbach profile (Darcy friction
//     factor by Colebrook-White, holdfast::DarcyFriction) with the flow less
//     the leak downstream of the leak point, one end's pressure held (by
//     default the outlet's: a line into a tank or a back-pressure valve);
//   * the line pack released (or gained) by that pressure change,
//     sum rho * A * (kappa + c1 D / (E e)) * dP * dx (Wylie & Streeter 1993,
//     sec. 2.4), goes to the same sink, so that in = out + leak + dM/dt holds
//     for the modified readings exactly as the steady model states it.
// The limits of the approximation are in config/REPLAY.md.
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <memory>
#include <string>
#include <thread>
#include <tuple>
#include <vector>

#include <nlohmann/json.hpp>

#include "cli_commands.h"
#include "event_json.h"
#include "holdfast/inventory.h"
#include "holdfast/monitor.h"
#include "readings_csv.h"
#include "replay_driver.h"
#include "site_file.h"
#include "tuning_file.h"

namespace holdfast::cli {
namespace {

constexpr const char* kSummaryFormat = "holdfast-replay-summary/1";

struct ReplayArgs {
  std::string config, data, tuning, events = "-", summary, start, until;
  double pace = 0.0;
  bool fast = false;
  std::vector<std::string> inject;
  // Data time as holdfastd keeps it (config/REPLAY.md): reorder window (a
  // negative value: the plain file-order loop), lead guard (0: off), quorum.
  double reorder_window_s = kDefaultReorderWindow_s, max_lead_s = kDefaultMaxLead_s;
  int lead_quorum = kDefaultLeadQuorumPoints;
};

// ---------------------------------------------------------------------------
// --inject-leak: the specification.
// ---------------------------------------------------------------------------

enum class LeakSink { kAuto, kOutlet, kTank };
enum class LeakHold { kOutlet, kInlet };

struct LeakSpec {
  std::string text;  // as given on the command line
  double start_s = kNaN;
  double rate_kg_s = kNaN;
  double chainage_m = kNaN;
  double ramp_s = 0.0;
  std::string segment;  // empty: every segment whose span holds the chainage
  LeakSink sink = LeakSink::kAuto;
  LeakHold hold = LeakHold::kOutlet;

  // Leak rate at time t (kg/s): zero before start, a linear ramp over ramp_s.
  double RateAt(double t) const {
    if (!(t > start_s)) return 0.0;
    if (ramp_s > 0.0 && t - start_s < ramp_s) return rate_kg_s * (t - start_s) / ramp_s;
    return rate_kg_s;
  }
  // Mass leaked from start to t (kg): the integral of RateAt.
  double MassBy(double t) const {
    if (!(t > start_s)) return 0.0;
    const double s = t - start_s;
    if (ramp_s > 0.0 && s < ramp_s) return 0.5 * rate_kg_s * s * s / ramp_s;
    return rate_kg_s * (s - 0.5 * ramp_s);
  }
};

bool ParseNumber(const std::string& text, double* out) {
  if (text.empty()) return false;
  char* end = nullptr;
  const double v = std::strtod(text.c_str(), &end);
  if (end != text.c_str() + text.size() || !std::isfinite(v)) return false;
  *out = v;
  return true;
}

// "start=ISO,rate=KG_S,chainage=M[,ramp=S][,segment=ID][,sink=auto|outlet|tank][,hold=outlet|inlet]"
bool ParseLeakSpec(const std::string& text, LeakSpec* spec, std::string* why) {
  spec->text = text;
  std::vector<std::string> seen;
  size_t pos = 0;
  while (pos <= text.size()) {
    size_t comma = text.find(',', pos);
    if (comma == std::string::npos) comma = text.size();
    const std::string item = text.substr(pos, comma - pos);
    pos = comma + 1;
    if (item.empty()) {
      if (comma == text.size()) break;
      *why = "empty item (two commas in a row?)";
      return false;
    }
    const size_t eq = item.find('=');
    if (eq == std::string::npos) {
      *why = "'" + item + "' is not key=value";
      return false;
    }
    const std::string key = item.substr(0, eq), value = item.substr(eq + 1);
    if (std::find(seen.begin(), seen.end(), key) != seen.end()) {
      *why = "'" + key + "' given twice";
      return false;
    }
    seen.push_back(key);
    if (key == "start") {
      if (!ParseTime(value, &spec->start_s)) {
        *why = "start: cannot read '" + value + "' as a time (ISO 8601 with a zone, e.g. 2026-03-14T06:30:00Z)";
        return false;
      }
    } else if (key == "rate") {
      if (!ParseNumber(value, &spec->rate_kg_s) || !(spec->rate_kg_s > 0.0)) {
        *why = "rate: must be a positive number of kg/s (got '" + value + "')";
        return false;
      }
    } else if (key == "chainage") {
      if (!ParseNumber(value, &spec->chainage_m) || spec->chainage_m < 0.0) {
        *why = "chainage: must be a number of metres from the segment inlet, >= 0 (got '" + value + "')";
        return false;
      }
    } else if (key == "ramp") {
      if (!ParseNumber(value, &spec->ramp_s) || spec->ramp_s < 0.0) {
        *why = "ramp: must be a number of seconds, >= 0 (got '" + value + "')";
        return false;
      }
    } else if (key == "segment") {
      spec->segment = value;
    } else if (key == "sink") {
      if (value == "auto") spec->sink = LeakSink::kAuto;
      else if (value == "outlet") spec->sink = LeakSink::kOutlet;
      else if (value == "tank") spec->sink = LeakSink::kTank;
      else {
        *why = "sink: auto, outlet or tank (got '" + value + "')";
        return false;
      }
    } else if (key == "hold") {
      if (value == "outlet") spec->hold = LeakHold::kOutlet;
      else if (value == "inlet") spec->hold = LeakHold::kInlet;
      else {
        *why = "hold: outlet or inlet (got '" + value + "')";
        return false;
      }
    } else {
      *why = "unknown key '" + key + "' (start, rate, chainage, ramp, segment, sink, hold)";
      return false;
    }
    if (comma == text.size()) break;
  }
  for (const char* required : {"start", "rate", "chainage"}) {
    if (std::find(seen.begin(), seen.end(), required) == seen.end()) {
      *why = std::string("missing ") + required + "=";
      return false;
    }
  }
  return true;
}

// ---------------------------------------------------------------------------
// --inject-leak: a reading source that superimposes the leaks.
// ---------------------------------------------------------------------------

// Frictional pressure gradient of a steady mass flow m in a section, Pa/m
// (Darcy-Weisbach: dP/dx = f m|m| / (2 rho D A^2)).
double FrictionGradient(const PipeSection& s, double m_kg_s, double rho, double mu) {
  if (m_kg_s == 0.0) return 0.0;
  const double d = s.inside_diameter_m(), a = s.flow_area_m2();
  const double reynolds = std::fabs(m_kg_s) * d / (a * mu);
  const double f = DarcyFriction(reynolds, s.roughness_m / d);
  return f * m_kg_s * std::fabs(m_kg_s) / (2.0 * rho * d * a * a);
}

class LeakInjector final : public ReadingSource {
 public:
  bool Init(const Site& site, const std::vector<LeakSpec>& specs, ReadingSource* inner, std::string* why);
  bool Next(Reading* r) override;
  uint64_t bytes_read() const override { return inner_->bytes_read(); }
  // end_s: the last tick (leaked mass up to it).
  nlohmann::ordered_json Summary(double end_s) const;

 private:
  // A stretch of pipe with one section and one base flow.
  struct Piece {
    double a = 0.0, b = 0.0;  // chainage, m
    int section = 0;
    bool downstream = false;  // of the leak
    double m_base = 0.0;      // mass flow before the leak, kg/s (from the reference state)
    double w = 0.0;           // rho * A * (kappa + wall compliance), kg/(m Pa)
    double dg = 0.0;          // change of the friction gradient, Pa/m (for cached_q_)
  };
  struct PressurePoint {
    int point = -1;
    double chainage_m = 0.0;
  };
  struct Leak {
    LeakSpec spec;
    int segment = -1;
    int sink_tank = -1;    // index in SegmentSpec::tanks, or -1
    int sink_meter = -1;   // index in SegmentSpec::meters, or -1
    std::vector<PressurePoint> pressures;
    // Reference state, captured at the first reading at or after the start
    // at which the inlet flow is known.
    bool frozen = false;
    double ref_time_s = kNaN, inlet_kg_s = kNaN, rho = kNaN, mu = kNaN, kappa = kNaN;
    // The pressure profile moves to its new steady state over max(ramp, one
    // wave transit of the segment): a pressure change travels at the wave speed.
    double settle_s = 0.0;
    std::vector<Piece> pieces;
    std::vector<double> node_d;  // D at piece starts, and at the end
    double cached_q = -1.0, cached_linepack_kg = 0.0;
    double sink_prev_t = kNaN, sink_prev_kg = 0.0, sink_prev_rate = 0.0;
    // Figures for the summary.
    double full_dp_first_pa = kNaN, full_dp_last_pa = kNaN, full_linepack_kg = kNaN;
    uint64_t modified = 0, clamped = 0;
  };

  double HeldSi(int point) const { return point >= 0 ? held_si_[static_cast<size_t>(point)] : kNaN; }
  double MeterMassFlow(const SegmentSpec& seg, const MeterSpec& m) const;
  bool Freeze(Leak& k, double t);
  void Profile(Leak& k, double q);  // fills dg, node_d, cached_linepack_kg for leak rate q
  double DeltaP(const Leak& k, double x) const;
  double SinkKg(Leak& k, double t);  // mass missing at the sink by time t
  static double ProfileRate(const Leak& k, double t);  // leak rate the pressure profile has reached
  void Apply(Leak& k, Reading* r);

  const Site* site_ = nullptr;
  ReadingSource* inner_ = nullptr;
  std::vector<Leak> leaks_;
  std::vector<std::vector<int>> by_point_;  // leaks that modify each point
  std::vector<double> held_si_;             // latest unmodified SI value of each point
};

bool LeakInjector::Init(const Site& site, const std::vector<LeakSpec>& specs, ReadingSource* inner,
                        std::string* why) {
  site_ = &site;
  inner_ = inner;
  held_si_.assign(site.points.size(), kNaN);
  by_point_.assign(site.points.size(), {});
  for (const LeakSpec& spec : specs) {
    const std::string where = "--inject-leak " + spec.text + ": ";
    int matched = 0;
    for (size_t si = 0; si < site.segments.size(); ++si) {
      const SegmentSpec& seg = site.segments[si];
      if (!spec.segment.empty() && seg.id != spec.segment) continue;
      const double length = seg.length_m();
      if (!(spec.chainage_m <= length)) {
        if (!spec.segment.empty()) {
          char buf[160];
          std::snprintf(buf, sizeof buf, "chainage %g m is beyond the end of segment %s (%g m)", spec.chainage_m,
                        seg.id.c_str(), length);
          *why = where + buf;
          return false;
        }
        continue;
      }
      Leak k;
      k.spec = spec;
      k.segment = static_cast<int>(si);
      const bool want_tank = spec.sink == LeakSink::kTank || (spec.sink == LeakSink::kAuto && !seg.tanks.empty());
      if (want_tank) {
        if (seg.tanks.empty()) {
          *why = where + "sink=tank, but segment " + seg.id + " has no tank";
          return false;
        }
        k.sink_tank = 0;
      } else {
        double best = -1.0;
        for (size_t m = 0; m < seg.meters.size(); ++m) {
          if (seg.meters[m].role == MeterRole::kOutlet && seg.meters[m].chainage_m > best) {
            best = seg.meters[m].chainage_m;
            k.sink_meter = static_cast<int>(m);
          }
        }
        if (k.sink_meter < 0) {
          *why = where + "segment " + seg.id + " has neither a tank nor an outlet meter to carry the leak";
          return false;
        }
      }
      bool has_inlet = false;
      for (const MeterSpec& m : seg.meters) has_inlet = has_inlet || m.role == MeterRole::kInlet;
      if (!has_inlet) {
        *why = where + "segment " + seg.id + " has no inlet meter (the injection holds the inlet flow)";
        return false;
      }
      // Pressure transmitters: the gauges, and the meters' own pressure points.
      for (const GaugeSpec& g : seg.pressure_gauges) k.pressures.push_back({g.point, g.chainage_m});
      for (const MeterSpec& m : seg.meters) {
        if (m.pressure_point < 0) continue;
        bool known = false;
        for (const PressurePoint& p : k.pressures) known = known || p.point == m.pressure_point;
        if (!known) k.pressures.push_back({m.pressure_point, m.chainage_m});
      }
      const int index = static_cast<int>(leaks_.size());
      for (const PressurePoint& p : k.pressures) by_point_[static_cast<size_t>(p.point)].push_back(index);
      const int sink_point =
          k.sink_tank >= 0 ? seg.tanks[static_cast<size_t>(k.sink_tank)].level_point : seg.meters[static_cast<size_t>(k.sink_meter)].point;
      by_point_[static_cast<size_t>(sink_point)].push_back(index);
      leaks_.push_back(std::move(k));
      ++matched;
    }
    if (matched == 0) {
      *why = where + (spec.segment.empty() ? "no segment is that long"
                                           : "no segment '" + spec.segment + "' in the site");
      return false;
    }
  }
  return true;
}

double LeakInjector::MeterMassFlow(const SegmentSpec& seg, const MeterSpec& m) const {
  const double v = HeldSi(m.point);
  const FluidSpec& fluid = site_->fluids[static_cast<size_t>(seg.fluid)];
  switch (m.kind) {
    case MeterKind::kMass: return v;
    case MeterKind::kLineVolume: {
      const double p = HeldSi(m.pressure_point), t = HeldSi(m.temperature_point);
      if (!std::isfinite(p) || !std::isfinite(t)) return kNaN;
      return v * FluidDensity(fluid, p, t);
    }
    case MeterKind::kStandardVolume:
      return v * FluidDensity(fluid, site_->standard_pressure_pa, site_->standard_temperature_k);
  }
  return kNaN;
}

bool LeakInjector::Freeze(Leak& k, double t) {
  const SegmentSpec& seg = site_->segments[static_cast<size_t>(k.segment)];
  const FluidSpec& fluid = site_->fluids[static_cast<size_t>(seg.fluid)];
  double inlet = 0.0;
  for (const MeterSpec& m : seg.meters) {
    if (m.role != MeterRole::kInlet) continue;
    const double q = MeterMassFlow(seg, m);
    if (!std::isfinite(q)) return false;  // not yet known: try again at the next reading
    inlet += q;
  }
  // Fluid properties at the mean of the segment's held pressures and temperatures.
  double p_sum = 0.0, t_sum = 0.0;
  int p_n = 0, t_n = 0;
  for (const GaugeSpec& g : seg.pressure_gauges)
    if (std::isfinite(HeldSi(g.point))) { p_sum += HeldSi(g.point); ++p_n; }
  for (const GaugeSpec& g : seg.temperature_gauges)
    if (std::isfinite(HeldSi(g.point))) { t_sum += HeldSi(g.point); ++t_n; }
  const double p_ref = p_n > 0 ? p_sum / p_n : site_->atmospheric_pressure_pa;
  const double t_ref = t_n > 0 ? t_sum / t_n : site_->standard_temperature_k;
  k.rho = FluidDensity(fluid, p_ref, t_ref);
  k.kappa = FluidCompressibility(fluid, p_ref, t_ref);
  k.mu = fluid.viscosity_pa_s;
  k.inlet_kg_s = inlet;
  k.ref_time_s = t;
  k.settle_s = 0.0;
  for (const PipeSection& s : seg.sections) k.settle_s += s.length_m / WaveSpeed(1.0 / k.kappa, k.rho, s);

  // Pieces between section ends, laterals and the leak.
  const double length = seg.length_m();
  std::vector<double> cuts = {0.0, length, k.spec.chainage_m};
  std::vector<double> section_end;
  double x = 0.0;
  for (const PipeSection& s : seg.sections) {
    x += s.length_m;
    section_end.push_back(x);
    cuts.push_back(x);
  }
  for (const MeterSpec& m : seg.meters)
    if (m.role == MeterRole::kDelivery || m.role == MeterRole::kInjection)
      cuts.push_back(std::clamp(m.chainage_m, 0.0, length));
  std::sort(cuts.begin(), cuts.end());
  k.pieces.clear();
  for (size_t i = 0; i + 1 < cuts.size(); ++i) {
    Piece p;
    p.a = cuts[i];
    p.b = cuts[i + 1];
    if (!(p.b - p.a > 1e-6)) continue;
    const double mid = 0.5 * (p.a + p.b);
    p.section = 0;
    while (p.section + 1 < static_cast<int>(section_end.size()) && mid > section_end[static_cast<size_t>(p.section)])
      ++p.section;
    p.downstream = mid > k.spec.chainage_m;
    double m_base = inlet;
    for (const MeterSpec& m : seg.meters) {
      if (m.chainage_m >= mid) continue;
      if (m.role == MeterRole::kDelivery || m.role == MeterRole::kInjection) {
        const double q = MeterMassFlow(seg, m);
        if (std::isfinite(q)) m_base += m.role == MeterRole::kInjection ? q : -q;
      }
    }
    p.m_base = m_base;
    const PipeSection& s = seg.sections[static_cast<size_t>(p.section)];
    p.w = k.rho * s.flow_area_m2() * (k.kappa + s.wall_compliance_per_pa());
    k.pieces.push_back(p);
  }
  k.frozen = true;
  k.cached_q = -1.0;
  // Figures at the full rate, for the summary and the log.
  Profile(k, k.spec.rate_kg_s);
  k.full_linepack_kg = k.cached_linepack_kg;
  if (!k.pressures.empty()) {
    double lo = k.pressures.front().chainage_m, hi = lo;
    for (const PressurePoint& p : k.pressures) { lo = std::min(lo, p.chainage_m); hi = std::max(hi, p.chainage_m); }
    k.full_dp_first_pa = DeltaP(k, lo);
    k.full_dp_last_pa = DeltaP(k, hi);
  }
  const char* sink_kind = k.sink_tank >= 0 ? "tank" : "outlet meter";
  const std::string sink_id = k.sink_tank >= 0 ? seg.tanks[static_cast<size_t>(k.sink_tank)].id
                                               : site_->points[static_cast<size_t>(seg.meters[static_cast<size_t>(k.sink_meter)].point)].id;
  std::fprintf(stderr,
               "inject-leak on %s from %s: %.4g kg/s at %.0f m; reference inlet %.3f kg/s, rho %.2f kg/m3, "
               "mu %.3g Pa s; at full rate the pressure changes by %+.0f Pa at the first transmitter and %+.0f Pa "
               "at the last (%s end held), line pack by %+.1f kg, settling over %.0f s; sink: %s %s\n",
               seg.id.c_str(), FormatIsoUtc(k.spec.start_s, 3).c_str(), k.spec.rate_kg_s, k.spec.chainage_m,
               inlet, k.rho, k.mu, k.full_dp_first_pa, k.full_dp_last_pa,
               k.spec.hold == LeakHold::kOutlet ? "outlet" : "inlet", k.full_linepack_kg,
               std::max(k.spec.ramp_s, k.settle_s), sink_kind, sink_id.c_str());
  return true;
}

void LeakInjector::Profile(Leak& k, double q) {
  if (q == k.cached_q) return;
  const SegmentSpec& seg = site_->segments[static_cast<size_t>(k.segment)];
  k.node_d.assign(k.pieces.size() + 1, 0.0);
  for (size_t i = 0; i < k.pieces.size(); ++i) {
    Piece& p = k.pieces[i];
    const PipeSection& s = seg.sections[static_cast<size_t>(p.section)];
    p.dg = p.downstream && q > 0.0
               ? FrictionGradient(s, p.m_base, k.rho, k.mu) - FrictionGradient(s, p.m_base - q, k.rho, k.mu)
               : 0.0;
    k.node_d[i + 1] = k.node_d[i] + p.dg * (p.b - p.a);
  }
  k.cached_q = q;
  // Line pack change: the integral of w * dP over the pieces (dP is linear
  // within a piece, so the trapezoid is exact).
  double dm = 0.0;
  for (const Piece& p : k.pieces) dm += p.w * (p.b - p.a) * 0.5 * (DeltaP(k, p.a) + DeltaP(k, p.b));
  k.cached_linepack_kg = dm;
}

// Pressure change at chainage x for the cached leak rate: D(x) - D(x_hold),
// D(x) the integral from the inlet of the friction gradient's change.
double LeakInjector::DeltaP(const Leak& k, double x) const {
  auto d_at = [&k](double at) {
    if (k.pieces.empty()) return 0.0;
    if (at <= k.pieces.front().a) return 0.0;
    for (size_t i = 0; i < k.pieces.size(); ++i) {
      const Piece& p = k.pieces[i];
      if (at <= p.b) return k.node_d[i] + p.dg * (at - p.a);
    }
    return k.node_d.back();
  };
  const double hold_x = k.spec.hold == LeakHold::kOutlet && !k.pieces.empty() ? k.pieces.back().b : 0.0;
  return d_at(x) - d_at(hold_x);
}

double LeakInjector::ProfileRate(const Leak& k, double t) {
  if (!(t > k.spec.start_s)) return 0.0;
  const double span = std::max(k.spec.ramp_s, k.settle_s);
  if (span > 0.0 && t - k.spec.start_s < span) return k.spec.rate_kg_s * (t - k.spec.start_s) / span;
  return k.spec.rate_kg_s;
}

double LeakInjector::SinkKg(Leak& k, double t) {
  const double leaked = k.spec.MassBy(t);
  if (!k.frozen) return leaked;
  Profile(k, ProfileRate(k, t));
  return leaked + k.cached_linepack_kg;
}

void LeakInjector::Apply(Leak& k, Reading* r) {
  const SegmentSpec& seg = site_->segments[static_cast<size_t>(k.segment)];
  const FluidSpec& fluid = site_->fluids[static_cast<size_t>(seg.fluid)];
  const PointSpec& point = site_->points[static_cast<size_t>(r->point)];
  const double t = r->time_s;
  if (!k.frozen && !(t < k.spec.start_s)) Freeze(k, t);

  // The sink: a tank level or the outlet meter.
  const bool is_tank_level = k.sink_tank >= 0 && seg.tanks[static_cast<size_t>(k.sink_tank)].level_point == r->point;
  const bool is_outlet = k.sink_meter >= 0 && seg.meters[static_cast<size_t>(k.sink_meter)].point == r->point;
  if (is_tank_level) {
    const double sink_kg = SinkKg(k, t);
    if (sink_kg != 0.0) {
      const TankSpec& tank = seg.tanks[static_cast<size_t>(k.sink_tank)];
      double temp = HeldSi(tank.temperature_point);
      if (!std::isfinite(temp) && !seg.temperature_gauges.empty()) temp = HeldSi(seg.temperature_gauges.front().point);
      if (!std::isfinite(temp)) temp = site_->standard_temperature_k;
      const double rho = FluidDensity(fluid, site_->atmospheric_pressure_pa, temp);
      const double level = point.unit.ToSi(r->value);
      double volume = 0.0, dvdl = 0.0;
      SegmentInventory::StrapVolume(tank.strapping, level, &volume, &dvdl);
      const double target = volume - sink_kg / rho;
      // Inverse of the strapping table (linear between rows, extended with
      // the end rows' slopes).
      const auto& rows = tank.strapping;
      size_t i = 1;
      while (i + 1 < rows.size() && target > rows[i].volume_m3) ++i;
      const StrapPoint& a = rows[i - 1];
      const StrapPoint& b = rows[i];
      double new_level = a.level_m + (target - a.volume_m3) * (b.level_m - a.level_m) / (b.volume_m3 - a.volume_m3);
      if (new_level < 0.0 && level >= 0.0) {
        new_level = 0.0;
        ++k.clamped;
      }
      r->value = point.unit.FromSi(new_level);
      ++k.modified;
    }
  } else if (is_outlet) {
    const MeterSpec& m = seg.meters[static_cast<size_t>(k.sink_meter)];
    const double sink_kg = SinkKg(k, t);
    // The mass missing since the meter's previous reading after the start
    // (nothing was missing at the start), spread over that interval. The
    // core holds this reading until the next one, so the mass is removed
    // at most one sample late, and never lost.
    const double prev_t = std::isfinite(k.sink_prev_t) ? k.sink_prev_t : k.spec.start_s;
    double rate = k.sink_prev_rate;  // a duplicate or out-of-order reading repeats the last rate
    if (t > prev_t) {
      rate = (sink_kg - k.sink_prev_kg) / (t - prev_t);
      k.sink_prev_t = t;
      k.sink_prev_kg = sink_kg;
      k.sink_prev_rate = rate;
    }
    if (rate != 0.0) {
      double per_si = 1.0;  // kg per SI unit of the meter's reading
      if (m.kind == MeterKind::kLineVolume) {
        const double p = HeldSi(m.pressure_point), tk = HeldSi(m.temperature_point);
        per_si = std::isfinite(p) && std::isfinite(tk) ? FluidDensity(fluid, p, tk) : k.rho;
      } else if (m.kind == MeterKind::kStandardVolume) {
        per_si = FluidDensity(fluid, site_->standard_pressure_pa, site_->standard_temperature_k);
      }
      double v = point.unit.ToSi(r->value) - rate / per_si;
      if (v < 0.0) {
        v = 0.0;
        ++k.clamped;
      }
      r->value = point.unit.FromSi(v);
      ++k.modified;
    }
  }
  // Pressure transmitters.
  if (k.frozen && t > k.spec.start_s) {
    for (const PressurePoint& p : k.pressures) {
      if (p.point != r->point) continue;
      Profile(k, ProfileRate(k, t));
      const double dp = DeltaP(k, p.chainage_m);
      if (dp != 0.0) {
        r->value = point.unit.FromSi(point.unit.ToSi(r->value) + dp);
        ++k.modified;
      }
    }
  }
}

bool LeakInjector::Next(Reading* r) {
  if (!inner_->Next(r)) return false;
  if (r->point < 0 || static_cast<size_t>(r->point) >= held_si_.size()) return true;
  const size_t p = static_cast<size_t>(r->point);
  if (r->quality != Quality::kBad) held_si_[p] = site_->points[p].unit.ToSi(r->value);
  for (int index : by_point_[p]) {
    Leak& k = leaks_[static_cast<size_t>(index)];
    if (r->quality == Quality::kBad || r->time_s < k.spec.start_s) continue;
    Apply(k, r);
  }
  // Freeze leaks whose points did not report yet once their start has passed.
  for (Leak& k : leaks_)
    if (!k.frozen && !(r->time_s < k.spec.start_s)) Freeze(k, r->time_s);
  return true;
}

nlohmann::ordered_json LeakInjector::Summary(double end_s) const {
  nlohmann::ordered_json list = nlohmann::ordered_json::array();
  for (const Leak& k : leaks_) {
    const SegmentSpec& seg = site_->segments[static_cast<size_t>(k.segment)];
    nlohmann::ordered_json j;
    j["spec"] = k.spec.text;
    j["segment"] = seg.id;
    j["start"] = FormatIsoUtc(k.spec.start_s, 3);
    j["rate_kg_s"] = k.spec.rate_kg_s;
    j["chainage_m"] = k.spec.chainage_m;
    j["ramp_s"] = k.spec.ramp_s;
    j["hold"] = k.spec.hold == LeakHold::kOutlet ? "outlet" : "inlet";
    if (k.sink_tank >= 0) j["sink"] = "tank " + seg.tanks[static_cast<size_t>(k.sink_tank)].id;
    else j["sink"] = "outlet " + site_->points[static_cast<size_t>(seg.meters[static_cast<size_t>(k.sink_meter)].point)].id;
    j["reference_time"] = std::isfinite(k.ref_time_s) ? nlohmann::ordered_json(FormatIsoUtc(k.ref_time_s, 3)) : nlohmann::ordered_json();
    j["reference_inlet_kg_s"] = k.inlet_kg_s;
    j["density_kg_m3"] = k.rho;
    j["pressure_change_first_pa"] = k.full_dp_first_pa;
    j["pressure_change_last_pa"] = k.full_dp_last_pa;
    j["linepack_change_kg"] = k.full_linepack_kg;
    j["pressure_settle_s"] = std::max(k.spec.ramp_s, k.settle_s);
    j["leaked_kg"] = std::isfinite(end_s) ? k.spec.MassBy(end_s) : 0.0;
    j["readings_modified"] = k.modified;
    j["readings_clamped"] = k.clamped;
    list.push_back(std::move(j));
  }
  return list;
}

// ---------------------------------------------------------------------------
// Progress on standard error (only when it is a terminal).
// ---------------------------------------------------------------------------

class Progress {
 public:
  void Start(const std::string& path) {
    active_ = isatty(STDERR_FILENO) != 0;
    struct stat st;
    if (path != "-" && ::stat(path.c_str(), &st) == 0 && S_ISREG(st.st_mode)) size_ = static_cast<uint64_t>(st.st_size);
    wall0_ = last_ = std::chrono::steady_clock::now();
  }
  void Update(uint64_t bytes, double data_t, bool force) {
    if (!active_) return;
    const auto now = std::chrono::steady_clock::now();
    if (!force && now - last_ < std::chrono::milliseconds(100)) return;
    last_ = now;
    if (!std::isfinite(first_t_)) first_t_ = data_t;
    const double wall = std::chrono::duration<double>(now - wall0_).count();
    const double speed = wall > 0.0 ? (data_t - first_t_) / wall : 0.0;
    char bar[33];
    std::string line;
    if (size_ > 0) {
      const double frac = std::min(1.0, static_cast<double>(bytes) / static_cast<double>(size_));
      const int filled = static_cast<int>(frac * 30.0);
      for (int i = 0; i < 30; ++i) bar[i] = i < filled ? '#' : '.';
      bar[30] = '\0';
      std::fprintf(stderr, "\r[%s] %5.1f %%  %s  x%.0f ", bar, 100.0 * frac, FormatIsoUtc(data_t, 0).c_str(), speed);
    } else {
      std::fprintf(stderr, "\r%.1f MB  %s  x%.0f ", static_cast<double>(bytes) / 1e6, FormatIsoUtc(data_t, 0).c_str(),
                   speed);
    }
    std::fflush(stderr);
    drawn_ = true;
  }
  void Finish() {
    if (active_ && drawn_) std::fprintf(stderr, "\n");
  }

 private:
  bool active_ = false, drawn_ = false;
  uint64_t size_ = 0;
  double first_t_ = kNaN;
  std::chrono::steady_clock::time_point wall0_, last_;
};

// ---------------------------------------------------------------------------
// The command.
// ---------------------------------------------------------------------------

nlohmann::ordered_json SegmentSummary(const Monitor& monitor, int s) {
  const SegmentTick& t = monitor.segment(s);
  nlohmann::ordered_json j;
  j["id"] = monitor.site().segments[static_cast<size_t>(s)].id;
  j["time"] = FormatIsoUtc(t.time_s, 3);
  j["status"] = SegmentStatusName(t.status);
  j["linepack_kg"] = t.linepack_kg;
  j["tank_kg"] = t.tank_kg;
  j["mean_pressure_pa"] = t.mean_pressure_pa;
  const bool lead = t.decision_enabled && t.decision.leading >= 0;
  j["decision"] = t.decision_enabled ? nlohmann::ordered_json(DecisionStateName(t.decision.state)) : nlohmann::ordered_json();
  j["leak_rate_kg_s"] = lead ? nlohmann::ordered_json(t.decision.leak_rate_kg_s) : nlohmann::ordered_json();
  j["bias_kg_s"] = t.decision_enabled ? nlohmann::ordered_json(t.decision.bias_kg_s) : nlohmann::ordered_json();
  j["sigma_kg_s"] = t.decision_enabled ? nlohmann::ordered_json(t.decision.sigma_kg_s) : nlohmann::ordered_json();
  j["location_m"] = t.location.valid ? nlohmann::ordered_json(t.location.chainage_m) : nlohmann::ordered_json();
  j["location_low_m"] = t.location.valid ? nlohmann::ordered_json(t.location.low_m) : nlohmann::ordered_json();
  j["location_high_m"] = t.location.valid ? nlohmann::ordered_json(t.location.high_m) : nlohmann::ordered_json();
  nlohmann::ordered_json windows = nlohmann::ordered_json::array();
  for (int i = 0; i < t.window_count; ++i) {
    const WindowResult& w = t.windows[static_cast<size_t>(i)];
    windows.push_back({{"window_s", w.window_s}, {"covered_s", w.covered_s}, {"imbalance_kg_s", w.imbalance_kg_s},
                       {"mdl_kg_s", w.mdl_kg_s}});
  }
  j["windows"] = windows;
  nlohmann::ordered_json alarms = nlohmann::ordered_json::object();
  for (int a = 0; a < kAlarmTypeCount; ++a)
    alarms[AlarmTypeName(static_cast<AlarmType>(a))] = AlarmStateName(t.alarms[static_cast<size_t>(a)]);
  j["alarms"] = alarms;
  return j;
}

// --reorder-window-s, --max-lead-s, --lead-quorum: data time as holdfastd
// keeps it, with the daemon's defaults (config/REPLAY.md).
void AddDataTimeOptions(CLI::App* cmd, double* reorder_window_s, double* max_lead_s, int* lead_quorum) {
  cmd->add_option("--reorder-window-s", *reorder_window_s,
                  "Reorder window, s of data time (holdfastd's tick_lateness_s; negative: feed in file order)")
      ->capture_default_str();
  cmd->add_option("--max-lead-s", *max_lead_s,
                  "Quarantine a reading stamped more than this ahead of data time (0: off)")
      ->capture_default_str()->check(CLI::NonNegativeNumber);
  cmd->add_option("--lead-quorum", *lead_quorum, "Points that must agree to move data time past the lead")
      ->capture_default_str()->check(CLI::PositiveNumber);
}

int RunReplayCommand(const ReplayArgs& a) {
  Site site;
  if (!LoadSiteOrSay(a.config, &site)) return 2;
  ReplayOptions options;
  for (const auto& [text, value, name] : {std::make_tuple(&a.start, &options.start_s, "--start"),
                                          std::make_tuple(&a.until, &options.until_s, "--until")}) {
    if (!text->empty() && !ParseTime(*text, value)) {
      std::fprintf(stderr, "%s: cannot read '%s' as a time; use ISO 8601 with a zone, e.g. 2026-03-14T08:00:00Z\n",
                   name, text->c_str());
      return 2;
    }
  }
  options.reorder_window_s = a.reorder_window_s >= 0.0 ? a.reorder_window_s : kNaN;
  options.max_lead_s = a.max_lead_s;
  options.lead_quorum_points = a.lead_quorum;
  std::string why;
  if (!options.IsValid(&why)) {
    std::fprintf(stderr, "--start/--until/--reorder-window-s/--max-lead-s: %s\n", why.c_str());
    return 2;
  }
  std::vector<LeakSpec> leaks;
  for (const std::string& text : a.inject) {
    LeakSpec spec;
    if (!ParseLeakSpec(text, &spec, &why)) {
      std::fprintf(stderr, "--inject-leak %s: %s\n", text.c_str(), why.c_str());
      return 2;
    }
    leaks.push_back(spec);
  }

  // The monitor, seeded from a tuning file when one is given.
  Monitor::Options mopt;
  TuningFile tuning;
  if (!a.tuning.empty()) {
    if (!LoadTuningFile(a.tuning, site, &tuning, &why)) {
      std::fprintf(stderr, "%s\n", why.c_str());
      return 2;
    }
    double block_s = kNaN;
    for (const SegmentTuning& s : tuning.segments) {
      if (std::isfinite(block_s) && s.block_s != block_s) {
        std::fprintf(stderr, "%s: segments tuned with different block lengths (%g s and %g s); the monitor has one\n",
                     a.tuning.c_str(), block_s, s.block_s);
        return 2;
      }
      block_s = s.block_s;
    }
    if (std::isfinite(block_s)) mopt.decision.block_s = block_s;
    mopt.decision.false_alarm_interval_s = tuning.false_alarm_interval_s;
    mopt.decision_inventory_filter_s = tuning.inventory_filter_s;
    if (tuning.detectors_in_bank != static_cast<int>(mopt.decision.target_fractions.size()))
      std::fprintf(stderr, "%s: tuned for a bank of %d detectors; this monitor has %zu (figures in the file differ)\n",
                   a.tuning.c_str(), tuning.detectors_in_bank, mopt.decision.target_fractions.size());
  }
  Monitor monitor;
  if (!monitor.Init(site, mopt, &why)) {
    std::fprintf(stderr, "%s%s%s: %s\n", a.config.c_str(), a.tuning.empty() ? "" : " with ", a.tuning.c_str(),
                 why.c_str());
    return 2;
  }
  if (!a.tuning.empty() && !ApplyTuning(tuning, &monitor, &why)) {
    std::fprintf(stderr, "%s: %s\n", a.tuning.c_str(), why.c_str());
    return 2;
  }

  ReadingsCsvReader reader;
  if (!reader.Open(a.data, site, &why)) {
    std::fprintf(stderr, "%s\n", why.c_str());
    return 2;
  }
  CsvReadingSource csv(&reader);
  ReadingSource* source = &csv;
  LeakInjector injector;
  if (!leaks.empty()) {
    if (!injector.Init(site, leaks, &csv, &why)) {
      std::fprintf(stderr, "%s\n", why.c_str());
      return 2;
    }
    source = &injector;
  }

  std::FILE* events = stdout;
  if (a.events != "-") {
    events = std::fopen(a.events.c_str(), "w");
    if (!events) {
      std::fprintf(stderr, "--events: cannot write %s: %s\n", a.events.c_str(), std::strerror(errno));
      return 2;
    }
  }
  std::string line;
  line.reserve(512);
  options.on_event = [&](const AlarmEvent& e) {
    line.clear();
    AppendEventJson(site, e, &line);
    line.push_back('\n');
    std::fwrite(line.data(), 1, line.size(), events);
    if (a.pace > 0.0) std::fflush(events);  // a paced replay is watched live
  };

  // Pacing and progress live here, in the command: the driver never sleeps.
  Progress progress;
  progress.Start(a.data);
  const bool pacing = a.pace > 0.0 && !a.fast;
  auto wall0 = std::chrono::steady_clock::now();
  double data0 = kNaN;
  uint64_t ticks = 0;
  // An injected leak that starts while the decision stage is still warming
  // up (learning only) is learnt as the segment's normal bias and is then not
  // detected: say so once per injection (issue 13).
  std::vector<bool> leak_checked(leaks.size(), false);
  auto check_warmup = [&](double t) {
    for (size_t k = 0; k < leaks.size(); ++k) {
      if (leak_checked[k] || t < leaks[k].start_s) continue;
      leak_checked[k] = true;
      for (int si = 0; si < monitor.segment_count(); ++si) {
        const SegmentSpec& seg = site.segments[si];
        if (!leaks[k].segment.empty() ? leaks[k].segment != seg.id
                                      : !(leaks[k].chainage_m >= 0.0 && leaks[k].chainage_m <= seg.length_m()))
          continue;
        const SegmentTick& st = monitor.segment(si);
        if (st.decision_enabled && st.decision.state == DecisionState::kLearning) {
          std::fprintf(stderr,
                       "WARNING: --inject-leak %s starts at %s while segment %s is still warming up (the decision "
                       "stage learns its bias and decides nothing yet; first %.0f s of data without a tuning file): "
                       "the leak will be learnt as normal and may never be detected. Start it later, or seed the "
                       "monitor with --tuning from 'holdfast tune' on leak-free data.\n",
                       leaks[k].text.c_str(), FormatIsoUtc(t, 0).c_str(), seg.id.c_str(),
                       mopt.decision.warmup_s);
        }
      }
    }
  };
  options.on_tick = [&](double t) {
    ++ticks;
    if (!leaks.empty()) check_warmup(t);
    if (pacing) {
      if (!std::isfinite(data0)) {
        data0 = t;
        wall0 = std::chrono::steady_clock::now();
      }
      const auto due = wall0 + std::chrono::duration_cast<std::chrono::steady_clock::duration>(
                                   std::chrono::duration<double>((t - data0) / a.pace));
      std::this_thread::sleep_until(due);
    }
    if (pacing || (ticks & 255u) == 0) progress.Update(source->bytes_read(), t, false);
    return true;
  };

  const auto run_start = std::chrono::steady_clock::now();
  const ReplayResult run = RunReplay(&monitor, source, site.tick_s, options);
  for (size_t k = 0; k < leaks.size(); ++k) {
    if (!leak_checked[k])
      std::fprintf(stderr, "WARNING: --inject-leak %s starts after the last tick: nothing was injected\n",
                   leaks[k].text.c_str());
  }
  const double wall_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - run_start).count();
  if (run.ticks > 0) progress.Update(source->bytes_read(), run.last_tick_s, true);
  progress.Finish();
  std::fflush(events);
  const bool write_failed = std::ferror(events) != 0;
  if (events != stdout) std::fclose(events);

  std::fprintf(stderr, "%s: %llu rows, %llu bad; %s; readings %s\n", reader.path().c_str(),
               static_cast<unsigned long long>(reader.rows()), static_cast<unsigned long long>(reader.bad_rows()),
               run.ToString().c_str(), ReadingCounts(monitor.counters()).c_str());
  std::fprintf(stderr, "%.2f s wall, %.0f rows/s\n", wall_s,
               wall_s > 0.0 ? static_cast<double>(reader.rows()) / wall_s : 0.0);
  for (const auto& e : reader.errors())
    std::fprintf(stderr, "%s:%llu: %s\n", reader.path().c_str(), static_cast<unsigned long long>(e.line),
                 e.message.c_str());
  if (reader.bad_rows() > reader.errors().size())
    std::fprintf(stderr, "... and %llu more bad rows\n",
                 static_cast<unsigned long long>(reader.bad_rows() - reader.errors().size()));
  if (monitor.events_overwritten() > 0)
    std::fprintf(stderr, "%llu alarm event(s) lost: the monitor's ring overflowed\n",
                 static_cast<unsigned long long>(monitor.events_overwritten()));

  if (!a.summary.empty()) {
    nlohmann::ordered_json s;
    s["format"] = kSummaryFormat;
    s["site"] = site.name;
    s["data"] = a.data;
    s["tuning"] = a.tuning.empty() ? nlohmann::ordered_json() : nlohmann::ordered_json(a.tuning);
    s["start"] = std::isfinite(options.start_s) ? nlohmann::ordered_json(FormatIsoUtc(options.start_s, 3)) : nlohmann::ordered_json();
    s["until"] = std::isfinite(options.until_s) ? nlohmann::ordered_json(FormatIsoUtc(options.until_s, 3)) : nlohmann::ordered_json();
    s["rows"] = reader.rows();
    s["bad_rows"] = reader.bad_rows();
    s["readings_fed"] = run.readings_fed;
    s["ticks"] = run.ticks;
    s["first_tick"] = std::isfinite(run.first_tick_s) ? nlohmann::ordered_json(FormatIsoUtc(run.first_tick_s, 3)) : nlohmann::ordered_json();
    s["last_tick"] = std::isfinite(run.last_tick_s) ? nlohmann::ordered_json(FormatIsoUtc(run.last_tick_s, 3)) : nlohmann::ordered_json();
    s["events"] = run.events;
    s["injections"] = leaks.empty() ? nlohmann::ordered_json::array() : injector.Summary(run.last_tick_s);
    nlohmann::ordered_json segs = nlohmann::ordered_json::array();
    if (run.ticks > 0)
      for (int i = 0; i < monitor.segment_count(); ++i) segs.push_back(SegmentSummary(monitor, i));
    s["segments"] = segs;
    // The spike check's record (DataQualityOptions): counts, and each point
    // that had a jump held back with the times of its dropped spikes.
    nlohmann::ordered_json dq;
    dq["spikes"] = monitor.counters().spike;
    dq["held_back"] = monitor.counters().held_back;
    nlohmann::ordered_json dq_points = nlohmann::ordered_json::array();
    for (int p = 0; p < monitor.aligner().point_count(); ++p) {
      const HeldValue& h = monitor.aligner().held(p);
      if (h.held_back == 0) continue;
      nlohmann::ordered_json e;
      e["point"] = site.points[static_cast<size_t>(p)].id;
      e["held_back"] = h.held_back;
      e["spikes"] = h.spikes;
      e["first_spike"] = h.spikes ? nlohmann::ordered_json(FormatIsoUtc(h.first_spike_s, 3)) : nlohmann::ordered_json();
      e["last_spike"] = h.spikes ? nlohmann::ordered_json(FormatIsoUtc(h.last_spike_s, 3)) : nlohmann::ordered_json();
      dq_points.push_back(e);
    }
    dq["points"] = dq_points;
    s["data_quality"] = dq;
    std::FILE* f = std::fopen(a.summary.c_str(), "w");
    if (!f) {
      std::fprintf(stderr, "--summary: cannot write %s: %s\n", a.summary.c_str(), std::strerror(errno));
      return 2;
    }
    const std::string text = s.dump(2) + "\n";
    const bool ok = std::fwrite(text.data(), 1, text.size(), f) == text.size();
    if (std::fclose(f) != 0 || !ok) {
      std::fprintf(stderr, "--summary: cannot write %s\n", a.summary.c_str());
      return 2;
    }
  }
  if (write_failed) {
    std::fprintf(stderr, "--events: write error on %s\n", a.events == "-" ? "standard output" : a.events.c_str());
    return 2;
  }
  return 0;
}

constexpr const char* kReplayHelp =
    "Replay a readings file through the core; write alarm events as JSON Lines.\n"
    "--inject-leak superimposes a synthetic leak on the logged data (repeatable):\n"
    "  start=ISO,rate=KG_S,chainage=M[,ramp=S][,segment=ID][,sink=auto|outlet|tank][,hold=outlet|inlet]\n"
    "Quasi-steady approximation: the inlet flow, deliveries and injections are held; the leaked mass is\n"
    "missing at the sink (the segment's tank level, or without a tank the outlet meter, in its own kind and\n"
    "unit); pressures follow the steady Darcy-Weisbach profile with the flow less the leak downstream of it,\n"
    "the outlet's pressure held (hold=inlet: the inlet's); the line pack this releases goes to the sink.\n"
    "No pressure wave, no transient, no change of temperature or of the inlet pump. See config/REPLAY.md.";

void Register(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<ReplayArgs>();
  CLI::App* cmd = app.add_subcommand("replay", kReplayHelp);
  cmd->add_option("--config", args->config, "Site config (JSON)")->required();
  cmd->add_option("--data", args->data, "Readings CSV (time,point,value,quality); - for stdin")->required();
  cmd->add_option("--tuning", args->tuning, "Tuning file from 'holdfast tune' to seed the decision stage");
  CLI::Option* pace = cmd->add_option("--pace", args->pace, "Data time runs N times faster than real time")
                          ->check(CLI::PositiveNumber);
  cmd->add_flag("--fast", args->fast, "As fast as possible (the default)")->excludes(pace);
  cmd->add_option("--events", args->events, "Write alarm events (JSON Lines) here (default: standard output)");
  cmd->add_option("--summary", args->summary,
                  "Write a JSON summary at the end: each segment's final decision, leak rate and location");
  cmd->add_option("--start", args->start, "Skip readings before this time (ISO 8601 with a zone)");
  cmd->add_option("--until", args->until, "Stop reading after this time (ISO 8601 with a zone)");
  AddDataTimeOptions(cmd, &args->reorder_window_s, &args->max_lead_s, &args->lead_quorum);
  cmd->add_option("--inject-leak", args->inject,
                  "start=ISO,rate=KG_S,chainage=M[,ramp=S][,segment=ID][,sink=auto|outlet|tank][,hold=outlet|inlet]")
      ->allow_extra_args(false);
  cmd->callback([args, exit_code] { *exit_code = RunReplayCommand(*args); });
}

}  // namespace
HOLDFAST_REGISTER_COMMAND(Register);
}  // namespace holdfast::cli
