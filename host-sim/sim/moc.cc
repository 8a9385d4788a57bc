// Method of characteristics for elastic liquid pipelines. See moc.h for the
// equations and their sources; the comments here explain the discretisation.
#include "moc.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <string>
#include <utility>

namespace holdfast::sim {
namespace {

constexpr double kG = kStandardGravity_m_s2;
constexpr double kWallReferenceTemperature_k = 288.15;  // as the core's inventory
constexpr double kLowPressure_pa = 0.2e5;               // about vapour pressure of crude, absolute
constexpr double kFrictionReMin = 1000.0;               // friction factor held below this Re
constexpr double kFrictionReMax = 1.0e9;
constexpr double kFrictionRatio = 1.004;                // table step in Re (geometric)
constexpr int kMaxNodes = 5000000;

std::string Fmt(const char* fmt, double a, double b = 0.0, double c = 0.0) {
  char buf[256];
  std::snprintf(buf, sizeof buf, fmt, a, b, c);
  return buf;
}

double ElevationAt(const std::vector<ElevationPoint>& profile, double x) {
  if (profile.empty()) return 0.0;
  if (x <= profile.front().chainage_m) return profile.front().elevation_m;
  for (size_t i = 1; i < profile.size(); ++i) {
    const ElevationPoint& a = profile[i - 1];
    const ElevationPoint& b = profile[i];
    if (x <= b.chainage_m) {
      const double w = (x - a.chainage_m) / (b.chainage_m - a.chainage_m);
      return a.elevation_m + w * (b.elevation_m - a.elevation_m);
    }
  }
  return profile.back().elevation_m;
}

// Solves alpha*m + beta*m|m| = r for m (alpha > 0, beta >= 0), in the form
// that does not cancel for small beta.
inline double SolveSignedQuadratic(double alpha, double beta, double r) {
  if (beta <= 0.0) return r / alpha;
  const double ar = std::fabs(r);
  const double m = 2.0 * ar / (alpha + std::sqrt(alpha * alpha + 4.0 * beta * ar));
  return r >= 0.0 ? m : -m;
}

inline double RampFraction(double t, double onset, double ramp) {
  if (t < onset) return 0.0;
  if (ramp <= 0.0) return 1.0;
  return std::min(1.0, (t - onset) / ramp);
}

}  // namespace

// --- Channel and temperature schedule ---------------------------------------

void Channel::AddRamp(double start_s, double duration_s, double target) {
  ramps_.push_back(Ramp{start_s, std::max(0.0, duration_s), target});
}

double Channel::At(double t_s) const {
  // Active ramp: from (t0, v0) to (t1, v1); before any ramp the value is constant.
  double t0 = -kInfinity, v0 = initial_, t1 = -kInfinity, v1 = initial_;
  auto eval = [&](double t) {
    if (t >= t1) return v1;
    return v0 + (v1 - v0) * (t - t0) / (t1 - t0);
  };
  for (const Ramp& r : ramps_) {
    if (r.start_s > t_s) break;
    const double v_start = eval(r.start_s);
    t0 = r.start_s;
    v0 = v_start;
    t1 = r.start_s + r.duration_s;
    v1 = r.target;
  }
  return eval(t_s);
}

double TemperatureSchedule::At(double t_s) const {
  double v = 288.15;
  const size_t n = times_s.size();
  if (n > 0) {
    if (t_s <= times_s.front()) {
      v = values_k.front();
    } else if (t_s >= times_s.back()) {
      v = values_k.back();
    } else {
      size_t k = 1;
      while (k < n && times_s[k] < t_s) ++k;
      const double w = (t_s - times_s[k - 1]) / (times_s[k] - times_s[k - 1]);
      v = values_k[k - 1] + w * (values_k[k] - values_k[k - 1]);
    }
  }
  if (swing_amplitude_k != 0.0) {
    constexpr double kTwoPi = 6.283185307179586;
    v += swing_amplitude_k * std::sin(kTwoPi * (t_s - swing_phase_s) / swing_period_s);
  }
  return v;
}

// --- Setup checks -------------------------------------------------------------

bool MocSetup::IsValid(std::string* why) const {
  auto fail = [&](const std::string& s) {
    if (why) *why = s;
    return false;
  };
  if (sections.empty()) return fail("no pipe sections");
  double length = 0.0;
  for (const PipeSection& s : sections) {
    if (!(s.length_m > 0.0) || !(s.inside_diameter_m() > 0.0) || !(s.wall_thickness_m > 0.0))
      return fail("a pipe section has a non-positive length, bore or wall");
    length += s.length_m;
  }
  if (fluid.kind == FluidKind::kNaturalGas)
    return fail("the simulator models liquid lines only (the segment's fluid is natural gas)");
  std::string fwhy;
  if (!fluid.IsValid(&fwhy)) return fail("fluid: " + fwhy);
  if (!(fluid.viscosity_pa_s > 0.0)) return fail("fluid viscosity must be positive");
  if (!(time_step_hint_s > 0.0)) return fail("time step hint must be positive");
  if (!(wave_speed_tolerance > 0.0 && wave_speed_tolerance <= 0.2))
    return fail("wave speed tolerance must be in (0, 0.2]");
  if (!(property_step_s > 0.0)) return fail("property step must be positive");
  if (!(parcel_spacing_m > 0.0)) return fail("parcel spacing must be positive");
  if (!(friction_scale >= 0.0)) return fail("friction scale must not be negative");
  if (inlet_temperature.times_s.empty() || inlet_temperature.times_s.size() != inlet_temperature.values_k.size())
    return fail("inlet temperature schedule is empty");
  if (!(thermal_time_constant_s > 0.0)) return fail("thermal time constant must be positive");
  if (std::isfinite(thermal_time_constant_s) && !std::isfinite(ground_temperature_k))
    return fail("a thermal time constant needs a ground temperature");
  if (upstream.type == UpstreamType::kPump && !(upstream.shutoff_head_m > 0.0 && upstream.curve_c_s2_m5 >= 0.0))
    return fail("pump: shut-off head must be positive and the curve coefficient not negative");
  if (upstream.type == UpstreamType::kFlow && downstream.type == DownstreamType::kFlow)
    return fail("flow boundaries at both ends leave the pressure undetermined; make one end a reservoir, pump or tank");
  if (downstream.type == DownstreamType::kTank) {
    const auto& s = downstream.strapping;
    if (s.size() < 2) return fail("tank: strapping table needs at least two rows");
    for (size_t i = 1; i < s.size(); ++i)
      if (!(s[i].level_m > s[i - 1].level_m && s[i].volume_m3 > s[i - 1].volume_m3))
        return fail("tank: strapping table must increase in level and volume");
    if (!(downstream.tank_initial_level_m >= 0.0)) return fail("tank: initial level must not be negative");
  }
  if (!(downstream.valve_cda_m2 >= 0.0)) return fail("valve: CdA must not be negative");
  for (const LateralSetup& l : laterals)
    if (!(l.chainage_m >= 0.0 && l.chainage_m <= length + 1e-6)) return fail("a lateral lies outside the line");
  for (const LeakSetup& l : leaks) {
    if (!(l.chainage_m >= 0.0 && l.chainage_m <= length + 1e-6)) return fail("a leak lies outside the line");
    if (!(l.ramp_s >= 0.0)) return fail("a leak ramp must not be negative");
    if (!((std::isfinite(l.cda_m2) && l.cda_m2 >= 0.0) || (std::isfinite(l.rate_kg_s) && l.rate_kg_s >= 0.0)))
      return fail("a leak needs an orifice (CdA) or a rate");
  }
  return true;
}

// --- Grid -----------------------------------------------------------------------

bool MocModel::BuildGrid(double p_ref, double t_ref, std::string* why) {
  const MocSetup& s = setup_;
  const size_t ns = s.sections.size();
  std::vector<double> a(ns);
  const double rho = FluidDensity(s.fluid, p_ref, t_ref);
  const double kappa = FluidCompressibility(s.fluid, p_ref, t_ref);
  if (!(rho > 0.0) || !(kappa > 0.0)) {
    *why = "the fluid model gives no density or compressibility at the reference state";
    return false;
  }
  for (size_t i = 0; i < ns; ++i) a[i] = WaveSpeed(1.0 / kappa, rho, s.sections[i]);

  // The time step: the largest dt <= hint for which every section's wave speed
  // needs an adjustment within the tolerance (Wylie & Streeter, ch. 3:
  // adjust the wave speed rather than interpolate). Each section in turn
  // anchors the step with an exact whole number of reaches.
  double best_dt = 0.0, best_adj = kInfinity, best_dt_any = 0.0;
  for (size_t anchor = 0; anchor < ns; ++anchor) {
    const double la = s.sections[anchor].length_m;
    const double n_min = std::max(1.0, std::ceil(la / (a[anchor] * s.time_step_hint_s) - 1e-9));
    for (double n = n_min; n < 4.0 * n_min + 64.0; n += 1.0) {
      const double dt = la / (a[anchor] * n);
      double adj = 0.0, nodes = 0.0;
      for (size_t i = 0; i < ns; ++i) {
        const double reaches = std::max(1.0, std::round(s.sections[i].length_m / (a[i] * dt)));
        adj = std::max(adj, std::fabs(s.sections[i].length_m / (reaches * dt) / a[i] - 1.0));
        nodes += reaches + 1.0;
      }
      if (nodes > kMaxNodes) break;
      if (adj <= s.wave_speed_tolerance) {
        if (dt > best_dt) best_dt = dt;
        break;
      }
      if (adj < best_adj) {
        best_adj = adj;
        best_dt_any = dt;
      }
    }
  }
  if (!(best_dt > 0.0)) {
    *why = Fmt("no time step at or below %.4g s gives every section a wave speed within %.3g %% of its own", s.time_step_hint_s,
               100.0 * s.wave_speed_tolerance) +
           (best_dt_any > 0.0 ? Fmt(" (best: %.3g %% at %.4g s); raise the tolerance or lower the step", 100.0 * best_adj, best_dt_any)
                              : std::string());
    return false;
  }
  dt_ = best_dt;
  n_prop_ = std::max(1, static_cast<int>(std::lround(s.property_step_s / dt_)));

  grid_.assign(ns, GridSection{});
  length_m_ = 0.0;
  for (size_t i = 0; i < ns; ++i) {
    GridSection& g = grid_[i];
    g.length_m = s.sections[i].length_m;
    g.wave_speed_model_m_s = a[i];
    g.reaches = static_cast<int>(std::max(1.0, std::round(g.length_m / (a[i] * dt_))));
    g.dx_m = g.length_m / g.reaches;
    g.wave_speed_grid_m_s = g.dx_m / dt_;
    length_m_ += g.length_m;
  }

  // Cut points: (section, reach index). Section ends are always cuts; laterals
  // and leaks cut at their nearest node, never at the two ends of the line.
  std::vector<double> x0(ns);
  {
    double x = 0.0;
    for (size_t i = 0; i < ns; ++i) {
      x0[i] = x;
      x += grid_[i].length_m;
    }
  }
  auto locate = [&](double chainage, int* sec, int* j) -> bool {
    size_t i = 0;
    while (i + 1 < ns && chainage > x0[i] + grid_[i].length_m) ++i;
    int k = static_cast<int>(std::lround((chainage - x0[i]) / grid_[i].dx_m));
    k = std::max(0, std::min(k, grid_[i].reaches));
    int si = static_cast<int>(i);
    if (k == 0 && si > 0) {  // the start of a section is the end of the previous one
      --si;
      k = grid_[si].reaches;
    }
    if (si == 0 && k == 0) k = 1;  // never on the upstream boundary
    if (si == static_cast<int>(ns) - 1 && k == grid_[si].reaches) k = grid_[si].reaches - 1;  // nor downstream
    if (k <= 0) return false;
    *sec = si;
    *j = k;
    return true;
  };
  std::vector<std::vector<int>> cuts(ns);
  for (size_t i = 0; i + 1 < ns; ++i) cuts[i].push_back(grid_[i].reaches);
  std::vector<std::pair<int, int>> lat_cut(s.laterals.size()), leak_cut(s.leaks.size());
  for (size_t k = 0; k < s.laterals.size(); ++k) {
    int sec = 0, j = 0;
    if (!locate(s.laterals[k].chainage_m, &sec, &j)) {
      *why = "the line is too short for a lateral between its ends";
      return false;
    }
    lat_cut[k] = {sec, j};
    cuts[sec].push_back(j);
  }
  for (size_t k = 0; k < s.leaks.size(); ++k) {
    int sec = 0, j = 0;
    if (!locate(s.leaks[k].chainage_m, &sec, &j)) {
      *why = "the line is too short for a leak between its ends";
      return false;
    }
    leak_cut[k] = {sec, j};
    cuts[sec].push_back(j);
  }
  for (auto& c : cuts) {
    std::sort(c.begin(), c.end());
    c.erase(std::unique(c.begin(), c.end()), c.end());
  }

  // Pipes in flow order; consecutive pipes share a physical node, stored twice.
  pipes_.clear();
  junctions_.clear();
  std::vector<std::pair<int, int>> junction_at;  // (section, j) of each junction
  int node = 0;
  for (size_t i = 0; i < ns; ++i) {
    const PipeSection& sec = s.sections[i];
    int j_prev = 0;
    std::vector<int> ends = cuts[i];
    if (ends.empty() || ends.back() != grid_[i].reaches) ends.push_back(grid_[i].reaches);
    for (int j : ends) {
      Pipe p;
      p.section = static_cast<int>(i);
      p.begin = node;
      p.end = node + (j - j_prev);
      p.area_m2 = sec.flow_area_m2();
      p.diameter_m = sec.inside_diameter_m();
      p.a_m_s = grid_[i].wave_speed_grid_m_s;
      p.dx_m = grid_[i].dx_m;
      p.b = p.area_m2 / p.a_m_s;
      p.inv2b = 0.5 / p.b;
      p.compliance_per_pa = sec.wall_compliance_per_pa();
      p.wall_alpha2 = 2.0 * sec.wall_thermal_expansion_per_k;
      p.friction_table = static_cast<int>(i);
      pipes_.push_back(p);
      node = p.end + 1;
      if (!(i + 1 == ns && j == grid_[i].reaches)) junction_at.push_back({static_cast<int>(i), j});
      j_prev = j;
    }
  }
  n_ = node;
  for (size_t k = 0; k + 1 < pipes_.size(); ++k) {
    Junction jn;
    jn.u = pipes_[k].end;
    jn.d = pipes_[k + 1].begin;
    jn.pipe_u = static_cast<int>(k);
    jn.pipe_d = static_cast<int>(k + 1);
    junctions_.push_back(jn);
  }
  junction_lats_.clear();
  junction_leaks_.clear();
  lat_node_.assign(s.laterals.size(), 0);
  leak_node_.assign(s.leaks.size(), 0);
  for (size_t k = 0; k < junctions_.size(); ++k) {
    Junction& jn = junctions_[k];
    jn.lat_begin = static_cast<int>(junction_lats_.size());
    for (size_t l = 0; l < lat_cut.size(); ++l)
      if (lat_cut[l] == junction_at[k]) {
        junction_lats_.push_back(static_cast<int>(l));
        lat_node_[l] = jn.u;
      }
    jn.lat_end = static_cast<int>(junction_lats_.size());
    jn.leak_begin = static_cast<int>(junction_leaks_.size());
    for (size_t l = 0; l < leak_cut.size(); ++l)
      if (leak_cut[l] == junction_at[k]) {
        junction_leaks_.push_back(static_cast<int>(l));
        leak_node_[l] = jn.u;
      }
    jn.leak_end = static_cast<int>(junction_leaks_.size());
  }

  // Node arrays.
  const size_t n = static_cast<size_t>(n_);
  x_.assign(n, 0.0);
  z_.assign(n, 0.0);
  wdx_.assign(n, 0.0);
  kp_.assign(n, 0.0);
  half_dx_.assign(n, 0.0);
  gz_.assign(n, 0.0);
  std::vector<int> node_pipe(n, 0);
  for (size_t k = 0; k < pipes_.size(); ++k) {
    const Pipe& p = pipes_[k];
    const GridSection& g = grid_[static_cast<size_t>(p.section)];
    // Chainage of the pipe's first node: count reaches from the section start.
    double xs = x0[static_cast<size_t>(p.section)];
    for (size_t q = 0; q < k; ++q)
      if (pipes_[q].section == p.section) xs += (pipes_[q].end - pipes_[q].begin) * g.dx_m;
    for (int i = p.begin; i <= p.end; ++i) {
      const size_t u = static_cast<size_t>(i);
      x_[u] = xs + (i - p.begin) * g.dx_m;
      z_[u] = ElevationAt(s.profile, x_[u]);
      wdx_[u] = (i == p.begin || i == p.end) ? 0.5 * p.dx_m : p.dx_m;
      kp_[u] = p.area_m2 / (p.a_m_s * p.a_m_s);
      half_dx_[u] = 0.5 * p.dx_m;
      node_pipe[u] = static_cast<int>(k);
    }
    for (int i = p.begin; i < p.end; ++i) {
      const size_t u = static_cast<size_t>(i);
      gz_[u] = kG * p.area_m2 * (z_[u + 1] - z_[u]) / p.a_m_s;
    }
  }
  x_.back() = length_m_;
  for (int b = 0; b < 2; ++b) {
    p_[b].assign(n, 0.0);
    m_[b].assign(n, 0.0);
  }
  r_.assign(n, 0.0);
  g_.assign(n, 0.0);
  src_.assign(n, 0.0);
  rho_.assign(n, 0.0);
  re_last_.assign(n, -1.0);
  f_node_.assign(n, 0.0);
  f_hint_.assign(n, 0);
  pstar_.assign(n, 0.0);
  mu_start_.assign(n, 0.0);
  mu_target_.assign(n, 0.0);
  t_start_.assign(n, 0.0);
  t_target_.assign(n, 0.0);
  area_star_.assign(n, 0.0);
  scratch_.assign(n, 0.0);
  node_pipe_ = std::move(node_pipe);

  // Friction tables (one per section: its relative roughness).
  ftables_.assign(ns, FrictionTable{});
  for (size_t i = 0; i < ns; ++i) {
    FrictionTable& ft = ftables_[i];
    const double rr = s.sections[i].roughness_m / s.sections[i].inside_diameter_m();
    ft.re_min = kFrictionReMin;
    ft.ratio = kFrictionRatio;
    ft.log_ratio = std::log(kFrictionRatio);
    const int count = static_cast<int>(std::ceil(std::log(kFrictionReMax / kFrictionReMin) / ft.log_ratio)) + 2;
    ft.re.resize(static_cast<size_t>(count));
    ft.f.resize(static_cast<size_t>(count));
    for (int k = 0; k < count; ++k) {
      const double re = kFrictionReMin * std::pow(kFrictionRatio, k);
      ft.re[static_cast<size_t>(k)] = re;
      ft.f[static_cast<size_t>(k)] = DarcyFriction(re, rr);
    }
  }

  // Parcels: room for every parcel that can be in the line at once, with
  // margin for bunching where the flow slows down.
  const int cap = static_cast<int>(8.0 * length_m_ / s.parcel_spacing_m) + 64;
  parcel_x_.assign(static_cast<size_t>(cap), 0.0);
  parcel_t_.assign(static_cast<size_t>(cap), 0.0);
  parcel_first_ = 0;
  parcel_count_ = 0;

  lat_q_[0].assign(s.laterals.size(), 0.0);
  lat_q_[1].assign(s.laterals.size(), 0.0);
  leak_q_[0].assign(s.leaks.size(), 0.0);
  leak_q_[1].assign(s.leaks.size(), 0.0);
  leak_cda_.assign(s.leaks.size(), kNaN);
  for (size_t k = 0; k < s.leaks.size(); ++k)
    if (std::isfinite(s.leaks[k].cda_m2)) leak_cda_[k] = s.leaks[k].cda_m2;
  return true;
}

// --- Properties -------------------------------------------------------------

double MocModel::Density(double pressure_pa, double temperature_k) const {
  double rho = 0.0;
  table_.DensityOnly(pressure_pa, temperature_k, &rho);
  return rho;
}

double MocModel::FrictionFactor(int table, double re, int* hint) const {
  const FrictionTable& ft = ftables_[static_cast<size_t>(table)];
  const int last = static_cast<int>(ft.re.size()) - 2;
  re = std::max(re, ft.re_min);
  int i = std::max(0, std::min(*hint, last));
  if (re >= ft.re[static_cast<size_t>(last + 1)]) {
    i = last;
    re = ft.re[static_cast<size_t>(last + 1)];
  } else {
    while (i < last && re >= ft.re[static_cast<size_t>(i + 1)]) ++i;
    while (i > 0 && re < ft.re[static_cast<size_t>(i)]) --i;
  }
  *hint = i;
  const size_t u = static_cast<size_t>(i);
  const double w = (re - ft.re[u]) / (ft.re[u + 1] - ft.re[u]);
  return ft.f[u] + w * (ft.f[u + 1] - ft.f[u]);
}

// R_i such that dt/2 * (friction term) = R_i * m|m|: dt/2 * f / (2 rho D A).
double MocModel::Friction(int i, double m, double rho) {
  const Pipe& p = pipes_[static_cast<size_t>(node_pipe_[static_cast<size_t>(i)])];
  const double re = std::fabs(m) * p.diameter_m / (p.area_m2 * setup_.fluid.viscosity_pa_s);
  const double f = FrictionFactor(p.friction_table, re, &f_hint_[static_cast<size_t>(i)]);
  f_node_[static_cast<size_t>(i)] = f;
  return setup_.friction_scale * 0.5 * dt_ * f / (2.0 * rho * p.diameter_m * p.area_m2);
}

double MocModel::ReservoirPressure(double head_m, double rho, double z) const {
  return setup_.atmospheric_pressure_pa + rho * kG * (head_m - z);
}

double MocModel::TankBackPressure(double rho) const {
  return setup_.atmospheric_pressure_pa +
         rho * kG * (setup_.downstream.tank_base_elevation_m + tank_level_ - z_.back());
}

double MocModel::TankLevelFromMass(double mass, double temperature_k) const {
  const auto& s = setup_.downstream.strapping;
  const double rho = Density(setup_.atmospheric_pressure_pa, temperature_k);
  const double v = mass / rho;
  if (v <= s.front().volume_m3) return s.front().level_m * std::max(0.0, v) / std::max(s.front().volume_m3, 1e-300);
  size_t k = 1;
  while (k + 1 < s.size() && v > s[k].volume_m3) ++k;
  const double w = (v - s[k - 1].volume_m3) / (s[k].volume_m3 - s[k - 1].volume_m3);
  return s[k - 1].level_m + w * (s[k].level_m - s[k - 1].level_m);  // extrapolates above the top row
}

double MocModel::ExternalFlow(int lat, double t_s, double rho) const {
  const LateralSetup& l = setup_.laterals[static_cast<size_t>(lat)];
  double q = std::max(0.0, l.flow.At(t_s));
  if (l.flow_is_volume) q *= rho;
  return l.injection ? -q : q;  // positive: leaves the line
}

// CdA * sqrt(2 rho) of a leak at time t (0 before onset or while unsized).
double MocModel::LeakCoefficient(int k, double t_s, double rho) const {
  const LeakSetup& l = setup_.leaks[static_cast<size_t>(k)];
  const double cda = leak_cda_[static_cast<size_t>(k)];
  if (!std::isfinite(cda)) return 0.0;
  return RampFraction(t_s, l.onset_s, l.ramp_s) * cda * std::sqrt(2.0 * rho);
}

double MocModel::node_temperature(int i) const {
  const double f = static_cast<double>(step_ - prop_step_index_) / n_prop_;
  const size_t u = static_cast<size_t>(i);
  return t_start_[u] + f * (t_target_[u] - t_start_[u]);
}

// Mass per unit length at the reference pressure P* and temperature T:
// rho(P*, T) * A0 * (1 + c1 D/(E e) (P* - Patm)) * (1 + 2 alpha_w (T - 15 degC)).
void MocModel::UpdateMuTargets(const double* temps, bool initial) {
  const double inv_dt = 1.0 / (n_prop_ * dt_);
  for (int i = 0; i < n_; ++i) {
    const size_t u = static_cast<size_t>(i);
    const Pipe& p = pipes_[static_cast<size_t>(node_pipe_[u])];
    double rho = 0.0;
    if (!table_.DensityOnly(pstar_[u], temps[u], &rho)) ++clamps_;
    const double mu = rho * area_star_[u] * (1.0 + p.wall_alpha2 * (temps[u] - kWallReferenceTemperature_k));
    if (initial) {
      mu_start_[u] = mu;
      mu_target_[u] = mu;
      src_[u] = 0.0;
    } else {
      mu_start_[u] = mu_target_[u];
      mu_target_[u] = mu;
      // Continuity source S = -dmu/dt at fixed P, premultiplied by dx/2.
      src_[u] = -half_dx_[u] * (mu_target_[u] - mu_start_[u]) * inv_dt;
    }
    t_target_[u] = temps[u];
  }
}

double MocModel::Linepack() const {
  const double f = static_cast<double>(step_ - prop_step_index_) / n_prop_;
  const double* p = p_[cur_].data();
  double sum = 0.0;
  for (int i = 0; i < n_; ++i) {
    const size_t u = static_cast<size_t>(i);
    const double mu0 = mu_start_[u] + f * (mu_target_[u] - mu_start_[u]);
    sum += wdx_[u] * (mu0 + kp_[u] * (p[u] - pstar_[u]));
  }
  return sum;
}

// --- Temperature transport (Lagrangian parcels) ---------------------------------

void MocModel::InitParcels(double t_s) {
  const MocSetup& s = setup_;
  const double* m = m_[cur_].data();
  // Parcel age at each node in steady flow: integral of dx/u.
  std::vector<double> age(static_cast<size_t>(n_), 0.0);
  for (int i = 1; i < n_; ++i) {
    const size_t u = static_cast<size_t>(i);
    const double dx = x_[u] - x_[u - 1];
    const Pipe& pa = pipes_[static_cast<size_t>(node_pipe_[u - 1])];
    const Pipe& pb = pipes_[static_cast<size_t>(node_pipe_[u])];
    const double va = m[u - 1] / (rho_[u - 1] * pa.area_m2), vb = m[u] / (rho_[u] * pb.area_m2);
    if (dx <= 0.0) {
      age[u] = age[u - 1];
    } else if (va > 1e-9 && vb > 1e-9 && std::isfinite(age[u - 1])) {
      age[u] = age[u - 1] + dx * 2.0 / (va + vb);
    } else {
      age[u] = kInfinity;
    }
  }
  const double tau = s.thermal_time_constant_s;
  const double uniform = s.initial_line_temperature_k;
  auto temp_of_age = [&](double a) {
    if (std::isfinite(uniform)) return uniform;
    if (!std::isfinite(a)) return std::isfinite(ground_k_) && std::isfinite(tau) ? ground_k_ : s.inlet_temperature.At(t_s - 1e12);
    const double tin = s.inlet_temperature.At(t_s - a);
    if (!std::isfinite(tau)) return tin;
    return ground_k_ + (tin - ground_k_) * std::exp(-a / tau);
  };
  const int cap = static_cast<int>(parcel_x_.size());
  const int count = std::min(cap, static_cast<int>(std::floor(length_m_ / s.parcel_spacing_m)) + 1);
  parcel_first_ = 0;
  parcel_count_ = count;
  int node = 0;
  // Oldest first: the most downstream parcel at index 0.
  for (int k = 0; k < count; ++k) {
    const double x = (count - 1 - k) * s.parcel_spacing_m;
    while (node + 1 < n_ - 1 && x_[static_cast<size_t>(node + 1)] <= x) ++node;
    // Search from the start each time is avoided by walking; positions decrease here,
    // so walk back when needed.
    while (node > 0 && x_[static_cast<size_t>(node)] > x) --node;
    const size_t u = static_cast<size_t>(node);
    const double span = x_[u + 1] - x_[u];
    const double w = span > 0.0 ? (x - x_[u]) / span : 0.0;
    const double a = std::isfinite(age[u]) && std::isfinite(age[u + 1]) ? age[u] + w * (age[u + 1] - age[u]) : kInfinity;
    parcel_x_[static_cast<size_t>(k)] = x;
    parcel_t_[static_cast<size_t>(k)] = temp_of_age(a);
  }
}

// Node temperatures at time t from the parcels; the inlet end takes the inlet
// temperature while the flow enters there.
void MocModel::SetTemperaturesFromParcels(double t_s, double* out) {
  const int cap = static_cast<int>(parcel_x_.size());
  const bool inflow = m_[cur_][0] > 0.0 || parcel_count_ == 0;
  double left_x = 0.0;
  double left_t = parcel_count_ > 0 && !inflow ? parcel_t_[static_cast<size_t>((parcel_first_ + parcel_count_ - 1) % cap)]
                                               : setup_.inlet_temperature.At(t_s);
  int k = parcel_count_ - 1;  // newest (smallest x)
  for (int i = 0; i < n_; ++i) {
    const double x = x_[static_cast<size_t>(i)];
    while (k >= 0) {
      const size_t idx = static_cast<size_t>((parcel_first_ + k) % cap);
      if (parcel_x_[idx] > x) break;
      left_x = parcel_x_[idx];
      left_t = parcel_t_[idx];
      --k;
    }
    if (k < 0) {
      out[i] = left_t;
    } else {
      const size_t idx = static_cast<size_t>((parcel_first_ + k) % cap);
      const double span = parcel_x_[idx] - left_x;
      const double w = span > 0.0 ? (x - left_x) / span : 0.0;
      out[i] = left_t + w * (parcel_t_[idx] - left_t);
    }
  }
}

void MocModel::AdvanceParcels(double t_from_s, double dt_s) {
  const MocSetup& s = setup_;
  const int cap = static_cast<int>(parcel_x_.size());
  const double* m = m_[cur_].data();
  const double tau = s.thermal_time_constant_s;
  const bool relax = std::isfinite(tau) && std::isfinite(ground_k_);
  const double decay = relax ? std::exp(-dt_s / tau) : 1.0;
  auto velocity = [&](int i) {
    const size_t u = static_cast<size_t>(i);
    return m[u] / (rho_[u] * pipes_[static_cast<size_t>(node_pipe_[u])].area_m2);
  };
  // Move, newest (smallest x) to oldest, walking the nodes upwards.
  int node = 0;
  for (int k = parcel_count_ - 1; k >= 0; --k) {
    const size_t idx = static_cast<size_t>((parcel_first_ + k) % cap);
    const double x = parcel_x_[idx];
    while (node + 1 < n_ - 1 && x_[static_cast<size_t>(node + 1)] <= x) ++node;
    int i0 = node, i1 = node + 1;
    // Across a junction the two nodes share a chainage: use the pipe the parcel is in.
    while (i1 < n_ - 1 && x_[static_cast<size_t>(i1)] <= x_[static_cast<size_t>(i0)]) ++i1;
    const double span = x_[static_cast<size_t>(i1)] - x_[static_cast<size_t>(i0)];
    const double w = span > 0.0 ? std::min(1.0, std::max(0.0, (x - x_[static_cast<size_t>(i0)]) / span)) : 0.0;
    const double v = velocity(i0) + w * (velocity(i1) - velocity(i0));
    parcel_x_[idx] = x + v * dt_s;
    if (relax) parcel_t_[idx] = ground_k_ + (parcel_t_[idx] - ground_k_) * decay;
  }
  // Keep the order (older parcels ahead).
  for (int k = 1; k < parcel_count_; ++k) {
    const size_t ahead = static_cast<size_t>((parcel_first_ + k - 1) % cap);
    const size_t idx = static_cast<size_t>((parcel_first_ + k) % cap);
    if (parcel_x_[idx] > parcel_x_[ahead]) parcel_x_[idx] = parcel_x_[ahead];
  }
  // Leave at the far end (oldest first) or back out of the inlet (newest).
  while (parcel_count_ > 0 && parcel_x_[static_cast<size_t>(parcel_first_)] > length_m_) {
    parcel_first_ = (parcel_first_ + 1) % cap;
    --parcel_count_;
  }
  while (parcel_count_ > 0 && parcel_x_[static_cast<size_t>((parcel_first_ + parcel_count_ - 1) % cap)] < 0.0) --parcel_count_;
  // New parcels at the inlet, one per spacing of fluid that has entered.
  const double u0 = velocity(0);
  if (u0 > 0.0) {
    const double front =
        parcel_count_ > 0 ? parcel_x_[static_cast<size_t>((parcel_first_ + parcel_count_ - 1) % cap)] : length_m_;
    int nins = static_cast<int>(std::floor(front / s.parcel_spacing_m));
    const double t_end = t_from_s + dt_s;
    for (int j = 1; j <= nins; ++j) {
      if (parcel_count_ >= cap) {
        ++parcel_overflows_;
        break;
      }
      const double x = std::max(0.0, front - j * s.parcel_spacing_m);
      const double age = x / u0;
      double t = s.inlet_temperature.At(t_end - age);
      if (relax) t = ground_k_ + (t - ground_k_) * std::exp(-age / tau);
      const size_t idx = static_cast<size_t>((parcel_first_ + parcel_count_) % cap);
      parcel_x_[idx] = x;
      parcel_t_[idx] = t;
      ++parcel_count_;
    }
  }
}

// --- Steady state ---------------------------------------------------------------

// Pump or reservoir pressure at node 0 for inflow m0 at t; fixed point on the
// density there (P depends on rho, rho on P).
double MocModel::UpstreamPressureSteady(double m0, double t_s, double t0_k) {
  const UpstreamSetup& up = setup_.upstream;
  double p = p_ref_;
  for (int it = 0; it < 4; ++it) {
    const double rho = Density(p, t0_k);
    if (up.type == UpstreamType::kReservoir) {
      p = ReservoirPressure(up.head_m.At(t_s), rho, z_[0]);
    } else {  // pump
      const double s = up.speed.At(t_s);
      const double q = m0 / rho;
      p = ReservoirPressure(up.head_m.At(t_s) + s * s * up.shutoff_head_m - up.curve_c_s2_m5 * q * std::fabs(q), rho, z_[0]);
    }
  }
  return p;
}

// Marches the discrete steady state from node 0 with pressure p0 and flow m0:
// in each reach, B (P_{i+1} - P_i) = -(G_i + R_i m|m| + R_{i+1} m|m|), the
// steady form of the C+ equation, so the MOC starts exactly at rest.
// Fills P, m, rho, R and the gravity terms; returns nothing (see DownstreamResidual).
double MocModel::March(double p0, double m0, double t_s) {
  double* p = p_[cur_].data();
  double* m = m_[cur_].data();
  const double* temp = scratch_.data();
  p[0] = p0;
  m[0] = m0;
  for (size_t k = 0; k < pipes_.size(); ++k) {
    const Pipe& pipe = pipes_[k];
    const int b = pipe.begin;
    const size_t ub = static_cast<size_t>(b);
    if (k > 0) {
      const Junction& jn = junctions_[k - 1];
      const size_t uu = static_cast<size_t>(jn.u);
      p[ub] = p[uu];
      double q = 0.0;
      for (int l = jn.lat_begin; l < jn.lat_end; ++l) {
        const int lat = junction_lats_[static_cast<size_t>(l)];
        const double ql = ExternalFlow(lat, t_s, rho_[uu]);
        lat_q_[0][static_cast<size_t>(lat)] = ql;
        q += ql;
      }
      for (int l = jn.leak_begin; l < jn.leak_end; ++l) {
        const int lk = junction_leaks_[static_cast<size_t>(l)];
        const LeakSetup& ls = setup_.leaks[static_cast<size_t>(lk)];
        double ql = 0.0;
        if (std::isfinite(leak_cda_[static_cast<size_t>(lk)])) {
          ql = LeakCoefficient(lk, t_s, rho_[uu]) * std::sqrt(std::max(0.0, p[uu] - setup_.atmospheric_pressure_pa));
        } else if (t_s >= ls.onset_s) {
          ql = ls.rate_kg_s * RampFraction(t_s, ls.onset_s, ls.ramp_s);  // sized after the solve
        }
        leak_q_[0][static_cast<size_t>(lk)] = ql;
        q += ql;
      }
      m[ub] = m[uu] - q;
    }
    if (!table_.DensityOnly(p[ub], temp[ub], &rho_[ub])) ++clamps_;
    r_[ub] = Friction(b, m[ub], rho_[ub]);
    for (int i = b; i < pipe.end; ++i) {
      const size_t u = static_cast<size_t>(i);
      const double mm = m[u] * std::fabs(m[u]);
      double pn = p[u], rhon = rho_[u], rn = r_[u];
      for (int it = 0; it < 4; ++it) {
        const double g = 0.5 * (rho_[u] + rhon) * gz_[u];
        pn = p[u] - (g + (r_[u] + rn) * mm) / pipe.b;
        table_.DensityOnly(pn, temp[u + 1], &rhon);
        rn = Friction(i + 1, m[u], rhon);
      }
      p[u + 1] = pn;
      m[u + 1] = m[u];
      if (!table_.DensityOnly(pn, temp[u + 1], &rho_[u + 1])) ++clamps_;
      r_[u + 1] = Friction(i + 1, m[u + 1], rho_[u + 1]);
      g_[u] = 0.5 * (rho_[u] + rho_[u + 1]) * gz_[u];
    }
  }
  return DownstreamResidual(t_s);
}

// Zero when the marched state meets the downstream boundary.
double MocModel::DownstreamResidual(double t_s) {
  const DownstreamSetup& dn = setup_.downstream;
  const size_t last = static_cast<size_t>(n_ - 1);
  const double pn = p_[cur_][last], mn = m_[cur_][last], rho = rho_[last];
  if (dn.type == DownstreamType::kFlow) {
    double q = dn.flow.At(t_s);
    if (dn.flow_is_volume) q *= rho;
    return mn - q;
  }
  const double back = dn.type == DownstreamType::kTank ? TankBackPressure(rho) : ReservoirPressure(dn.head_m.At(t_s), rho, z_[last]);
  if (dn.valve_cda_m2 > 0.0) {
    const double cv = dn.opening.At(t_s) * dn.valve_cda_m2 * std::sqrt(2.0 * rho);
    const double dp = pn - back;
    const double q = cv * std::sqrt(std::fabs(dp));
    return mn - (dp >= 0.0 ? q : -q);
  }
  return (pn - back) / 1e5;
}

// Solves the steady state at time t for the node temperatures in scratch_.
bool MocModel::SteadyState(double t_s, std::string* why) {
  const UpstreamSetup& up = setup_.upstream;
  const double t0 = scratch_[0];
  // One unknown: the inflow (reservoir, pump) or the inlet pressure (flow
  // boundary, or a pump whose check valve is shut). Bracket, then bisect.
  auto solve = [&](auto residual, double guess, double scale, double* root) {
    double a = guess - scale, b = guess + scale;
    double fa = residual(a), fb = residual(b);
    int expand = 0;
    while (fa * fb > 0.0 && expand < 60) {  // widen both ways: the residual is monotone
      const double w = b - a;
      a -= w;
      b += w;
      fa = residual(a);
      fb = residual(b);
      ++expand;
    }
    if (fa * fb > 0.0 || !std::isfinite(fa) || !std::isfinite(fb)) return false;
    // Regula falsi with the Illinois modification (Dowell & Jarratt 1971):
    // superlinear on a smooth monotone residual, and always bracketed.
    if (fa == 0.0) {
      b = a;
    } else {
      for (int it = 0; it < 100 && fb != 0.0; ++it) {
        double c = b - fb * (b - a) / (fb - fa);
        if (!(c > std::min(a, b) && c < std::max(a, b))) c = 0.5 * (a + b);
        const double fc = residual(c);
        if (fc * fb < 0.0) {
          a = b;
          fa = fb;
        } else {
          fa *= 0.5;
        }
        b = c;
        fb = fc;
        if (std::fabs(b - a) <= 1e-13 * std::max(1.0, std::fabs(b))) break;
      }
    }
    *root = b;
    residual(*root);  // leave the state of the root in the arrays
    return true;
  };
  const double m_scale = std::max(1.0, 0.01 * std::fabs(m_[cur_][0]));
  bool ok = false;
  if (up.type == UpstreamType::kFlow) {
    auto res = [&](double p0) {
      double m0 = up.flow.At(t_s);
      if (up.flow_is_volume) m0 *= Density(p0, t0);
      return March(p0, m0, t_s);
    };
    double p0 = 0.0;
    ok = solve(res, p_[cur_][0] > 0.0 ? p_[cur_][0] : p_ref_, 1e5, &p0);
  } else {
    auto res = [&](double m0) { return March(UpstreamPressureSteady(m0, t_s, t0), m0, t_s); };
    double m0 = 0.0;
    ok = solve(res, m_[cur_][0], m_scale, &m0);
    if (ok && up.type == UpstreamType::kPump && up.check_valve && m0 < 0.0) {
      // The check valve holds: no flow at the pump; the line pressure decides.
      auto res0 = [&](double p0) { return March(p0, 0.0, t_s); };
      double p0 = 0.0;
      ok = solve(res0, UpstreamPressureSteady(0.0, t_s, t0), 1e5, &p0);
    }
  }
  if (!ok) {
    *why = "no steady state found for the initial boundary conditions (check heads, pump curve and flows)";
    return false;
  }
  return true;
}

// --- Init -------------------------------------------------------------------------

bool MocModel::Init(const MocSetup& setup, std::string* why) {
  std::string local;
  if (why == nullptr) why = &local;
  if (!setup.IsValid(why)) return false;
  setup_ = setup;
  const MocSetup& s = setup_;
  ground_k_ = s.ground_temperature_k;

  DensityTable::Options topt;
  topt.pressure_min_pa = 0.5e5;
  topt.pressure_max_pa = 300.0e5;
  topt.pressure_step_pa = 1.0e5;
  double tmin = s.inlet_temperature.At(0.0), tmax = tmin;
  for (double v : s.inlet_temperature.values_k) {
    tmin = std::min(tmin, v - std::fabs(s.inlet_temperature.swing_amplitude_k));
    tmax = std::max(tmax, v + std::fabs(s.inlet_temperature.swing_amplitude_k));
  }
  if (std::isfinite(ground_k_)) {
    tmin = std::min(tmin, ground_k_);
    tmax = std::max(tmax, ground_k_);
  }
  if (std::isfinite(s.initial_line_temperature_k)) {
    tmin = std::min(tmin, s.initial_line_temperature_k);
    tmax = std::max(tmax, s.initial_line_temperature_k);
  }
  if (std::isfinite(s.downstream.tank_initial_temperature_k)) {
    tmin = std::min(tmin, s.downstream.tank_initial_temperature_k);
    tmax = std::max(tmax, s.downstream.tank_initial_temperature_k);
  }
  topt.temperature_min_k = std::min(253.15, std::floor(tmin - 10.0));
  topt.temperature_max_k = std::max(343.15, std::ceil(tmax + 10.0));
  topt.temperature_step_k = 1.0;
  if (!table_.Build(s.fluid, topt, why)) return false;

  const double t_in0 = std::isfinite(s.initial_line_temperature_k) ? s.initial_line_temperature_k : s.inlet_temperature.At(0.0);
  p_ref_ = s.atmospheric_pressure_pa + 10.0e5;
  t_ref_ = t_in0;
  cur_ = 0;
  step_ = 0;
  prop_step_index_ = 0;
  double m0_guess = 0.0, p0_guess = 0.0;
  for (int pass = 0; pass < 2; ++pass) {
    if (!BuildGrid(p_ref_, t_ref_, why)) return false;
    std::fill(scratch_.begin(), scratch_.end(), t_in0);
    m_[cur_][0] = m0_guess;  // the first pass's answer starts the second
    p_[cur_][0] = p0_guess;
    if (s.downstream.type == DownstreamType::kTank) tank_level_ = s.downstream.tank_initial_level_m;
    for (int it = 0; it < (pass == 0 ? 2 : 3); ++it) {
      if (!SteadyState(0.0, why)) return false;
      InitParcels(0.0);
      SetTemperaturesFromParcels(0.0, scratch_.data());
    }
    if (!SteadyState(0.0, why)) return false;
    m0_guess = m_[cur_][0];
    p0_guess = p_[cur_][0];
    // Reference state of the wave speed: the mean line pressure and temperature.
    double wsum = 0.0, psum = 0.0, tsum = 0.0;
    for (int i = 0; i < n_; ++i) {
      const size_t u = static_cast<size_t>(i);
      wsum += wdx_[u];
      psum += wdx_[u] * p_[cur_][u];
      tsum += wdx_[u] * scratch_[u];
    }
    p_ref_ = std::max(psum / wsum, s.atmospheric_pressure_pa);
    t_ref_ = tsum / wsum;
  }
  // Leaks given as a rate and already open at t = 0: size the orifice now.
  for (size_t k = 0; k < s.leaks.size(); ++k) {
    if (std::isfinite(leak_cda_[k]) || s.leaks[k].onset_s > 0.0) continue;
    const size_t u = static_cast<size_t>(leak_node_[k]);
    const double dp = p_[cur_][u] - s.atmospheric_pressure_pa;
    leak_cda_[k] = dp > 0.0 ? s.leaks[k].rate_kg_s / std::sqrt(2.0 * rho_[u] * dp) : 0.0;
  }

  // Reference pressure and mass per length of every node.
  for (int i = 0; i < n_; ++i) {
    const size_t u = static_cast<size_t>(i);
    const Pipe& p = pipes_[static_cast<size_t>(node_pipe_[u])];
    pstar_[u] = p_[cur_][u];
    area_star_[u] = p.area_m2 * (1.0 + p.compliance_per_pa * (pstar_[u] - s.atmospheric_pressure_pa));
    t_start_[u] = scratch_[u];
  }
  UpdateMuTargets(scratch_.data(), true);
  p_[1 - cur_] = p_[cur_];
  m_[1 - cur_] = m_[cur_];
  lat_q_[1] = lat_q_[0];
  leak_q_[1] = leak_q_[0];

  // Receiving tank.
  if (s.downstream.type == DownstreamType::kTank) {
    tank_t_ = std::isfinite(s.downstream.tank_initial_temperature_k) ? s.downstream.tank_initial_temperature_k
                                                                      : scratch_[static_cast<size_t>(n_ - 1)];
    tank_rho_ = Density(s.atmospheric_pressure_pa, tank_t_);
    const auto& st = s.downstream.strapping;
    const double level = s.downstream.tank_initial_level_m;
    size_t k = 1;
    while (k + 1 < st.size() && level > st[k].level_m) ++k;
    const double w = (level - st[k - 1].level_m) / (st[k].level_m - st[k - 1].level_m);
    const double volume = st[k - 1].volume_m3 + w * (st[k].volume_m3 - st[k - 1].volume_m3);
    tank_mass_ = volume * tank_rho_;
    tank_level_ = TankLevelFromMass(tank_mass_, tank_t_);
    tank_level_prev_ = tank_level_;
    double out = s.downstream.tank_outflow.At(0.0);
    if (std::isfinite(s.downstream.tank_level_setpoint_m))
      out += s.downstream.tank_level_gain_per_m * (tank_level_ - s.downstream.tank_level_setpoint_m);
    if (s.downstream.flow_is_volume) out *= tank_rho_;
    tank_out_[0] = tank_out_[1] = std::max(0.0, out);
  }
  pump_speed_ = s.upstream.type == UpstreamType::kPump ? s.upstream.speed.At(0.0) : 0.0;
  totals_ = MassTotals{};
  line_budget_ = Linepack();
  inventory0_ = Inventory();
  low_pressure_steps_ = 0;
  min_pressure_ = kInfinity;
  parcel_overflows_ = 0;
  clamps_ = 0;  // the steady-state search visits absurd states on purpose
  tank_in_mass_ = tank_in_heat_ = 0.0;
  return true;
}

// --- Property step ----------------------------------------------------------------

void MocModel::PropertyUpdate() {
  const MocSetup& s = setup_;
  const size_t n = static_cast<size_t>(n_);
  double* p = p_[cur_].data();
  const double* m = m_[cur_].data();
  const double t_now = time_s();

  // 1. Mass fixer: the line pack now (mu at the end of the last interval)
  //    against the budget; a uniform shift of the interior pressures closes it.
  if (s.mass_fixer && step_ > 0) {
    double e = line_budget_, w = 0.0;
    for (size_t u = 0; u < n; ++u) {
      e -= wdx_[u] * (mu_target_[u] + kp_[u] * (p[u] - pstar_[u]));
    }
    for (size_t u = 1; u + 1 < n; ++u) w += wdx_[u] * kp_[u];
    const double shift = w > 0.0 ? e / w : 0.0;
    for (size_t u = 1; u + 1 < n; ++u) p[u] += shift;
    totals_.fixer_kg += e;
    totals_.max_fixer_shift_pa = std::max(totals_.max_fixer_shift_pa, std::fabs(shift));
  }

  // 2. Temperatures at the start of the interval; density, friction, gravity.
  double pmin = kInfinity;
  for (size_t u = 0; u < n; ++u) {
    t_start_[u] = t_target_[u];
    if (!table_.DensityOnly(p[u], t_start_[u], &rho_[u])) ++clamps_;
    pmin = std::min(pmin, p[u]);
  }
  for (int i = 0; i < n_; ++i) r_[static_cast<size_t>(i)] = Friction(i, m[i], rho_[static_cast<size_t>(i)]);
  for (size_t u = 0; u + 1 < n; ++u) g_[u] = 0.5 * (rho_[u] + rho_[u + 1]) * gz_[u];
  min_pressure_ = std::min(min_pressure_, pmin);
  if (pmin < kLowPressure_pa) ++low_pressure_steps_;

  // 3. Parcels over the interval; node temperatures and mu at its end.
  const double span = n_prop_ * dt_;
  AdvanceParcels(t_now, span);
  SetTemperaturesFromParcels(t_now + span, scratch_.data());
  UpdateMuTargets(scratch_.data(), false);

  // 4. Tank contents.
  if (s.downstream.type == DownstreamType::kTank) {
    if (s.downstream.tank_mixed) {
      if (tank_in_mass_ > 0.0 && tank_mass_ > 0.0)
        tank_t_ = (tank_t_ * std::max(tank_mass_ - tank_in_mass_, 0.0) + tank_in_heat_) /
                  (std::max(tank_mass_ - tank_in_mass_, 0.0) + tank_in_mass_);
    } else {
      tank_t_ = t_start_[n - 1];
    }
    tank_in_mass_ = tank_in_heat_ = 0.0;
    tank_rho_ = Density(s.atmospheric_pressure_pa, tank_t_);
  }
  prop_step_index_ = step_;
}

// --- Step ---------------------------------------------------------------------------

void MocModel::Step() {
  if (step_ % static_cast<uint64_t>(n_prop_) == 0) PropertyUpdate();
  const MocSetup& s = setup_;
  const int nxt = 1 - cur_;
  const double t1 = static_cast<double>(step_ + 1) * dt_;
  const double* __restrict P = p_[cur_].data();
  const double* __restrict M = m_[cur_].data();
  double* __restrict Pn = p_[nxt].data();
  double* __restrict Mn = m_[nxt].data();
  const double* __restrict R = r_.data();
  const double* __restrict G = g_.data();
  const double* __restrict S = src_.data();

  // Interior nodes: C+ from the left neighbour, C- from the right one.
  //   Cp = m_A + B P_A - G_A - R_A m_A|m_A| + s_A + s_P
  //   Cm = m_B - B P_B - G_P - R_B m_B|m_B| - s_B - s_P
  //   m_P (1 + R_P |m_P|) = (Cp + Cm)/2,   P_P = (Cp - Cm) / (2B)
  for (const Pipe& pipe : pipes_) {
    const double B = pipe.b, inv2b = pipe.inv2b;
    for (int i = pipe.begin + 1; i < pipe.end; ++i) {
      const double ma = M[i - 1], mb = M[i + 1];
      const double cp = ma + B * P[i - 1] - G[i - 1] - R[i - 1] * ma * std::fabs(ma) + S[i - 1] + S[i];
      const double cm = mb - B * P[i + 1] - G[i] - R[i + 1] * mb * std::fabs(mb) - S[i + 1] - S[i];
      Mn[i] = 0.5 * (cp + cm) / (1.0 + R[i] * std::fabs(M[i]));
      Pn[i] = (cp - cm) * inv2b;
    }
  }

  auto cplus = [&](int i, double B) {  // C+ into node i from i-1
    const double ma = M[i - 1];
    return ma + B * P[i - 1] - G[i - 1] - R[i - 1] * ma * std::fabs(ma) + S[i - 1] + S[i];
  };
  auto cminus = [&](int i, double B) {  // C- into node i from i+1
    const double mb = M[i + 1];
    return mb - B * P[i + 1] - G[i] - R[i + 1] * mb * std::fabs(mb) - S[i + 1] - S[i];
  };

  // Junctions: equal pressure, m_u - m_d = laterals + leaks.
  for (size_t k = 0; k < lat_q_[0].size(); ++k) lat_q_[1][k] = lat_q_[0][k];
  for (size_t k = 0; k < leak_q_[0].size(); ++k) leak_q_[1][k] = leak_q_[0][k];
  const double patm = s.atmospheric_pressure_pa;
  for (const Junction& jn : junctions_) {
    const Pipe& pu = pipes_[static_cast<size_t>(jn.pipe_u)];
    const Pipe& pd = pipes_[static_cast<size_t>(jn.pipe_d)];
    const double cp = cplus(jn.u, pu.b);
    const double cm = cminus(jn.d, pd.b);
    const double au = 1.0 + R[jn.u] * std::fabs(M[jn.u]);
    const double ad = 1.0 + R[jn.d] * std::fabs(M[jn.d]);
    const double w = pu.b / au + pd.b / ad;
    const double rho = rho_[static_cast<size_t>(jn.u)];
    double qfix = 0.0;
    for (int l = jn.lat_begin; l < jn.lat_end; ++l) {
      const int lat = junction_lats_[static_cast<size_t>(l)];
      const double q = ExternalFlow(lat, t1, rho);
      lat_q_[0][static_cast<size_t>(lat)] = q;
      qfix += q;
    }
    const double pw = (cp / au - cm / ad - qfix) / w;
    double c = 0.0;
    for (int l = jn.leak_begin; l < jn.leak_end; ++l) {
      const int lk = junction_leaks_[static_cast<size_t>(l)];
      const size_t ul = static_cast<size_t>(lk);
      if (!std::isfinite(leak_cda_[ul]) && t1 >= s.leaks[ul].onset_s) {
        // Sized at onset: the orifice that passes the stated rate at the pressure now.
        const double dp = P[jn.u] - patm;
        leak_cda_[ul] = dp > 0.0 ? s.leaks[ul].rate_kg_s / std::sqrt(2.0 * rho * dp) : 0.0;
      }
      c += LeakCoefficient(lk, t1, rho);
    }
    double ql = 0.0;
    if (c > 0.0 && pw > patm) {
      const double c2w = c * c / w;
      ql = 2.0 * c * c * (pw - patm) / (c2w + std::sqrt(c2w * c2w + 4.0 * c * c * (pw - patm)));
    }
    const double pj = pw - ql / w;
    for (int l = jn.leak_begin; l < jn.leak_end; ++l) {
      const int lk = junction_leaks_[static_cast<size_t>(l)];
      leak_q_[0][static_cast<size_t>(lk)] = c > 0.0 ? ql * LeakCoefficient(lk, t1, rho) / c : 0.0;
    }
    Pn[jn.u] = Pn[jn.d] = pj;
    Mn[jn.u] = (cp - pu.b * pj) / au;
    Mn[jn.d] = (cm + pd.b * pj) / ad;
  }

  // Upstream boundary (node 0): C- and the boundary condition.
  {
    const UpstreamSetup& up = s.upstream;
    const Pipe& p0 = pipes_.front();
    const double B = p0.b;
    const double cm = cminus(0, B);
    const double alpha = 1.0 + R[0] * std::fabs(M[0]);
    const double rho = rho_[0];
    double pb = 0.0, mb = 0.0;
    switch (up.type) {
      case UpstreamType::kReservoir:
        pb = ReservoirPressure(up.head_m.At(t1), rho, z_[0]);
        mb = (cm + B * pb) / alpha;
        break;
      case UpstreamType::kPump: {
        const double sp = std::max(0.0, up.speed.At(t1));
        pump_speed_ = sp;
        const double pc = ReservoirPressure(up.head_m.At(t1) + sp * sp * up.shutoff_head_m, rho, z_[0]);
        const double beta = B * kG * up.curve_c_s2_m5 / rho;  // B * g c / rho: pressure per (kg/s)^2
        mb = SolveSignedQuadratic(alpha, beta, cm + B * pc);
        if (up.check_valve && mb < 0.0) {
          mb = 0.0;
          pb = -cm / B;
        } else {
          pb = pc - kG * up.curve_c_s2_m5 / rho * mb * std::fabs(mb);
        }
        break;
      }
      case UpstreamType::kFlow: {
        mb = up.flow.At(t1);
        if (up.flow_is_volume) mb *= rho;
        pb = (alpha * mb - cm) / B;
        break;
      }
    }
    Pn[0] = pb;
    Mn[0] = mb;
  }

  // Downstream boundary (node N): C+ and the boundary condition.
  const int last = n_ - 1;
  {
    const DownstreamSetup& dn = s.downstream;
    const Pipe& pl = pipes_.back();
    const double B = pl.b;
    const double cp = cplus(last, B);
    const double alpha = 1.0 + R[last] * std::fabs(M[last]);
    const double rho = rho_[static_cast<size_t>(last)];
    double pb = 0.0, mb = 0.0;
    if (dn.type == DownstreamType::kFlow) {
      mb = dn.flow.At(t1);
      if (dn.flow_is_volume) mb *= rho;
      pb = (cp - alpha * mb) / B;
    } else {
      const double back =
          dn.type == DownstreamType::kTank ? TankBackPressure(rho) : ReservoirPressure(dn.head_m.At(t1), rho, z_[static_cast<size_t>(last)]);
      if (dn.valve_cda_m2 > 0.0) {
        const double cv = std::max(0.0, dn.opening.At(t1)) * dn.valve_cda_m2 * std::sqrt(2.0 * rho);
        if (cv > 0.0) {
          const double beta = B / (cv * cv);
          mb = SolveSignedQuadratic(alpha, beta, cp - B * back);
          pb = back + mb * std::fabs(mb) / (cv * cv);
        } else {
          mb = 0.0;
          pb = cp / B;
        }
      } else {
        pb = back;
        mb = (cp - B * pb) / alpha;
      }
    }
    Pn[last] = pb;
    Mn[last] = mb;
  }

  // Budget, trapezoid in time.
  const double h = 0.5 * dt_;
  const double in = h * (M[0] + Mn[0]);
  const double out = h * (M[last] + Mn[last]);
  double lat = 0.0, leak = 0.0;
  for (size_t k = 0; k < lat_q_[0].size(); ++k) {
    const double q = h * (lat_q_[0][k] + lat_q_[1][k]);
    if (s.laterals[k].injection) {
      totals_.injection_kg -= q;
    } else {
      totals_.delivery_kg += q;
    }
    lat += q;
  }
  for (size_t k = 0; k < leak_q_[0].size(); ++k) leak += h * (leak_q_[0][k] + leak_q_[1][k]);
  totals_.inlet_kg += in;
  totals_.pipe_outlet_kg += out;
  totals_.leak_kg += leak;
  line_budget_ += in - out - lat - leak;

  // Receiving tank: fills with the pipe outflow, empties through its outlet.
  if (s.downstream.type == DownstreamType::kTank) {
    double q_out = s.downstream.tank_outflow.At(t1);
    if (std::isfinite(s.downstream.tank_level_setpoint_m))
      q_out += s.downstream.tank_level_gain_per_m * (tank_level_ - s.downstream.tank_level_setpoint_m);
    q_out = std::max(0.0, q_out);
    if (s.downstream.flow_is_volume) q_out *= tank_rho_;
    tank_out_[1] = tank_out_[0];
    tank_out_[0] = tank_mass_ > 0.0 ? q_out : 0.0;
    const double dm_out = h * (tank_out_[0] + tank_out_[1]);
    totals_.tank_outflow_kg += dm_out;
    tank_mass_ += out - dm_out;
    if (out > 0.0) {
      tank_in_mass_ += out;
      tank_in_heat_ += out * node_temperature(last);
    }
    tank_level_prev_ = tank_level_;
    tank_level_ = TankLevelFromMass(tank_mass_, tank_t_);
  }

  cur_ = nxt;
  ++step_;
}

// --- Probes -------------------------------------------------------------------------

MocModel::Probe MocModel::MakeProbe(double chainage_m) const {
  Probe pr;
  pr.chainage_m = chainage_m;
  const double x = std::max(0.0, std::min(chainage_m, length_m_));
  int i = 0;
  while (i + 2 < n_ && x_[static_cast<size_t>(i + 1)] <= x) ++i;
  int j = i + 1;
  while (j + 1 < n_ && x_[static_cast<size_t>(j)] <= x_[static_cast<size_t>(i)]) ++j;
  const double span = x_[static_cast<size_t>(j)] - x_[static_cast<size_t>(i)];
  pr.i0 = i;
  pr.i1 = j;
  pr.w = span > 0.0 ? std::min(1.0, std::max(0.0, (x - x_[static_cast<size_t>(i)]) / span)) : 0.0;
  return pr;
}

double MocModel::Pressure(const Probe& pr, bool previous) const {
  const double* p = p_[previous ? 1 - cur_ : cur_].data();
  return (1.0 - pr.w) * p[pr.i0] + pr.w * p[pr.i1];
}

double MocModel::MassFlow(const Probe& pr, bool previous) const {
  const double* m = m_[previous ? 1 - cur_ : cur_].data();
  return (1.0 - pr.w) * m[pr.i0] + pr.w * m[pr.i1];
}

double MocModel::Temperature(const Probe& pr, bool previous) const {
  const uint64_t st = previous && step_ > 0 ? step_ - 1 : step_;
  const double f = st >= prop_step_index_ ? static_cast<double>(st - prop_step_index_) / n_prop_ : 0.0;
  auto at = [&](int i) {
    const size_t u = static_cast<size_t>(i);
    return t_start_[u] + f * (t_target_[u] - t_start_[u]);
  };
  return (1.0 - pr.w) * at(pr.i0) + pr.w * at(pr.i1);
}

double MocModel::Elevation(const Probe& pr) const {
  return (1.0 - pr.w) * z_[static_cast<size_t>(pr.i0)] + pr.w * z_[static_cast<size_t>(pr.i1)];
}

double MocModel::inlet_flow_kg_s(bool previous) const { return m_[previous ? 1 - cur_ : cur_][0]; }
double MocModel::pipe_outlet_flow_kg_s(bool previous) const {
  return m_[previous ? 1 - cur_ : cur_][static_cast<size_t>(n_ - 1)];
}

}  // namespace holdfast::sim
