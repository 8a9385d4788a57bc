#include "holdfast/monitor.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <sstream>

#include "holdfast/arl.h"
#include "holdfast/pipe.h"

namespace holdfast {
namespace {
// Temperature at which the wave speeds (rupture signal, transient hold) are
// evaluated; only their few-percent temperature dependence is lost.
constexpr double kWaveReferenceTemperature_k = 288.15;
}  // namespace

const char* SegmentStatusName(SegmentStatus s) {
  switch (s) {
    case SegmentStatus::kStarting: return "starting";
    case SegmentStatus::kNormal: return "normal";
    case SegmentStatus::kDegraded: return "degraded";
    case SegmentStatus::kUnavailable: return "unavailable";
    case SegmentStatus::kShutIn: return "shut_in";
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
      {kInvTankTemperatureSubstituted, "tank_temperature_substituted"},
      {kSegMeterMissing, "meter_missing"},
      {kSegMeterStale, "meter_stale"},
      {kSegMeterConditions, "meter_conditions_missing"},
      {kSegPointSuspect, "point_suspect"},
  };
  std::string out;
  for (const auto& n : kNames) {
    if (flags & n.bit) {
      if (!out.empty()) out += '|';
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

bool Monitor::Options::IsValid(std::string* why) const {
  if (!(transient_flow_fraction > 0.0) || !(transient_pressure_pa > 0.0)) {
    if (why) *why = "transient thresholds must be positive";
    return false;
  }
  if (!(decision_settle_s >= 0.0) || !std::isfinite(decision_settle_s)) {
    if (why) *why = "decision_settle_s must be zero or positive";
    return false;
  }
  if (!(decision_inventory_filter_s > 0.0)) {
    if (why) *why = "decision_inventory_filter_s must be positive";
    return false;
  }
  if (!(transient_hold_crossings >= 0.0) || !(transient_min_hold_s >= 0.0) ||
      !(transient_max_hold_s >= transient_min_hold_s) || !std::isfinite(transient_max_hold_s)) {
    if (why) *why = "transient hold: crossings and minimum must be zero or positive, maximum at least the minimum";
    return false;
  }
  if (!(transient_large_fraction > transient_flow_fraction)) {
    if (why) *why = "transient_large_fraction must exceed transient_flow_fraction";
    return false;
  }
  if (!(shut_in_flow_fraction >= 0.0 && shut_in_flow_fraction < 0.5)) {
    if (why) *why = "shut_in_flow_fraction must be in [0, 0.5)";
    return false;
  }
  return decision.IsValid(why) && data_quality.IsValid(why) && rupture.IsValid(why) && locate.IsValid(why) &&
         leak_alarm.IsValid(why) && rupture_alarm.IsValid(why) && data_quality_alarm.IsValid(why) &&
         unavailable_alarm.IsValid(why);
}

const char* AlarmCommandName(AlarmCommand c) {
  switch (c) {
    case AlarmCommand::kAcknowledge: return "acknowledge";
    case AlarmCommand::kShelve: return "shelve";
    case AlarmCommand::kUnshelve: return "unshelve";
    case AlarmCommand::kRemoveFromService: return "remove_from_service";
    case AlarmCommand::kReturnToService: return "return_to_service";
    case AlarmCommand::kSuppress: return "suppress";
    case AlarmCommand::kUnsuppress: return "unsuppress";
  }
  return "?";
}

bool ParseAlarmCommand(std::string_view name, AlarmCommand* out) {
  for (int i = 0; i <= static_cast<int>(AlarmCommand::kUnsuppress); ++i) {
    const auto c = static_cast<AlarmCommand>(i);
    if (name == AlarmCommandName(c)) {
      *out = c;
      return true;
    }
  }
  return false;
}

Monitor::Monitor() = default;
Monitor::~Monitor() = default;

bool Monitor::Init(const Site& site, const Options& options, std::string* why) {
  if (!options.IsValid(why)) return false;
  options_ = options;
  site_ = &site;
  if (!(site.tick_s > 0.0)) {
    if (why) *why = "site: tick_s must be positive";
    return false;
  }
  // One threshold table for the budget: each of the bank's detectors gets an
  // equal share of the false-alarm rate (union bound).
  // Built only when some segment has a nominal flow (the bank needs one).
  bool any_decision = false;
  for (const SegmentSpec& seg : site.segments)
    any_decision = any_decision || (std::isfinite(seg.nominal_flow_kg_s) && seg.nominal_flow_kg_s > 0.0);
  const double arl0 = ArlFromBudget(options.decision.false_alarm_interval_s, options.decision.block_s,
                                    static_cast<int>(options.decision.target_fractions.size()));
  if (any_decision && !(thresholds_.arl0() == arl0) && !thresholds_.Build(arl0, why)) return false;
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
  InitSegments(nullptr);  // succeeded in Init with the same site
}

bool Monitor::InitSegments(std::string* why) {
  const Site& site = *site_;
  aligner_.Reset(site, options_.data_quality);
  sequence_ = SequenceCounter();
  ring_.Clear();
  forward_.ring = &ring_;
  alarms_.assign(site.segments.size() * kAlarmTypeCount, Alarm());
  for (size_t i = 0; i < site.segments.size(); ++i) {
    for (int k = 0; k < kAlarmTypeCount; ++k) {
      const auto type = static_cast<AlarmType>(k);
      const AlarmOptions& ao = type == AlarmType::kLeak      ? options_.leak_alarm
                               : type == AlarmType::kRupture ? options_.rupture_alarm
                               : type == AlarmType::kDataQuality ? options_.data_quality_alarm
                                                                 : options_.unavailable_alarm;
      if (!alarms_[i * kAlarmTypeCount + k].Init(static_cast<int>(i), type, ao, &sequence_, &forward_, why))
        return false;
    }
  }
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
    // Reference state for the wave speeds: 10 bar absolute at the reference
    // temperature of the pipe wall (only B = A / a and L / a depend on it).
    FluidState ref;
    s.table->Evaluate(10.0e5, kWaveReferenceTemperature_k, &ref);
    const double bulk_pa = ref.ddensity_dp_kg_m3_pa > 0.0 ? ref.density_kg_m3 / ref.ddensity_dp_kg_m3_pa : 0.0;
    double crossing_s = 0.0;
    for (const PipeSection& sec : spec.sections) {
      const double a = bulk_pa > 0.0 ? WaveSpeed(bulk_pa, ref.density_kg_m3, sec) : 0.0;
      if (a > 0.0) crossing_s += sec.length_m / a;
    }
    s.transient_hold_s = std::clamp(options_.transient_hold_crossings * crossing_s, options_.transient_min_hold_s,
                                    options_.transient_max_hold_s);
    DecisionOptions dopt = options_.decision;
    dopt.input_filter_s = options_.decision_inventory_filter_s;
    dopt.transient_hold_s = s.transient_hold_s;
    if (s.decision_enabled && !s.decision.Init(dopt, spec.nominal_flow_kg_s, &thresholds_, &reason)) {
      if (why) *why = "segment " + spec.id + ": " + reason;
      return false;
    }
    s.tick = SegmentTick{};
    s.tick.window_count = s.balance.window_count();
    s.tick.decision_enabled = s.decision_enabled;
    // End transmitters for location and the rupture path.
    if (!spec.pressure_gauges.empty()) {
      s.p_first = 0;
      s.p_last = static_cast<int>(spec.pressure_gauges.size()) - 1;
    }
    s.block_lateral.assign(spec.meters.size(), 0.0);
    s.leak_lateral.assign(spec.meters.size(), 0.0);
    s.scratch_lateral.assign(spec.meters.size(), 0.0);
    // The segment's own points, once each (data-quality summary).
    auto add_point = [&s](int p) {
      if (p >= 0 && std::find(s.points.begin(), s.points.end(), p) == s.points.end()) s.points.push_back(p);
    };
    for (const MeterSpec& m : spec.meters) { add_point(m.point); add_point(m.pressure_point); add_point(m.temperature_point); }
    for (const GaugeSpec& g : spec.pressure_gauges) add_point(g.point);
    for (const GaugeSpec& g : spec.temperature_gauges) add_point(g.point);
    for (const TankSpec& tk : spec.tanks) { add_point(tk.level_point); add_point(tk.temperature_point); }
    s.locate_input.laterals.reserve(spec.meters.size());
    s.rupture_ready = 0;
    if (s.decision_enabled && s.p_first >= 0 && s.p_first != s.p_last && bulk_pa > 0.0) {
      const double sigma_out = site.points[spec.pressure_gauges[s.p_last].point].random_sigma;
      if (!s.rupture.Init(options_.rupture, spec, site.tick_s, ref.density_kg_m3, bulk_pa, sigma_out, &reason)) {
        if (why) *why = "segment " + spec.id + ": " + reason;
        return false;
      }
      s.rupture_ready = 1;
      s.wave_in.assign(static_cast<size_t>(s.rupture.capacity()), PressureSample{});
      s.wave_out.assign(static_cast<size_t>(s.rupture.capacity()), PressureSample{});
      const double x0 = spec.pressure_gauges[s.p_first].chainage_m, x1 = spec.pressure_gauges[s.p_last].chainage_m;
      double start = 0.0, travel_s = 0.0;
      for (const PipeSection& sec : spec.sections) {
        const double lo = std::max(start, x0), hi = std::min(start + sec.length_m, x1);
        start += sec.length_m;
        if (hi > lo) travel_s += (hi - lo) / WaveSpeed(bulk_pa, ref.density_kg_m3, sec);
      }
      s.wave_speed_m_s = travel_s > 0.0 ? (x1 - x0) / travel_s : 0.0;
    }
  }
  started_ = false;
  ticks_ = 0;
  return true;
}

bool Monitor::SeedDecision(int segment, double bias_kg_s, double sigma_kg_s, double phi, double inventory_rate_kg_s,
                           double inventory_rate_sigma_kg_s) {
  if (segment < 0 || segment >= segment_count()) return false;
  SegmentRuntime& s = segments_[segment];
  if (!s.decision_enabled || !std::isfinite(bias_kg_s) || !(sigma_kg_s > 0.0) || !(phi > -1.0 && phi < 1.0))
    return false;
  s.decision.Seed(bias_kg_s, sigma_kg_s, phi, inventory_rate_kg_s, inventory_rate_sigma_kg_s);
  return true;
}

void Monitor::Advance(double t) {
  if (started_ && !(t > last_t_)) return;
  if (!started_) first_t_ = t;
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
  double in = 0.0, outflow = 0.0, lateral_out = 0.0, inlet_end = 0.0, outlet_end = 0.0;
  bool all_shut = true;
  const double shut_limit = options_.shut_in_flow_fraction *
                            (std::isfinite(spec.nominal_flow_kg_s) ? spec.nominal_flow_kg_s : 0.0);
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
    switch (ms.role) {
      case MeterRole::kInlet: inlet_end += q; break;
      case MeterRole::kOutlet: outlet_end += q; break;
      case MeterRole::kDelivery: lateral_out += q; break;
      case MeterRole::kInjection: lateral_out -= q; break;
    }
    all_shut = all_shut && std::fabs(q) <= shut_limit;
  }
  const InventoryResult& inv = s.inventory.Update(aligner_, t, dt, s.signed_flow.data());
  flags |= inv.flags;
  // A change of an inventory source (a tank's own thermometer taking over
  // from the line's) steps the computed inventory without any mass moving:
  // the balance sees the inventory less the sum of those steps.
  s.inventory_offset_kg += inv.source_step_kg;
  const bool unavailable = (flags & (kSegMeterMissing | kSegMeterStale | kInvPressureMissing |
                                     kInvTemperatureMissing | kInvLevelMissing)) != 0;
  s.balance.Step(t, !unavailable, s.flows.data(), static_cast<int>(s.flows.size()),
                 inv.total_kg() - s.inventory_offset_kg, inv.sigma_pressure_kg, inv.sigma_temperature_kg,
                 s.inventory.temperature_filter_decay());
  out.time_s = t;
  out.inflow_kg_s = in;
  out.outflow_kg_s = outflow;

  // Data quality of the segment's own points: excluded readings and frozen
  // verdicts make the segment degraded (and, lasting, raise data quality);
  // only a missing or stale boundary input makes it unavailable.
  uint8_t dq = 0;
  int unusable = 0;
  for (int p : s.points) {
    const uint8_t d = aligner_.Dq(p, t);
    dq |= d;
    if (d & ~kDqSpike) ++unusable;  // a dropped spike is only recorded
  }
  out.point_dq = dq;
  out.points_unusable = unusable;
  if (dq & (kDqOutOfRange | kDqRateOfChange | kDqFlatline | kDqBadQuality)) flags |= kSegPointSuspect;

  // The rupture fast path runs first: its leak signature at the line ends
  // keeps the leak's own consequences from being taken for an operating
  // change by the decision below and by the block-end step test.
  const bool valid = !unavailable && s.balance.has_difference();
  UpdateRupture(s, t, valid, lateral_out, inlet_end, outlet_end);

  if (s.decision_enabled) {
    // The decision sees the cumulative imbalance C = sum(in - out) dt - (M - M0)
    // through a first-order low-pass filter (time constant
    // Options::decision_inventory_filter_s): transmitter noise on M enters C
    // once, not differenced, and the filter shrinks it, while a lasting
    // shortfall keeps its full slope. Inventory itself is never filtered, so
    // steady filling or emptying adds no lag.
    const bool ok = valid;
    double imbalance_kg = 0.0;
    if (ok) {
      if (!s.filter_running) {
        s.filter_running = true;
        s.filter_start_s = t;
      }
      if (dt != s.filter_dt) {
        s.filter_dt = dt;
        s.filter_gain = 1.0 - std::exp(-dt / options_.decision_inventory_filter_s);
      }
      s.cumulative_kg += s.balance.residual_kg_s() * dt;
      const double before = s.cumulative_filtered_kg;
      s.cumulative_filtered_kg += s.filter_gain * (s.cumulative_kg - s.cumulative_filtered_kg);
      imbalance_kg = s.cumulative_filtered_kg - before;
    } else {
      s.cumulative_kg = s.cumulative_filtered_kg = 0.0;
      s.filter_running = false;
    }
    const bool settled = ok && t - s.filter_start_s >= options_.decision_settle_s;
    const double inv_rate = settled ? s.balance.inventory_rate_kg_s() : 0.0;
    // Blocked in, nobody operates the line: once the shut-in's own
    // transient is over, any inventory rate is thermal (predicted) or a
    // leak, never an operating change.
    if (all_shut && shut_limit > 0.0) {
      if (!(s.shut_in_since_s <= t)) s.shut_in_since_s = t;
    } else {
      s.shut_in_since_s = kNaN;
    }
    const bool shut_in_settled = t - s.shut_in_since_s >= s.transient_hold_s;
    s.decision.SetTransientVeto(t < s.leak_like_until_s || shut_in_settled);
    s.decision.Step(t, dt, settled, settled ? imbalance_kg : 0.0, inv_rate);
    out.decision = s.decision.result();
  }
  out.flags = flags;
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
  } else if (all_shut && shut_limit > 0.0) {
    out.status = SegmentStatus::kShutIn;
  } else if (out.window_count > 0 && !out.windows[0].full) {
    out.status = SegmentStatus::kStarting;
  } else {
    out.status = SegmentStatus::kNormal;
  }

  // Block averages of the end pressures and flows for location; the block
  // clock runs on valid ticks, like the decision stage's.
  out.transient = false;
  if (s.decision_enabled && s.p_first >= 0 && valid) {
    s.block_dt += dt;
    s.block_p_first += aligner_.value(spec.pressure_gauges[s.p_first].point) * dt;
    s.block_p_last += aligner_.value(spec.pressure_gauges[s.p_last].point) * dt;
    for (size_t m = 0; m < spec.meters.size(); ++m) {
      if (spec.meters[m].role == MeterRole::kInlet) s.block_in += s.signed_flow[m] * dt;
      s.block_lateral[m] += s.signed_flow[m] * dt;
    }
    if (s.block_dt >= options_.decision.block_s - 1e-9) EndBlock(s, t);
  } else if (!valid) {
    s.have_prev_block = false;
    s.block_dt = s.block_p_first = s.block_p_last = s.block_in = 0.0;
    std::fill(s.block_lateral.begin(), s.block_lateral.end(), 0.0);
  }
  out.friction_scale = s.friction_scale;
  UpdateAlarms(s, static_cast<int>(&s - segments_.data()), t);
}

void Monitor::EndBlock(SegmentRuntime& s, double t) {
  const double inv = 1.0 / s.block_dt;
  const double p0 = s.block_p_first * inv, p1 = s.block_p_last * inv, q_in = s.block_in * inv;
  for (double& v : s.block_lateral) v *= inv;
  const double n = s.block_dt / site_->tick_s;
  // Operating changes from the rates of change of flow and pressure at the
  // line ends, block to block (the decision also watches the inventory rate).
  if (s.have_prev_block) {
    const double dq = std::fabs(q_in - s.prev_block_q_in);
    const double dp = std::max(std::fabs(p0 - s.prev_block_p0), std::fabs(p1 - s.prev_block_p1));
    // A step with a leak's signature at the line ends is the leak's own
    // doing, not an operator's: the detectors go on.
    if ((dq > options_.transient_flow_fraction * s.spec->nominal_flow_kg_s || dp > options_.transient_pressure_pa) &&
        !(t < s.leak_like_until_s)) {
      const bool large = dq > options_.transient_large_fraction * s.spec->nominal_flow_kg_s;
      s.decision.MarkTransient(t, large ? options_.transient_max_hold_s : s.transient_hold_s);
      s.tick.transient = true;
    }
  }
  s.have_prev_block = true;
  s.prev_block_q_in = q_in;
  s.prev_block_p0 = p0;
  s.prev_block_p1 = p1;
  const DecisionResult& d = s.decision.result();
  const bool quiet = (d.state == DecisionState::kWatching || d.state == DecisionState::kLearning) &&
                     !d.reduced_sensitivity;
  if (quiet) {
    s.tick.location.valid = false;
    s.tick.location.by_wave = false;
    s.leak_blocks = 0;
    s.leak_p0 = s.leak_p1 = s.leak_q_in = 0.0;
    std::fill(s.leak_lateral.begin(), s.leak_lateral.end(), 0.0);
  } else if (d.state == DecisionState::kSuspect || d.state == DecisionState::kLeak) {
    // A leak stays put: locate on the means of every block since the
    // hypothesis formed, so transmitter noise averages down.
    ++s.leak_blocks;
    s.leak_p0 += p0;
    s.leak_p1 += p1;
    s.leak_q_in += q_in;
    for (size_t m = 0; m < s.leak_lateral.size(); ++m) s.leak_lateral[m] += s.block_lateral[m];
    const double k = 1.0 / s.leak_blocks;
    for (size_t m = 0; m < s.leak_lateral.size(); ++m) s.block_lateral[m] = s.leak_lateral[m] * k;
    // A rupture located by its pressure waves keeps that location: the
    // gradients of a line still in its transient say less.
    if (!s.tick.location.by_wave)
      Locate(s, t, s.leak_q_in * k, s.leak_p0 * k, s.leak_p1 * k, n * s.leak_blocks, s.block_lateral.data(),
             std::max(d.leak_rate_kg_s, 0.0));
  }
  if (quiet) {
    Locate(s, t, q_in, p0, p1, n, s.block_lateral.data(), 0.0);
    {
      // Learn friction from the leak-free steady state: measured over
      // predicted head loss, averaged slowly.
      const double scale = FrictionScale(s);
      if (std::isfinite(scale) && scale > 0.2 && scale < 5.0) {
        const double w = std::max(1.0 / ++s.friction_blocks, 0.02);
        s.friction_scale += w * (scale - s.friction_scale);
      }
    }
  }
  s.block_dt = s.block_p_first = s.block_p_last = s.block_in = 0.0;
  std::fill(s.block_lateral.begin(), s.block_lateral.end(), 0.0);
}

// Measured over predicted friction head loss between the end transmitters
// for the flows in the locate input: locate.h's FrictionScaleFromSteadyState,
// the locator's own model (allocates nothing); NaN when there is no usable
// flow or loss.
double Monitor::FrictionScale(const SegmentRuntime& s) const {
  return FrictionScaleFromSteadyState(s.spec->sections, s.spec->profile, s.locate_input, options_.locate, nullptr);
}

// Fills the segment's locate input from block means and, when a leak is
// suspected, runs the gradient intersection (locate.h). Runs once per block.
void Monitor::Locate(SegmentRuntime& s, double t, double inlet_kg_s, double p_first, double p_last,
                     double n_samples, const double* lateral_kg_s, double leak_kg_s) {
  const SegmentSpec& spec = *s.spec;
  const Site& site = *site_;
  GradientLocateInput& in = s.locate_input;
  const FluidSpec& fluid = site.fluids[spec.fluid];
  in.density_kg_m3 = s.table->Density(0.5 * (p_first + p_last), s.tick.mean_temperature_k);
  in.viscosity_pa_s = fluid.viscosity_pa_s;
  const GaugeSpec& g0 = spec.pressure_gauges[s.p_first];
  const GaugeSpec& g1 = spec.pressure_gauges[s.p_last];
  auto p_sigma = [&](const GaugeSpec& g) {
    const PointSpec& p = site.points[g.point];
    return std::sqrt(p.random_sigma * p.random_sigma / std::max(n_samples, 1.0) +
                     p.systematic_sigma * p.systematic_sigma);
  };
  double sys2 = 0.0, laterals = 0.0;
  in.laterals.clear();
  for (size_t m = 0; m < spec.meters.size(); ++m) {
    const MeterSpec& ms = spec.meters[m];
    const double frac = site.points[ms.point].systematic_sigma;
    if (ms.role == MeterRole::kInlet) sys2 += frac * frac * inlet_kg_s * inlet_kg_s;
    if (ms.role == MeterRole::kDelivery || ms.role == MeterRole::kInjection) {
      if (ms.chainage_m > g0.chainage_m && ms.chainage_m < g1.chainage_m) {
        LateralFlow lf;
        lf.chainage_m = ms.chainage_m;
        lf.flow_kg_s = lateral_kg_s[m];
        lf.sigma_kg_s = std::fabs(frac * lateral_kg_s[m]);
        in.laterals.push_back(lf);
        laterals += lateral_kg_s[m];
      }
    }
  }
  in.inlet.chainage_m = g0.chainage_m;
  in.inlet.pressure_pa = p_first;
  in.inlet.pressure_sigma_pa = p_sigma(g0);
  in.inlet.flow_kg_s = inlet_kg_s;
  in.inlet.flow_sigma_kg_s = std::sqrt(sys2);
  in.inlet.elevation_m = g0.elevation_m;
  in.outlet.chainage_m = g1.chainage_m;
  in.outlet.pressure_pa = p_last;
  in.outlet.pressure_sigma_pa = p_sigma(g1);
  // The line flow at the outlet end: what entered, changed by the laterals,
  // less the leak the balance sees (the tank and the outlet meter are inside
  // the control volume's metering, not on the line).
  in.outlet.flow_kg_s = inlet_kg_s + laterals - leak_kg_s;
  const DecisionResult& d = s.decision.result();
  in.outlet.flow_sigma_kg_s = std::sqrt(sys2 + d.sigma_kg_s * d.sigma_kg_s);
  in.outlet.elevation_m = g1.elevation_m;
  if (!(leak_kg_s > 0.0)) return;  // nothing to locate; the input serves friction learning

  GradientLocateOptions o = options_.locate;
  o.friction_scale = s.friction_scale;
  const GradientLocation loc = LocateByPressureGradient(spec.sections, spec.profile, in, o);
  LeakLocation& out = s.tick.location;
  out.time_s = t;
  out.valid = loc.found;
  out.by_wave = false;
  if (loc.found) {
    out.chainage_m = loc.chainage_m;
    out.low_m = loc.chainage_low_m;
    out.high_m = loc.chainage_high_m;
    const NearestLandmarkResult lm = NearestLandmark(spec.landmarks, loc.chainage_m);
    out.landmark = lm.found ? lm.index : -1;
    out.landmark_offset_m = lm.found ? lm.signed_distance_m : kNaN;
  }
}

void Monitor::UpdateRupture(SegmentRuntime& s, double t, bool valid, double lateral_out_kg_s, double inlet_kg_s,
                            double outlet_kg_s) {
  SegmentTick& out = s.tick;
  out.rupture = false;
  out.leak_like = false;
  if (!s.rupture_ready) return;
  if (!valid) {
    s.rupture.Restart();
    return;
  }
  RuptureInput in;
  in.inflow_kg_s = inlet_kg_s;
  in.outflow_kg_s = outlet_kg_s;
  in.lateral_out_kg_s = lateral_out_kg_s;
  in.p_inlet_pa = aligner_.value(s.spec->pressure_gauges[s.p_first].point);
  in.p_outlet_pa = aligner_.value(s.spec->pressure_gauges[s.p_last].point);
  in.residual_kg_s = s.balance.residual_kg_s();
  const RuptureStatus& st = s.rupture.Step(t, in);
  out.rupture_status = st;
  out.rupture = st.rupture;
  // A leak-like change at both ends, at the size of an operating-change
  // step: the decision is not held for it for the next two blocks.
  if (st.LeakLike(options_.transient_flow_fraction * s.spec->nominal_flow_kg_s)) {
    out.leak_like = true;
    s.leak_like_until_s = t + 2.0 * options_.decision.block_s;
  }
  if (out.rupture && !alarms_[static_cast<size_t>(&s - segments_.data()) * kAlarmTypeCount +
                              static_cast<size_t>(AlarmType::kRupture)].condition_active()) {
    // Locate at once on the current state (one evaluation, at detection),
    // with the wave estimate of the leak rate.
    // By the pressure-wave arrival times where the ticks are fast enough,
    // else by the gradients.
    if (!LocateByWaves(s, t)) {
      for (size_t m = 0; m < s.signed_flow.size(); ++m) s.scratch_lateral[m] = s.signed_flow[m];
      Locate(s, t, inlet_kg_s, in.p_inlet_pa, in.p_outlet_pa, 1.0, s.scratch_lateral.data(),
             std::max(st.estimate_kg_s, st.balance_kg_s));
    }
  }
}

// Rupture location from the arrival of its negative pressure wave at the
// two end transmitters (locate.h: DetectPressureDrop, LocateByWaveArrival),
// on the look-back's tick values. The drop threshold is a quarter of the
// Joukowsky drop of half the rupture threshold, dP = (q / 2) / B (Joukowsky
// 1898, in mass-flow form), and at least five transmitter sigmas.
bool Monitor::LocateByWaves(SegmentRuntime& s, double t) {
  // A tank inside the segment holds the outlet pressure nearly constant:
  // the wave hardly shows there and its pick comes late (seen as leaks at
  // 4 km located at 26 km on the demo line). Gradients then.
  if (!(s.wave_speed_m_s > 0.0) || !(site_->tick_s <= options_.wave_onset.max_sample_interval_s) ||
      !s.spec->tanks.empty())
    return false;
  const int n = s.rupture.EndPressures(s.wave_in.data(), s.wave_out.data());
  const SegmentSpec& spec = *s.spec;
  const PointSpec& p0 = site_->points[spec.pressure_gauges[s.p_first].point];
  const PointSpec& p1 = site_->points[spec.pressure_gauges[s.p_last].point];
  OnsetOptions o = options_.wave_onset;
  const double joukowsky_pa =
      0.5 * s.rupture.threshold_kg_s() / std::max(s.rupture.b_inlet_m_s(), s.rupture.b_outlet_m_s());
  o.drop_threshold_pa = std::max({0.25 * joukowsky_pa, 5.0 * p0.random_sigma, 5.0 * p1.random_sigma});
  const OnsetResult a = DetectPressureDrop(s.wave_in.data(), n, o);
  const OnsetResult b = DetectPressureDrop(s.wave_out.data(), n, o);
  if (!a.found || !b.found) return false;
  WaveArrivals w;
  w.inlet_chainage_m = spec.pressure_gauges[s.p_first].chainage_m;
  w.outlet_chainage_m = spec.pressure_gauges[s.p_last].chainage_m;
  w.wave_speed_m_s = s.wave_speed_m_s;
  w.inlet_arrival_s = a.arrival_s;
  w.outlet_arrival_s = b.arrival_s;
  // Half a tick of picking error at each end (uniform: tick / sqrt 12).
  w.inlet_sigma_s = w.outlet_sigma_s = site_->tick_s / std::sqrt(12.0);
  const WaveLocation loc = LocateByWaveArrival(w, options_.wave_locate);
  if (!loc.found || loc.clamped) return false;
  LeakLocation& out = s.tick.location;
  out.valid = true;
  out.by_wave = true;
  out.time_s = t;
  out.chainage_m = loc.chainage_m;
  out.low_m = loc.chainage_low_m;
  out.high_m = loc.chainage_high_m;
  const NearestLandmarkResult lm = NearestLandmark(spec.landmarks, loc.chainage_m);
  out.landmark = lm.found ? lm.index : -1;
  out.landmark_offset_m = lm.found ? lm.signed_distance_m : kNaN;
  return true;
}

void Monitor::UpdateAlarms(SegmentRuntime& s, int index, double t) {
  const SegmentTick& out = s.tick;
  Alarm* a = &alarms_[static_cast<size_t>(index) * kAlarmTypeCount];
  AlarmEvidence ev;
  if (s.decision_enabled) {
    const DecisionResult& d = out.decision;
    if (d.leading >= 0) {
      const DetectorStatus& lead = d.detectors[d.leading];
      ev.leak_rate_kg_s = d.leak_rate_kg_s;
      ev.leak_rate_sigma_kg_s = d.leak_rate_sigma_kg_s;
      ev.detector_target_kg_s = lead.target_kg_s;
      ev.statistic = lead.statistic;
      ev.threshold = lead.h;
      // Time since the change point (NaN before the detector has one).
      ev.window_s = lead.change_point_s > 0.0 ? t - lead.change_point_s : kNaN;
    }
    if (out.location.valid) {
      ev.location_m = out.location.chainage_m;
      ev.location_low_m = out.location.low_m;
      ev.location_high_m = out.location.high_m;
      if (out.location.landmark >= 0) {
        // "2.3 km downstream of <landmark>" (no heap: a stack buffer).
        const LandmarkSpec& lm = s.spec->landmarks[static_cast<size_t>(out.location.landmark)];
        const double off_km = out.location.landmark_offset_m / 1000.0;
        char buf[AlarmEvidence::kDetailSize];
        std::snprintf(buf, sizeof buf, "%.1f km %s of %s%s", std::fabs(off_km), off_km >= 0.0 ? "downstream" : "upstream",
                      lm.name.c_str(), out.location.by_wave ? " (waves)" : "");
        ev.SetDetail(buf);
      }
    }
    a[static_cast<int>(AlarmType::kLeak)].Update(t, d.state == DecisionState::kLeak, ev);
    AlarmEvidence rv = ev;
    const RuptureStatus& rs = out.rupture_status;
    if (out.rupture || rs.span_s > 0.0) {
      // The larger of the wave estimate (which sees mostly the inlet's
      // half on a line whose outlet is a tank) and the compensated balance
      // over the look-back.
      rv.leak_rate_kg_s = std::max(rs.estimate_kg_s, rs.balance_kg_s);
      rv.leak_rate_sigma_kg_s = kNaN;
      rv.detector_target_kg_s = s.rupture_ready ? s.rupture.threshold_kg_s() : kNaN;
      rv.statistic = rs.wave_in_kg_s;
      rv.threshold = s.rupture_ready ? options_.rupture.wave_share * s.rupture.threshold_kg_s() : kNaN;
      rv.window_s = rs.span_s;
    }
    // The detail text only when someone can see it: the condition is up or
    // the alarm is not at rest (formatting it every tick cost a fifth of the
    // decision path).
    Alarm& ra = a[static_cast<int>(AlarmType::kRupture)];
    if ((out.rupture || rs.span_s > 0.0) && (out.rupture || ra.state() != AlarmState::kNormal)) {
      char buf[AlarmEvidence::kDetailSize];
      if (std::isnan(rs.wave_out_kg_s))
        std::snprintf(buf, sizeof buf, "waves: inlet %.1f kg/s, outlet fall %.0f kPa; metered %.1f kg/s",
                      rs.wave_in_kg_s, rs.outlet_fall_pa / 1000.0, rs.metered_kg_s);
      else
        std::snprintf(buf, sizeof buf, "waves: inlet %.1f, outlet %.1f kg/s; metered %.1f kg/s", rs.wave_in_kg_s,
                      rs.wave_out_kg_s, rs.metered_kg_s);
      rv.SetDetail(buf);
    }
    ra.Update(t, out.rupture, rv);
  }
  // At start-up points report one by one: missing data is not a fault until
  // every point has had its staleness limit (kStartupGrace_s) to report.
  // A data-quality or availability problem must also persist for its
  // on-delay: one bad sample is counted, not annunciated.
  const bool settled = t - first_t_ >= kStartupGrace_s;
  if (out.points_unusable > 0) {
    if (!(s.dq_since_s <= t)) s.dq_since_s = t;
  } else {
    s.dq_since_s = kNaN;
  }
  if (out.status == SegmentStatus::kUnavailable) {
    if (!(s.unavailable_since_s <= t)) s.unavailable_since_s = t;
  } else {
    s.unavailable_since_s = kNaN;
  }
  AlarmEvidence dq;
  dq.statistic = out.points_unusable;
  if (out.points_unusable > 0) {
    // The points and their reasons, as many as fit ("MB-TT-302 frozen; ...").
    char buf[AlarmEvidence::kDetailSize];
    size_t used = 0;
    buf[0] = '\0';
    for (int p : s.points) {
      const uint8_t d = aligner_.Dq(p, t) & ~kDqSpike;
      if (d == 0) continue;
      const char* reason = (d & kDqMissing) ? "missing" : (d & kDqStale) ? "stale" : (d & kDqFlatline) ? "frozen"
                           : (d & kDqBadQuality) ? "bad" : (d & kDqOutOfRange) ? "out_of_range" : "rate_of_change";
      const int n = std::snprintf(buf + used, sizeof buf - used, "%s%s %s", used ? "; " : "",
                                  site_->points[p].id.c_str(), reason);
      if (n < 0 || used + static_cast<size_t>(n) >= sizeof buf) {
        buf[used] = '\0';
        break;
      }
      used += static_cast<size_t>(n);
    }
    dq.SetDetail(buf);
  }
  a[static_cast<int>(AlarmType::kDataQuality)].Update(
      t, settled && t - s.dq_since_s >= kDataQualityOnDelay_s, dq);
  AlarmEvidence un;
  a[static_cast<int>(AlarmType::kBalanceUnavailable)].Update(
      t, settled && t - s.unavailable_since_s >= kUnavailableOnDelay_s, un);
  for (int k = 0; k < kAlarmTypeCount; ++k) s.tick.alarms[k] = a[k].state();
}

bool Monitor::ResetLeakDetectors(int segment, bool false_alarm) {
  if (segment < 0 || segment >= segment_count()) return false;
  SegmentRuntime& s = segments_[segment];
  if (!s.decision_enabled) return false;
  s.decision.ResetDetectors(-1, false_alarm);
  s.tick.decision = s.decision.result();
  return true;
}

AlarmResult Monitor::Command(int segment, AlarmType type, AlarmCommand command, double t, double duration_s,
                             std::string_view user) {
  if (segment < 0 || segment >= segment_count()) return AlarmResult::kRejectedInvalidArgument;
  Alarm& a = alarms_[static_cast<size_t>(segment) * kAlarmTypeCount + static_cast<size_t>(type)];
  switch (command) {
    case AlarmCommand::kAcknowledge: return a.Acknowledge(t, user);
    case AlarmCommand::kShelve: return a.Shelve(t, duration_s, user);
    case AlarmCommand::kUnshelve: return a.Unshelve(t, user);
    case AlarmCommand::kRemoveFromService: return a.RemoveFromService(t, user);
    case AlarmCommand::kReturnToService: return a.ReturnToService(t, user);
    case AlarmCommand::kSuppress: return a.Suppress(t);
    case AlarmCommand::kUnsuppress: return a.Unsuppress(t);
  }
  return AlarmResult::kRejectedInvalidArgument;
}

}  // namespace holdfast
