#include "holdfast/inventory.h"

#include <algorithm>
#include <cmath>

#include "holdfast/pipe.h"

namespace holdfast {
namespace {

constexpr double kWallReferenceTemperature_k = 288.15;  // bore measured at 15 degC
constexpr uint64_t kSensitivityEveryTicks = 16;         // refresh of dM/dP, dM/dT
constexpr double kSubstitutedSigmaFactor = 10.0;         // sigma of a held-over transmitter

// Elevation at chainage x from the profile (linear, held beyond the ends).
double ElevationAt(const std::vector<ElevationPoint>& profile, double x) {
  if (profile.empty()) return 0.0;
  if (x <= profile.front().chainage_m) return profile.front().elevation_m;
  if (x >= profile.back().chainage_m) return profile.back().elevation_m;
  for (size_t k = 1; k < profile.size(); ++k) {
    if (x <= profile[k].chainage_m) {
      const ElevationPoint& a = profile[k - 1];
      const ElevationPoint& b = profile[k];
      const double w = (x - a.chainage_m) / (b.chainage_m - a.chainage_m);
      return a.elevation_m + w * (b.elevation_m - a.elevation_m);
    }
  }
  return profile.back().elevation_m;
}

// Hydraulic resistance per metre of a section relative to the first: f/D^5.
double ResistancePerMetre(const PipeSection& s) {
  const double d = s.inside_diameter_m();
  const double f = FullyRoughFriction(s.roughness_m / d);
  return f / std::pow(d, 5.0);
}

}  // namespace

bool SegmentInventory::StrapVolume(const std::vector<StrapPoint>& table, double level_m,
                                   double* volume_m3, double* dv_dl_m2) {
  const size_t n = table.size();
  if (n < 2 || !(level_m >= table.front().level_m) || !(level_m <= table.back().level_m)) {
    if (n >= 2) {
      const bool low = !(level_m >= table.front().level_m);
      const StrapPoint& a = low ? table[0] : table[n - 2];
      const StrapPoint& b = low ? table[1] : table[n - 1];
      *dv_dl_m2 = (b.volume_m3 - a.volume_m3) / (b.level_m - a.level_m);
      *volume_m3 = low ? a.volume_m3 : b.volume_m3;
    } else {
      *volume_m3 = 0.0;
      *dv_dl_m2 = 0.0;
    }
    return false;
  }
  // Binary search for the bracketing rows.
  size_t lo = 0, hi = n - 1;
  while (hi - lo > 1) {
    const size_t mid = (lo + hi) / 2;
    if (table[mid].level_m <= level_m) lo = mid; else hi = mid;
  }
  const StrapPoint& a = table[lo];
  const StrapPoint& b = table[hi];
  const double slope = (b.volume_m3 - a.volume_m3) / (b.level_m - a.level_m);
  *volume_m3 = a.volume_m3 + slope * (level_m - a.level_m);
  *dv_dl_m2 = slope;
  return true;
}

bool SegmentInventory::Init(const Site& site, int segment, const DensityTable* table,
                            std::string* why) {
  auto fail = [&](const std::string& m) {
    if (why) *why = m;
    return false;
  };
  if (segment < 0 || segment >= static_cast<int>(site.segments.size())) return fail("no such segment");
  if (table == nullptr || !table->built()) return fail("density table not built");
  site_ = &site;
  seg_ = &site.segments[segment];
  table_ = table;
  p_atm_ = site.atmospheric_pressure_pa;
  const SegmentSpec& seg = *seg_;
  if (seg.sections.empty()) return fail("segment " + seg.id + " has no pipe sections");
  if (seg.pressure_gauges.empty()) return fail("segment " + seg.id + " has no pressure points");
  if (!(seg.reach_length_m > 0.0)) return fail("segment " + seg.id + ": reach length must be positive");
  transport_ = std::isfinite(seg.ground_temperature_k) && std::isfinite(seg.thermal_time_constant_s);

  // Reach grid.
  x_.clear(); dx_.clear(); z_.clear(); a0_.clear(); compliance_.clear();
  wall_alpha2_.clear(); s_.clear(); area_sec_.clear();
  const double r0 = ResistancePerMetre(seg.sections.front());
  std::vector<double> sec_start_x, sec_start_s, sec_rate;
  double x0 = 0.0, s0 = 0.0;
  for (size_t k = 0; k < seg.sections.size(); ++k) {
    const PipeSection& sec = seg.sections[k];
    const double rate = ResistancePerMetre(sec) / r0;
    sec_start_x.push_back(x0);
    sec_start_s.push_back(s0);
    sec_rate.push_back(rate);
    const int n = std::max(1, static_cast<int>(std::ceil(sec.length_m / seg.reach_length_m - 1e-9)));
    const double dx = sec.length_m / n;
    for (int i = 0; i < n; ++i) {
      const double xm = x0 + (i + 0.5) * dx;
      x_.push_back(xm);
      dx_.push_back(dx);
      z_.push_back(ElevationAt(seg.profile, xm));
      a0_.push_back(sec.flow_area_m2());
      compliance_.push_back(sec.wall_compliance_per_pa());
      wall_alpha2_.push_back(2.0 * sec.wall_thermal_expansion_per_k);
      s_.push_back(s0 + (i + 0.5) * dx * rate);
      area_sec_.push_back(static_cast<int>(k));
    }
    x0 += sec.length_m;
    s0 += sec.length_m * rate;
  }
  auto s_at = [&](double x) {
    size_t k = 0;
    while (k + 1 < sec_start_x.size() && x >= sec_start_x[k + 1]) ++k;
    return sec_start_s[k] + (x - sec_start_x[k]) * sec_rate[k];
  };
  const int n = static_cast<int>(x_.size());

  // Pressure interpolation weights in the resistance coordinate.
  const int gp = static_cast<int>(seg.pressure_gauges.size());
  gauge_s_.assign(gp, 0.0);
  for (int j = 0; j < gp; ++j) gauge_s_[j] = s_at(seg.pressure_gauges[j].chainage_m);
  p_lo_.assign(n, 0); p_hi_.assign(n, 0); p_w_.assign(n, 0.0);
  for (int i = 0; i < n && gp > 1; ++i) {
    int j = 0;
    while (j + 2 < gp && s_[i] > gauge_s_[j + 1]) ++j;
    const double ds = gauge_s_[j + 1] - gauge_s_[j];
    p_lo_[i] = j;
    p_hi_[i] = j + 1;
    p_w_[i] = ds > 0.0 ? (s_[i] - gauge_s_[j]) / ds : 0.0;  // < 0 or > 1 extrapolates
  }
  gauge_p_.assign(gp, 0.0);
  p_usable_.assign(gp, 1);
  // Contiguous runs of reaches sharing a gauge pair.
  p_span_begin_.clear();
  for (int i = 0; i < n; ++i)
    if (i == 0 || p_lo_[i] != p_lo_[i - 1] || p_hi_[i] != p_hi_[i - 1]) p_span_begin_.push_back(i);
  p_span_begin_.push_back(n);
  g_dz_.assign(n, 0.0);
  vol0_.assign(n, 0.0);
  for (int i = 0; i < n; ++i) {
    const GaugeSpec& lo = seg.pressure_gauges[p_lo_[i]];
    const GaugeSpec& hi = seg.pressure_gauges[p_hi_[i]];
    const double z_lin = lo.elevation_m + p_w_[i] * (hi.elevation_m - lo.elevation_m);
    g_dz_[i] = kStandardGravity_m_s2 * (z_[i] - z_lin);
    vol0_[i] = a0_[i] * dx_[i];
  }
  gauge_head_rho_.assign(gp, 0.0);
  p_gauge_reach_.assign(gp, 0);
  for (int j = 0; j < gp; ++j) {
    const auto it = std::lower_bound(x_.begin(), x_.end(), seg.pressure_gauges[j].chainage_m);
    p_gauge_reach_[j] = std::min(static_cast<int>(it - x_.begin()), n - 1);
  }

  // Temperature interpolation weights in chainage (held beyond the end gauges).
  const int gt = static_cast<int>(seg.temperature_gauges.size());
  t_lo_.assign(n, 0); t_hi_.assign(n, 0); t_w_.assign(n, 0.0);
  e_w_lo_.assign(n, 0.0); e_w_hi_.assign(n, 0.0);
  auto fade = [](double d) { return std::exp(-std::fabs(d) / kTemperatureResidualLength_m); };
  for (int i = 0; i < n && gt > 0; ++i) {
    const double xi = x_[i];
    if (gt == 1 || xi <= seg.temperature_gauges.front().chainage_m) {
      e_w_lo_[i] = fade(seg.temperature_gauges.front().chainage_m - xi);
      continue;  // lo = hi = 0
    }
    if (xi >= seg.temperature_gauges.back().chainage_m) {
      t_lo_[i] = t_hi_[i] = gt - 1;
      e_w_lo_[i] = fade(xi - seg.temperature_gauges.back().chainage_m);
      continue;
    }
    int j = 0;
    while (j + 2 < gt && xi > seg.temperature_gauges[j + 1].chainage_m) ++j;
    const double dxg = seg.temperature_gauges[j + 1].chainage_m - seg.temperature_gauges[j].chainage_m;
    t_lo_[i] = j;
    t_hi_[i] = j + 1;
    t_w_[i] = dxg > 0.0 ? (xi - seg.temperature_gauges[j].chainage_m) / dxg : 0.0;
    e_w_lo_[i] = (1.0 - t_w_[i]) * fade(xi - seg.temperature_gauges[j].chainage_m);
    e_w_hi_[i] = t_w_[i] * fade(seg.temperature_gauges[j + 1].chainage_m - xi);
  }
  // Where each temperature gauge sits on the reach grid (for model residuals).
  t_gauge_reach_lo_.assign(gt, 0);
  t_gauge_reach_w_.assign(gt, 0.0);
  t_gauge_x_.assign(gt, 0.0);
  for (int j = 0; j < gt; ++j) {
    const double xg = seg.temperature_gauges[j].chainage_m;
    t_gauge_x_[j] = xg;
    if (n == 1 || xg <= x_.front()) continue;
    if (xg >= x_.back()) { t_gauge_reach_lo_[j] = n - 2; t_gauge_reach_w_[j] = 1.0; continue; }
    int i = 0;
    while (i + 2 < n && xg > x_[i + 1]) ++i;
    t_gauge_reach_lo_[j] = i;
    t_gauge_reach_w_[j] = (xg - x_[i]) / (x_[i + 1] - x_[i]);
  }
  gauge_t_filtered_.assign(gt, 0.0);
  t_usable_.assign(gt, 1);
  gauge_t_init_.assign(gt, 0);
  gauge_t_resid_.assign(gt, 0.0);

  // Parcel rings: stretches between lateral meters, about 4 parcels per reach.
  {
    std::vector<double> cuts;  // chainages of laterals strictly inside the line
    const double length = x_.back() + 0.5 * dx_.back();
    for (const MeterSpec& m : seg.meters) {
      if ((m.role == MeterRole::kDelivery || m.role == MeterRole::kInjection) && m.chainage_m > 0.0 &&
          m.chainage_m < length)
        cuts.push_back(m.chainage_m);
    }
    std::sort(cuts.begin(), cuts.end());
    cuts.erase(std::unique(cuts.begin(), cuts.end()), cuts.end());
    const int ns = static_cast<int>(cuts.size()) + 1;
    stretches_.assign(transport_ ? ns : 0, Stretch{});
    reach_stretch_.assign(n, 0);
    for (int i = 0; i < n; ++i) {
      int st = 0;
      while (st < static_cast<int>(cuts.size()) && x_[i] > cuts[st]) ++st;
      reach_stretch_[i] = st;
    }
    reach_parcel_pos_.assign(n, 0.0);
    int first_cell = 0;
    for (int st = 0; st < static_cast<int>(stretches_.size()); ++st) {
      Stretch& sc = stretches_[st];
      double vol = 0.0;
      int reaches = 0;
      sc.entry_reach = -1;
      for (int i = 0; i < n; ++i) {
        if (reach_stretch_[i] != st) continue;
        if (sc.entry_reach < 0) sc.entry_reach = i;
        sc.exit_reach = i;
        vol += a0_[i] * dx_[i];
        ++reaches;
      }
      if (sc.entry_reach < 0) { sc.entry_reach = sc.exit_reach = 0; }
      sc.cells = std::max(8, 4 * reaches);
      sc.cell_m3 = vol > 0.0 ? vol / sc.cells : 1.0;
      sc.first_cell = first_cell;
      first_cell += sc.cells;
      double v = 0.0;
      for (int i = 0; i < n; ++i) {
        if (reach_stretch_[i] != st) continue;
        reach_parcel_pos_[i] = (v + 0.5 * a0_[i] * dx_[i]) / sc.cell_m3 - 0.5;
        v += a0_[i] * dx_[i];
      }
      const double start = st == 0 ? 0.0 : cuts[st - 1];
      for (size_t m = 0; m < seg.meters.size(); ++m) {
        const MeterSpec& ms = seg.meters[m];
        const bool lateral = ms.role == MeterRole::kDelivery || ms.role == MeterRole::kInjection;
        if (ms.role == MeterRole::kInlet || (lateral && ms.chainage_m <= start && (st > 0 || ms.chainage_m <= 0.0)))
          sc.feeding_meters.push_back(static_cast<int>(m));
      }
    }
    parcel_dt_.assign(transport_ ? first_cell : 0, 0.0);
  }
  parcels_init_ = false;
  last_relax_dt_ = -1.0;
  p_.assign(n, p_atm_);
  temp_.assign(n, kWallReferenceTemperature_k);
  temp_model_.assign(n, kWallReferenceTemperature_k);
  rho_.assign(n, 1000.0);
  update_count_ = 0;
  dm_dp_.assign(gp, 0.0);
  dm_dt_.assign(gt, 0.0);
  dm_dlevel_.assign(seg.tanks.size(), 0.0);
  sigma_p_.assign(gp, 0.0);
  sigma_t_.assign(gt, 0.0);
  sigma_level_.assign(seg.tanks.size(), 0.0);
  for (int j = 0; j < gp; ++j) sigma_p_[j] = site.points[seg.pressure_gauges[j].point].random_sigma;
  for (int j = 0; j < gt; ++j) sigma_t_[j] = site.points[seg.temperature_gauges[j].point].random_sigma;
  tank_t_filtered_.assign(seg.tanks.size(), 0.0);
  tank_t_init_.assign(seg.tanks.size(), 0);
  tank_sigma_t_.assign(seg.tanks.size(), 0.0);
  for (size_t k = 0; k < seg.tanks.size(); ++k) {
    sigma_level_[k] = site.points[seg.tanks[k].level_point].random_sigma;
    if (seg.tanks[k].temperature_point >= 0)
      tank_sigma_t_[k] = site.points[seg.tanks[k].temperature_point].random_sigma;
  }
  filter_decay_ = 0.0;
  last_dt_ = -1.0;
  result_ = InventoryResult{};
  return true;
}

void SegmentInventory::UpdatePressures(const Aligner& aligner, double t) {
  const SegmentSpec& seg = *seg_;
  const int gp = static_cast<int>(seg.pressure_gauges.size());
  for (int j = 0; j < gp; ++j) {
    const int pt = seg.pressure_gauges[j].point;
    const HeldValue& h = aligner.held(pt);
    p_usable_[j] = 1;
    if (!h.has_value) {
      result_.flags |= kInvPressureMissing;
      p_usable_[j] = 0;
    } else if (!aligner.Usable(pt, t)) {
      result_.flags |= kInvPressureStale;  // the last good value stands in
      p_usable_[j] = 0;
    }
    const double p = h.has_value ? h.value_si : p_atm_;
    gauge_p_[j] = p;
    // Density at the gauge, at the temperature of the nearest reach (last tick).
    table_->DensityOnly(p, temp_[p_gauge_reach_[j]], &gauge_head_rho_[j]);
  }
  // Span by span (reaches between the same two gauges are contiguous), so
  // the inner loop is a plain vectorisable sweep.
  const int spans = static_cast<int>(p_span_begin_.size()) - 1;
  const double* w = p_w_.data();
  const double* gdz = g_dz_.data();
  double* out = p_.data();
  for (int sp = 0; sp < spans; ++sp) {
    const int b = p_span_begin_[sp], e = p_span_begin_[sp + 1];
    if (b == e) continue;
    const int lo = p_lo_[b], hi = p_hi_[b];
    const double p0 = gauge_p_[lo], dp = gauge_p_[hi] - p0;
    const double r0 = gauge_head_rho_[lo], dr = gauge_head_rho_[hi] - r0;
    for (int i = b; i < e; ++i) out[i] = p0 + w[i] * dp - (r0 + w[i] * dr) * gdz[i];  // g_dz_ = g (z - z_gauges)
  }
}

void SegmentInventory::UpdateTemperatures(const Aligner& aligner, double t, double dt,
                                          const double* meter_flow_kg_s) {
  const SegmentSpec& seg = *seg_;
  const int gt = static_cast<int>(seg.temperature_gauges.size());
  const int n = static_cast<int>(x_.size());
  if (dt != last_dt_) {
    filter_decay_ = (seg.temperature_filter_s > 0.0 && dt > 0.0) ? std::exp(-dt / seg.temperature_filter_s) : 0.0;
    last_dt_ = dt;
  }
  for (int j = 0; j < gt; ++j) {
    const int pt = seg.temperature_gauges[j].point;
    const HeldValue& h = aligner.held(pt);
    if (!h.has_value) {
      result_.flags |= kInvTemperatureMissing;
      continue;
    }
    t_usable_[j] = aligner.Usable(pt, t) ? 1 : 0;
    if (!t_usable_[j]) result_.flags |= kInvTemperatureStale;  // the last good value stands in
    if (!gauge_t_init_[j]) {
      gauge_t_filtered_[j] = h.value_si;
      gauge_t_init_[j] = 1;

    } else {
      gauge_t_filtered_[j] = h.value_si + filter_decay_ * (gauge_t_filtered_[j] - h.value_si);
    }
  }
  if (gt == 0) return;
  const double* y = gauge_t_filtered_.data();
  bool all_init = true;
  for (int j = 0; j < gt; ++j) all_init = all_init && gauge_t_init_[j];
  // Transport starts once every transmitter has reported (the parcels are
  // seeded from their profile); until then the profile is linear.
  if (!transport_ || !all_init) {
    for (int i = 0; i < n; ++i) temp_[i] = (1.0 - t_w_[i]) * y[t_lo_[i]] + t_w_[i] * y[t_hi_[i]];
    return;
  }
  // Transport with relaxation towards ground temperature (parcel rings).
  const double tg = seg.ground_temperature_k;
  double* cell = parcel_dt_.data();
  const int ns = static_cast<int>(stretches_.size());
  if (!parcels_init_) {
    // Seed every parcel from the transmitters' linear profile.
    for (int i = 0; i < n; ++i) temp_model_[i] = (1.0 - t_w_[i]) * y[t_lo_[i]] + t_w_[i] * y[t_hi_[i]];
    for (const Stretch& sc : stretches_) {
      for (int p = 0; p < sc.cells; ++p) {
        // Parcel centre in reach terms: find the reach holding it.
        const double pos = p;  // parcel index ~ reach_parcel_pos_ units
        int best = sc.entry_reach;
        for (int i = sc.entry_reach; i <= sc.exit_reach; ++i)
          if (reach_parcel_pos_[i] <= pos) best = i;
        cell[sc.first_cell + p] = temp_model_[best] - tg;
      }
    }
    for (Stretch& sc : stretches_) { sc.head = 0; sc.acc_m3 = 0.0; }
    parcels_init_ = true;
  } else if (dt > 0.0) {
    if (dt != last_relax_dt_) {
      relax_ = std::exp(-dt / seg.thermal_time_constant_s);
      last_relax_dt_ = dt;
    }
    // Downstream stretches first: what enters a stretch this tick is what sat
    // at the end of its neighbour before the neighbour moved.
    for (int st = ns - 1; st >= 0; --st) {
      Stretch& sc = stretches_[st];
      double q = 0.0;
      for (int m : sc.feeding_meters) q += meter_flow_kg_s[m];
      const int entry = q >= 0.0 ? sc.entry_reach : sc.exit_reach;
      sc.acc_m3 += q / rho_[entry] * dt;
      double* c = cell + sc.first_cell;
      const int nc = sc.cells;
      double in_fwd = y[0] - tg;
      if (st > 0) {
        const Stretch& up = stretches_[st - 1];
        const int last = up.head + up.cells - 1 >= up.cells ? up.head - 1 : up.head + up.cells - 1;
        in_fwd = cell[up.first_cell + last];
      }
      double in_rev = y[gt - 1] - tg;
      if (st + 1 < ns) {
        const Stretch& dn = stretches_[st + 1];
        in_rev = cell[dn.first_cell + dn.head];
      }
      int guard = 0;
      while (sc.acc_m3 >= sc.cell_m3 && guard++ < nc) {
        sc.head = sc.head == 0 ? nc - 1 : sc.head - 1;
        c[sc.head] = in_fwd;  // new parcel at the stretch's upstream end
        sc.acc_m3 -= sc.cell_m3;
      }
      while (sc.acc_m3 <= -sc.cell_m3 && guard++ < nc) {
        c[sc.head] = in_rev;  // new parcel at the downstream end
        sc.head = sc.head + 1 == nc ? 0 : sc.head + 1;
        sc.acc_m3 += sc.cell_m3;
      }
      if (guard >= nc) sc.acc_m3 = 0.0;  // more than the stretch's volume in one tick
    }
    const int total = static_cast<int>(parcel_dt_.size());
    for (int p = 0; p < total; ++p) cell[p] *= relax_;
  }
  // Reach temperatures from the parcels (the fraction carried over shifts them).
  for (int i = 0; i < n; ++i) {
    const Stretch& sc = stretches_[reach_stretch_[i]];
    const int nc = sc.cells;
    double pos = reach_parcel_pos_[i] - sc.acc_m3 / sc.cell_m3;
    if (pos < 0.0) pos = 0.0;
    if (pos > nc - 1.0) pos = nc - 1.0;
    int p0 = static_cast<int>(pos);
    if (p0 > nc - 2) p0 = nc - 2;
    const double w = pos - p0;
    int k0 = sc.head + p0;
    if (k0 >= nc) k0 -= nc;
    const int k1 = k0 + 1 == nc ? 0 : k0 + 1;
    const double* c = cell + sc.first_cell;
    temp_model_[i] = tg + (1.0 - w) * c[k0] + w * c[k1];
  }
  // Correct the modelled profile by the transmitters' residuals.
  for (int j = 0; j < gt; ++j) {
    const int i = t_gauge_reach_lo_[j];
    const double w = t_gauge_reach_w_[j];
    const double model = n == 1 ? temp_model_[0] : (1.0 - w) * temp_model_[i] + w * temp_model_[i + 1];
    gauge_t_resid_[j] = y[j] - model;
  }
  const double* e = gauge_t_resid_.data();
  for (int i = 0; i < n; ++i)
    temp_[i] = temp_model_[i] + e_w_lo_[i] * e[t_lo_[i]] + e_w_hi_[i] * e[t_hi_[i]];
}

const InventoryResult& SegmentInventory::Update(const Aligner& aligner, double t, double dt,
                                                const double* meter_flow_kg_s) {
  result_.flags = 0;
  result_.source_step_kg = 0.0;
  UpdatePressures(aligner, t);
  UpdateTemperatures(aligner, t, dt, meter_flow_kg_s);

  const int n = static_cast<int>(x_.size());
  const bool have_t = !seg_->temperature_gauges.empty();
  // Sensitivities move slowly with the state: refresh them on the first tick
  // and every kSensitivityEveryTicks ticks; the mass itself every tick.
  const bool refresh = (update_count_++ % kSensitivityEveryTicks) == 0;
  double mass = 0.0, p_sum = 0.0, t_sum = 0.0, len = 0.0;
  bool clamped = false;
  if (refresh) {
    std::fill(dm_dp_.begin(), dm_dp_.end(), 0.0);
    std::fill(dm_dt_.begin(), dm_dt_.end(), 0.0);
    FluidState st;
    for (int i = 0; i < n; ++i) {
      const double p = p_[i], temp = temp_[i], dx = dx_[i];
      clamped |= !table_->Evaluate(p, temp, &st);
      const double fp = 1.0 + compliance_[i] * (p - p_atm_);
      const double ft = 1.0 + wall_alpha2_[i] * (temp - kWallReferenceTemperature_k);
      const double area = a0_[i] * fp * ft;
      mass += st.density_kg_m3 * area * dx;
      rho_[i] = st.density_kg_m3;
      const double dmdp = dx * (st.ddensity_dp_kg_m3_pa * area + st.density_kg_m3 * a0_[i] * compliance_[i] * ft);
      const double dmdt = dx * (st.ddensity_dt_kg_m3_k * area + st.density_kg_m3 * a0_[i] * fp * wall_alpha2_[i]);
      const double w = p_w_[i];
      dm_dp_[p_lo_[i]] += (1.0 - w) * dmdp;
      dm_dp_[p_hi_[i]] += w * dmdp;
      if (have_t) {
        const double wt = t_w_[i];
        dm_dt_[t_lo_[i]] += (1.0 - wt) * dmdt;
        dm_dt_[t_hi_[i]] += wt * dmdt;
      }
      p_sum += p * dx;
      t_sum += temp * dx;
      len += dx;
    }
  } else {
    for (int i = 0; i < n; ++i) {
      const double p = p_[i], temp = temp_[i], dx = dx_[i];
      double rho;
      clamped |= !table_->DensityOnly(p, temp, &rho);
      mass += rho * vol0_[i] * (1.0 + compliance_[i] * (p - p_atm_)) *
              (1.0 + wall_alpha2_[i] * (temp - kWallReferenceTemperature_k));
      rho_[i] = rho;
      p_sum += p * dx;
      t_sum += temp * dx;
      len += dx;
    }
  }
  if (clamped) result_.flags |= kInvOutsideFluidTable;
  result_.linepack_kg = mass;
  result_.mean_pressure_pa = p_sum / len;
  result_.mean_temperature_k = t_sum / len;

  // Tanks.
  double tank = 0.0;
  double var_p = 0.0, var_t_tank = 0.0;
  const auto& tanks = seg_->tanks;
  for (size_t k = 0; k < tanks.size(); ++k) {
    const TankSpec& tk = tanks[k];
    const HeldValue& h = aligner.held(tk.level_point);
    if (!h.has_value) { result_.flags |= kInvLevelMissing; dm_dlevel_[k] = 0.0; continue; }
    if (!aligner.Usable(tk.level_point, t)) result_.flags |= kInvLevelStale;
    double vol = 0.0, dvdl = 0.0;
    if (!StrapVolume(tk.strapping, h.value_si, &vol, &dvdl)) result_.flags |= kInvLevelOutsideTable;
    // Tank temperature: its own transmitter through the same first-order
    // filter as the line's, else the line's inlet temperature.
    double temp_k = have_t ? gauge_t_filtered_[0] : kWallReferenceTemperature_k;
    double substitute_k = kNaN;  // the temperature used until now, when the own thermometer takes over
    if (tk.temperature_point >= 0 && aligner.held(tk.temperature_point).has_value) {
      const double raw = aligner.value(tk.temperature_point);
      if (!tank_t_init_[k] && update_count_ > 1) substitute_k = temp_k;
      tank_t_filtered_[k] = tank_t_init_[k] ? raw + filter_decay_ * (tank_t_filtered_[k] - raw) : raw;
      tank_t_init_[k] = 1;
      temp_k = tank_t_filtered_[k];
    } else if (tk.temperature_point >= 0) {
      result_.flags |= kInvTankTemperatureSubstituted;
    }
    FluidState st_tank;
    if (!table_->Evaluate(p_atm_, temp_k, &st_tank)) result_.flags |= kInvOutsideFluidTable;
    const double rho = st_tank.density_kg_m3;
    if (std::isfinite(substitute_k)) result_.source_step_kg += vol * (rho - table_->Density(p_atm_, substitute_k));
    tank += vol * rho;
    dm_dlevel_[k] = dvdl * rho;
    var_p += (dm_dlevel_[k] * sigma_level_[k]) * (dm_dlevel_[k] * sigma_level_[k]);
    if (tk.temperature_point >= 0) {
      const double dmdt_tank = vol * st_tank.ddensity_dt_kg_m3_k * tank_sigma_t_[k];
      var_t_tank += dmdt_tank * dmdt_tank;
    }
  }
  result_.tank_kg = tank;

  // A transmitter whose last good value stands in is trusted much less: its
  // sigma is inflated by kSubstitutedSigmaFactor (sensitivity stated honestly).
  for (size_t j = 0; j < dm_dp_.size(); ++j) {
    const double sp = sigma_p_[j] * (p_usable_[j] ? 1.0 : kSubstitutedSigmaFactor);
    var_p += (dm_dp_[j] * sp) * (dm_dp_[j] * sp);
  }
  // First-order filter y += a (x - y), a = 1 - decay: var(y) = var(x) * a / (2 - a).
  const double a = 1.0 - filter_decay_;
  const double filter_var = a / (2.0 - a);
  double var_t = 0.0;
  for (size_t j = 0; j < dm_dt_.size(); ++j) {
    const double st = sigma_t_[j] * (t_usable_[j] ? 1.0 : kSubstitutedSigmaFactor);
    var_t += (dm_dt_[j] * st) * (dm_dt_[j] * st);
  }
  result_.sigma_pressure_kg = std::sqrt(var_p);
  result_.sigma_temperature_kg = std::sqrt((var_t + var_t_tank) * filter_var);
  return result_;
}

}  // namespace holdfast
