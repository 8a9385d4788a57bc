#include "holdfast/monitor.h"

#include <cmath>
#include <cstdio>
#include <sstream>

#include "holdfast/arl.h"

namespace holdfast {

const char* SegmentStatusName(SegmentStatus s) {
  switch (s) {
    case SegmentStatus::kStarting: return "starting";
    case SegmentStatus::kNormal: return "normal";
    case SegmentStatus::kDegraded: return "degraded";
    case SegmentStatus::kUnavailable: return "unavailable";
  }
  return "?";
}

std::string SegmentFlagNames(uint32_t flags) {
  static const struct { uint32_t bit; const char* name; } kNames[] = {
      {kInvPressureMissing, "pressure_missing"},
      {kInvPressureStale, "pressure_stale"},
      {kInvTemperatureMissing, "temperature_missing"},
      {kInvTemperatureStale, "temperature_stale"},
      {kInvLevelMissing, "level_missing"},
      {kInvLevelStale, "level_stale"},
      {kInvLevelOutsideTable, "level_outside_strapping_table"},
      {kInvOutsideFluidTable, "state_outside_fluid_table"},
      {kSegMeterMissing, "meter_missing"},
      {kSegMeterStale, "meter_stale"},
      {kSegMeterConditions, "meter_conditions_missing"},
  };
  std::string out;
  for (const auto& n : kNames) {
    if (flags & n.bit) {
      if (!out.empty()) out += ',';
      out += n.name;
    }
  }
  return out;
}

std::string SegmentTick::ToString() const {
  char buf[256];
  std::snprintf(buf, sizeof buf,
                "t=%.3f status=%s in=%.4f kg/s out=%.4f kg/s inventory=%.3f kg residual=%.4f kg/s",
                time_s, SegmentStatusName(status), inflow_kg_s, outflow_kg_s, inventory_kg,
                residual_kg_s);
  std::string s = buf;
  for (int i = 0; i < window_count; ++i) {
    const WindowResult& w = windows[i];
    std::snprintf(buf, sizeof buf, " [W=%gs imbalance=%.3f kg (%.4f kg/s) sigma=%.3f kg mdl=%.4f kg/s]",
                  w.window_s, w.imbalance_kg, w.imbalance_kg_s, w.sigma_kg, w.mdl_kg_s);
    s += buf;
  }
  if (flags) s += " flags=" + SegmentFlagNames(flags);
  return s;
}

Monitor::Monitor() = default;
Monitor::~Monitor() = default;

bool Monitor::Init(const Site& site, const Options& options, std::string* why) {
  if (!options.IsValid(why)) return false;
  options_ = options;
  site_ = &site;
  // One threshold table for the budget: each of the bank's detectors gets an
  // equal share of the false-alarm rate (union bound).
  // Built only when some segment has a nominal flow (the bank needs one).
  bool any_decision = false;
  for (const SegmentSpec& seg : site.segments)
    any_decision = any_decision || (std::isfinite(seg.nominal_flow_kg_s) && seg.nominal_flow_kg_s > 0.0);
  const double arl0 = ArlFromBudget(options.decision.false_alarm_interval_s, options.decision.block_s,
                                    static_cast<int>(options.decision.target_fractions.size()));
  if (any_decision && !(thresholds_.arl0() == arl0) && !thresholds_.Build(arl0, why)) return false;
  aligner_.Reset(site);
  tables_.clear();
  for (const FluidSpec& f : site.fluids) {
    DensityTable::Options o;
    // 1 bar x 1 K cells: below 1e-6 relative for liquids. Gas density bends
    // more with pressure (Z), so its cells are 0.25 bar.
    o.pressure_step_pa = f.kind == FluidKind::kNaturalGas ? 0.25e5 : 1.0e5;
    if (f.kind == FluidKind::kWater) o.temperature_min_k = 273.15;
    auto table = std::make_unique<DensityTable>();
    std::string reason;
    if (!table->Build(f, o, &reason)) {
      if (why) *why = "fluid " + f.name + ": " + reason;
      return false;
    }
    tables_.push_back(std::move(table));
  }
  return InitSegments(why);
}

void Monitor::Reset() {
  if (site_ == nullptr) return;
  aligner_.Reset(*site_);
  InitSegments(nullptr);  // succeeded in Init with the same site
}

bool Monitor::InitSegments(std::string* why) {
  const Site& site = *site_;
  segments_.clear();
  segments_.resize(site.segments.size());
  for (size_t i = 0; i < site.segments.size(); ++i) {
    const SegmentSpec& spec = site.segments[i];
    SegmentRuntime& s = segments_[i];
    s.spec = &spec;
    if (spec.fluid < 0 || spec.fluid >= static_cast<int>(tables_.size())) {
      if (why) *why = "segment " + spec.id + ": fluid index out of range";
      return false;
    }
    s.table = tables_[spec.fluid].get();
    std::string reason;
    if (!s.inventory.Init(site, static_cast<int>(i), s.table, &reason)) {
      if (why) *why = "segment " + spec.id + ": " + reason;
      return false;
    }
    SegmentBalance::Options bo;
    bo.windows_s = spec.windows_s;
    bo.buckets_per_window = spec.buckets_per_window;
    bo.confidence = spec.confidence;
    if (!s.balance.Init(bo, &reason)) {
      if (why) *why = "segment " + spec.id + ": " + reason;
      return false;
    }
    s.flows.assign(spec.meters.size(), MeterFlow{});
    s.signed_flow.assign(spec.meters.size(), 0.0);
    for (size_t m = 0; m < spec.meters.size(); ++m) {
      const PointSpec& p = site.points[spec.meters[m].point];
      s.flows[m].random_frac = p.random_sigma;
      s.flows[m].systematic_frac = p.systematic_sigma;
    }
    s.standard_density_kg_m3 =
        FluidDensity(site.fluids[spec.fluid], site.standard_pressure_pa, site.standard_temperature_k);
    s.decision_enabled = std::isfinite(spec.nominal_flow_kg_s) && spec.nominal_flow_kg_s > 0.0;
    if (s.decision_enabled &&
        !s.decision.Init(options_.decision, spec.nominal_flow_kg_s, &thresholds_, &reason)) {
      if (why) *why = "segment " + spec.id + ": " + reason;
      return false;
    }
    s.tick = SegmentTick{};
    s.tick.window_count = s.balance.window_count();
    s.tick.decision_enabled = s.decision_enabled;
  }
  started_ = false;
  ticks_ = 0;
  return true;
}

bool Monitor::SeedDecision(int segment, double bias_kg_s, double sigma_kg_s, double phi) {
  if (segment < 0 || segment >= segment_count()) return false;
  SegmentRuntime& s = segments_[segment];
  if (!s.decision_enabled || !std::isfinite(bias_kg_s) || !(sigma_kg_s > 0.0) || !(phi > -1.0 && phi < 1.0))
    return false;
  s.decision.Seed(bias_kg_s, sigma_kg_s, phi);
  return true;
}

void Monitor::Advance(double t) {
  if (started_ && !(t > last_t_)) return;
  const double dt = started_ ? t - last_t_ : 0.0;
  for (SegmentRuntime& s : segments_) TickSegment(s, t, dt);
  aligner_.SetTickTime(t);
  last_t_ = t;
  started_ = true;
  ++ticks_;
}

void Monitor::TickSegment(SegmentRuntime& s, double t, double dt) {
  const SegmentSpec& spec = *s.spec;
  SegmentTick& out = s.tick;
  uint32_t flags = 0;
  double in = 0.0, outflow = 0.0;
  for (size_t m = 0; m < spec.meters.size(); ++m) {
    const MeterSpec& ms = spec.meters[m];
    const HeldValue& h = aligner_.held(ms.point);
    double q = 0.0;
    if (!h.has_value) {
      flags |= kSegMeterMissing;
    } else {
      if (!aligner_.Usable(ms.point, t)) flags |= kSegMeterStale;
      q = h.value_si;
      switch (ms.kind) {
        case MeterKind::kMass: break;
        case MeterKind::kStandardVolume: q *= s.standard_density_kg_m3; break;
        case MeterKind::kLineVolume: {
          const HeldValue& hp = aligner_.held(ms.pressure_point);
          const HeldValue& ht = aligner_.held(ms.temperature_point);
          if (!hp.has_value || !ht.has_value) {
            flags |= kSegMeterConditions;
            q *= s.standard_density_kg_m3;
          } else {
            double rho;
            s.table->DensityOnly(hp.value_si, ht.value_si, &rho);
            q *= rho;
          }
          break;
        }
      }
    }
    const bool is_in = MeterRoleIsIn(ms.role);
    s.flows[m].flow_kg_s = is_in ? q : -q;
    s.signed_flow[m] = s.flows[m].flow_kg_s;
    if (is_in) in += q; else outflow += q;
  }
  const InventoryResult& inv = s.inventory.Update(aligner_, t, dt, s.signed_flow.data());
  flags |= inv.flags;
  const bool unavailable = (flags & (kSegMeterMissing | kSegMeterStale | kInvPressureMissing |
                                     kInvTemperatureMissing | kInvLevelMissing)) != 0;
  s.balance.Step(t, !unavailable, s.flows.data(), static_cast<int>(s.flows.size()), inv.total_kg(),
                 inv.sigma_pressure_kg, inv.sigma_temperature_kg, s.inventory.temperature_filter_decay());

  if (s.decision_enabled) {
    s.decision.Step(t, dt, !unavailable && s.balance.has_difference(), s.balance.residual_kg_s() * dt,
                    s.balance.inventory_rate_kg_s());
    out.decision = s.decision.result();
  }
  out.time_s = t;
  out.flags = flags;
  out.inflow_kg_s = in;
  out.outflow_kg_s = outflow;
  out.linepack_kg = inv.linepack_kg;
  out.tank_kg = inv.tank_kg;
  out.inventory_kg = inv.total_kg();
  out.inventory_rate_kg_s = s.balance.inventory_rate_kg_s();
  out.residual_kg_s = s.balance.residual_kg_s();
  out.mean_pressure_pa = inv.mean_pressure_pa;
  out.mean_temperature_k = inv.mean_temperature_k;
  out.window_count = s.balance.window_count();
  for (int i = 0; i < out.window_count; ++i) out.windows[i] = s.balance.window(i);
  if (unavailable) {
    out.status = SegmentStatus::kUnavailable;
  } else if (flags != 0) {
    out.status = SegmentStatus::kDegraded;
  } else if (out.window_count > 0 && !out.windows[0].full) {
    out.status = SegmentStatus::kStarting;
  } else {
    out.status = SegmentStatus::kNormal;
  }
}

}  // namespace holdfast
