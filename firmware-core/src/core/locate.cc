// Leak location: gradient intersection, negative pressure wave, nearest
// landmark. Sources beside each function in locate.h.
#include "holdfast/locate.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>

namespace holdfast {
namespace {

constexpr double kInf = std::numeric_limits<double>::infinity();
constexpr double kLaminarReynolds = 2000.0;  // as DarcyFriction in pipe.cc
constexpr double kIntervalJitter = 0.05;     // sample intervals may exceed the limit by this fraction

// Elevation at chainage x from the profile (linear, held beyond the ends;
// empty = flat at 0). Same reading of the profile as the inventory's.
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

bool Finite(double v) { return std::isfinite(v); }

// The span cut into pieces over which bore and both flows are constant, so
// both grade lines are straight on each piece.
struct Span {
  const std::vector<PipeSection>* sections = nullptr;
  double rho = 0.0, mu = 0.0, g = kStandardGravity_m_s2, scale = 1.0;
  FrictionModel model = FrictionModel::kColebrookWhite;
  double equal_flow_fraction = 0.0;
  std::vector<double> x;             // breakpoints; x.front() inlet, x.back() outlet
  std::vector<int> section;          // per piece
  std::vector<int> laterals_before;  // per piece: laterals (sorted) upstream of it
  std::vector<double> lateral_x;     // chainages of the laterals used, sorted
  // Scratch for the slopes, reused by every evaluation.
  mutable std::vector<double> s_up, s_dn;

  int pieces() const { return static_cast<int>(section.size()); }

  // Friction slope -dH/dx (m/m) of section `sec` carrying mass flow m:
  // Darcy-Weisbach, f Q|Q| / (2 g D A^2), Re = |mdot| D / (A mu).
  double Slope(int sec, double m) const {
    const PipeSection& s = (*sections)[static_cast<size_t>(sec)];
    if (m == 0.0) return 0.0;
    const double d = s.inside_diameter_m();
    const double area = s.flow_area_m2();
    const double q = m / rho;
    const double re = std::fabs(m) * d / (area * mu);
    const double f = scale * FrictionFactor(model, re, s.roughness_m / d);
    return f * q * std::fabs(q) / (2.0 * g * d * area * area);
  }
};

struct Crossing {
  LocateStatus status = LocateStatus::kInvalidInput;
  double x = kNaN;     // crossing (extrapolated when outside the span)
  double head = kNaN;
};

// Grade lines from both ends and their crossing, for one set of end values.
// `lat` holds the flows of the laterals in Span::lateral_x order.
Crossing Solve(const Span& sp, double h_in, double h_out, double m_in, double m_out,
               const std::vector<double>& lat) {
  Crossing c;
  double lat_sum = 0.0;
  for (double v : lat) lat_sum += v;
  const double imbalance = m_in + lat_sum - m_out;
  const double tol = sp.equal_flow_fraction * std::max(std::fabs(m_in), std::fabs(m_out));
  if (std::fabs(imbalance) <= tol) {
    c.status = LocateStatus::kFlowsEqual;
    return c;
  }
  if (imbalance < 0.0) {
    c.status = LocateStatus::kNoMissingFlow;
    return c;
  }
  const int n = sp.pieces();
  sp.s_up.resize(static_cast<size_t>(n));
  sp.s_dn.resize(static_cast<size_t>(n));
  // Flow in piece j: upstream line from the inlet flow plus the laterals
  // upstream of j; downstream line from the outlet flow minus the laterals
  // downstream of j.
  double lat_prefix = 0.0;
  int used = 0;
  double hdn0 = h_out;  // downstream line at the inlet
  for (int j = 0; j < n; ++j) {
    while (used < sp.laterals_before[static_cast<size_t>(j)]) lat_prefix += lat[static_cast<size_t>(used++)];
    const double up = m_in + lat_prefix;
    const double dn = m_out - (lat_sum - lat_prefix);
    sp.s_up[static_cast<size_t>(j)] = sp.Slope(sp.section[static_cast<size_t>(j)], up);
    sp.s_dn[static_cast<size_t>(j)] = sp.Slope(sp.section[static_cast<size_t>(j)], dn);
    hdn0 += sp.s_dn[static_cast<size_t>(j)] * (sp.x[static_cast<size_t>(j) + 1] - sp.x[static_cast<size_t>(j)]);
  }
  // Walk the pieces; D = H_up - H_dn is linear on each and, with a positive
  // imbalance, non-increasing (the head loss f(Re) Q|Q| grows with the flow).
  double hup = h_in, hdn = hdn0;
  const double d_first = hup - hdn;
  for (int j = 0; j < n; ++j) {
    const size_t u = static_cast<size_t>(j);
    const double len = sp.x[u + 1] - sp.x[u];
    const double d0 = hup - hdn;
    if (d0 == 0.0) {
      c.status = LocateStatus::kFound;
      c.x = sp.x[u];
      c.head = hup;
      return c;
    }
    const double hup1 = hup - sp.s_up[u] * len;
    const double hdn1 = hdn - sp.s_dn[u] * len;
    const double d1 = hup1 - hdn1;
    if (d1 == 0.0 || (d0 > 0.0) != (d1 > 0.0)) {
      const double t = d0 / (d0 - d1);
      c.status = LocateStatus::kFound;
      c.x = sp.x[u] + t * len;
      c.head = hup - sp.s_up[u] * (c.x - sp.x[u]);
      return c;
    }
    hup = hup1;
    hdn = hdn1;
  }
  // No crossing inside: extend the lines with their end slopes.
  const double d_last = hup - hdn;
  if (d_first < 0.0) {
    const double slope = sp.s_dn.front() - sp.s_up.front();  // dD/dx
    if (!(slope < 0.0)) {
      c.status = LocateStatus::kParallel;
      return c;
    }
    c.status = LocateStatus::kUpstreamOfSpan;
    c.x = sp.x.front() - d_first / slope;
    c.head = h_in - sp.s_up.front() * (c.x - sp.x.front());
    return c;
  }
  const double slope = sp.s_dn.back() - sp.s_up.back();
  if (!(slope < 0.0) || d_last == d_first) {
    c.status = LocateStatus::kParallel;
    return c;
  }
  c.status = LocateStatus::kDownstreamOfSpan;
  c.x = sp.x.back() - d_last / slope;
  c.head = hup - sp.s_up.back() * (c.x - sp.x.back());
  return c;
}

// Checks the inputs and cuts the span into pieces. Returns false with the reason.
bool BuildSpan(const std::vector<PipeSection>& sections, const GradientLocateInput& in,
               const GradientLocateOptions& o, Span* sp, std::vector<double>* lateral_flow,
               std::vector<double>* lateral_sigma, std::string* why) {
  auto fail = [&](const std::string& m) { if (why) *why = m; return false; };
  std::string reason;
  if (!o.IsValid(&reason)) return fail(reason);
  if (sections.empty()) return fail("no pipe sections");
  double total = 0.0;
  for (size_t i = 0; i < sections.size(); ++i) {
    const PipeSection& s = sections[i];
    if (!(s.length_m > 0.0) || !Finite(s.length_m))
      return fail("section " + std::to_string(i) + ": length must be positive");
    if (!(s.inside_diameter_m() > 0.0) || !Finite(s.inside_diameter_m()))
      return fail("section " + std::to_string(i) + ": inside diameter must be positive");
    if (!(s.roughness_m >= 0.0) || !Finite(s.roughness_m))
      return fail("section " + std::to_string(i) + ": roughness must be >= 0");
    total += s.length_m;
  }
  if (!(in.density_kg_m3 > 0.0) || !Finite(in.density_kg_m3)) return fail("density must be positive");
  if (!(in.viscosity_pa_s > 0.0) || !Finite(in.viscosity_pa_s)) return fail("viscosity must be positive");
  for (const LineEnd* e : {&in.inlet, &in.outlet}) {
    const char* name = e == &in.inlet ? "inlet" : "outlet";
    if (!Finite(e->chainage_m) || !Finite(e->pressure_pa) || !Finite(e->flow_kg_s))
      return fail(std::string(name) + ": chainage, pressure and flow must be finite");
    if (!(e->pressure_sigma_pa >= 0.0) || !(e->flow_sigma_kg_s >= 0.0) ||
        !Finite(e->pressure_sigma_pa) || !Finite(e->flow_sigma_kg_s))
      return fail(std::string(name) + ": sigmas must be finite and >= 0");
    if (std::isinf(e->elevation_m)) return fail(std::string(name) + ": elevation must be finite or NaN");
  }
  const double slack = 1e-9 * total;
  if (!(in.inlet.chainage_m >= -slack)) return fail("inlet chainage is before the segment start");
  if (!(in.outlet.chainage_m <= total + slack)) return fail("outlet chainage is beyond the segment end");
  if (!(in.outlet.chainage_m > in.inlet.chainage_m)) return fail("outlet chainage must exceed inlet chainage");

  const double x_in = in.inlet.chainage_m, x_out = in.outlet.chainage_m;
  struct Lat { double x, flow, sigma; };
  std::vector<Lat> lats;
  for (size_t i = 0; i < in.laterals.size(); ++i) {
    const LateralFlow& l = in.laterals[i];
    if (!Finite(l.chainage_m) || !Finite(l.flow_kg_s) || !(l.sigma_kg_s >= 0.0) || !Finite(l.sigma_kg_s))
      return fail("lateral " + std::to_string(i) + ": chainage and flow finite, sigma >= 0");
    if (l.chainage_m > x_in && l.chainage_m < x_out) lats.push_back({l.chainage_m, l.flow_kg_s, l.sigma_kg_s});
  }
  std::stable_sort(lats.begin(), lats.end(), [](const Lat& a, const Lat& b) { return a.x < b.x; });

  sp->sections = &sections;
  sp->rho = in.density_kg_m3;
  sp->mu = in.viscosity_pa_s;
  sp->g = o.gravity_m_s2;
  sp->scale = o.friction_scale;
  sp->model = o.friction;
  sp->equal_flow_fraction = o.equal_flow_fraction;
  sp->x.clear();
  sp->x.push_back(x_in);
  double start = 0.0;
  std::vector<double> bounds;  // section starts
  for (const PipeSection& s : sections) {
    bounds.push_back(start);
    if (start > x_in && start < x_out) sp->x.push_back(start);
    start += s.length_m;
  }
  for (const Lat& l : lats) sp->x.push_back(l.x);
  sp->x.push_back(x_out);
  std::sort(sp->x.begin(), sp->x.end());
  sp->x.erase(std::unique(sp->x.begin(), sp->x.end()), sp->x.end());
  sp->lateral_x.clear();
  lateral_flow->clear();
  lateral_sigma->clear();
  for (const Lat& l : lats) {
    sp->lateral_x.push_back(l.x);
    lateral_flow->push_back(l.flow);
    lateral_sigma->push_back(l.sigma);
  }
  const int n = static_cast<int>(sp->x.size()) - 1;
  sp->section.assign(static_cast<size_t>(n), 0);
  sp->laterals_before.assign(static_cast<size_t>(n), 0);
  for (int j = 0; j < n; ++j) {
    const double mid = 0.5 * (sp->x[static_cast<size_t>(j)] + sp->x[static_cast<size_t>(j) + 1]);
    int sec = static_cast<int>(std::upper_bound(bounds.begin(), bounds.end(), mid) - bounds.begin()) - 1;
    sec = std::clamp(sec, 0, static_cast<int>(sections.size()) - 1);
    sp->section[static_cast<size_t>(j)] = sec;
    sp->laterals_before[static_cast<size_t>(j)] = static_cast<int>(
        std::upper_bound(sp->lateral_x.begin(), sp->lateral_x.end(), mid) - sp->lateral_x.begin());
  }
  return true;
}

double EndElevation(const LineEnd& e, const std::vector<ElevationPoint>& profile) {
  return std::isnan(e.elevation_m) ? ElevationAt(profile, e.chainage_m) : e.elevation_m;
}

const char* StatusReason(LocateStatus s) {
  switch (s) {
    case LocateStatus::kFound: return "";
    case LocateStatus::kInvalidInput: return "invalid input";
    case LocateStatus::kFlowsEqual: return "inlet and outlet flows are equal within tolerance: nothing to locate";
    case LocateStatus::kNoMissingFlow: return "outlet flow exceeds inlet flow plus laterals: a gain, not a leak";
    case LocateStatus::kParallel: return "the grade lines are parallel: no crossing";
    case LocateStatus::kUpstreamOfSpan:
      return "the grade lines cross upstream of the inlet end (check the transmitters and the friction)";
    case LocateStatus::kDownstreamOfSpan:
      return "the grade lines cross downstream of the outlet end (check the transmitters and the friction)";
  }
  return "unknown";
}

}  // namespace

const char* FrictionModelName(FrictionModel m) {
  switch (m) {
    case FrictionModel::kColebrookWhite: return "colebrook_white";
    case FrictionModel::kSwameeJain:     return "swamee_jain";
  }
  return "unknown";
}

double FrictionFactor(FrictionModel model, double reynolds, double relative_roughness) {
  if (reynolds > 0.0 && reynolds < kLaminarReynolds) return 64.0 / reynolds;
  switch (model) {
    case FrictionModel::kColebrookWhite: return ColebrookFriction(reynolds, relative_roughness);
    case FrictionModel::kSwameeJain:     return SwameeJainFriction(reynolds, relative_roughness);
  }
  return ColebrookFriction(reynolds, relative_roughness);
}

const char* LocateStatusName(LocateStatus s) {
  switch (s) {
    case LocateStatus::kFound:             return "found";
    case LocateStatus::kInvalidInput:      return "invalid_input";
    case LocateStatus::kFlowsEqual:        return "flows_equal";
    case LocateStatus::kNoMissingFlow:     return "no_missing_flow";
    case LocateStatus::kParallel:          return "parallel";
    case LocateStatus::kUpstreamOfSpan:    return "upstream_of_span";
    case LocateStatus::kDownstreamOfSpan:  return "downstream_of_span";
  }
  return "unknown";
}

bool GradientLocateOptions::IsValid(std::string* why) const {
  auto fail = [&](const std::string& m) { if (why) *why = m; return false; };
  if (friction != FrictionModel::kColebrookWhite && friction != FrictionModel::kSwameeJain)
    return fail("locate: unknown friction model");
  if (!(friction_scale > 0.0) || !Finite(friction_scale)) return fail("locate: friction_scale must be positive");
  if (!(coverage_k >= 0.0) || !Finite(coverage_k)) return fail("locate: coverage_k must be >= 0");
  if (!(equal_flow_fraction >= 0.0 && equal_flow_fraction < 1.0))
    return fail("locate: equal_flow_fraction must be in [0, 1)");
  if (!(gravity_m_s2 > 0.0) || !Finite(gravity_m_s2)) return fail("locate: gravity must be positive");
  return true;
}

GradientLocation LocateByPressureGradient(const std::vector<PipeSection>& sections,
                                          const std::vector<ElevationPoint>& profile,
                                          const GradientLocateInput& input,
                                          const GradientLocateOptions& options) {
  GradientLocation r;
  r.coverage_k = options.coverage_k;
  Span sp;
  std::vector<double> lat, lat_sigma;
  if (!BuildSpan(sections, input, options, &sp, &lat, &lat_sigma, &r.reason)) {
    r.status = LocateStatus::kInvalidInput;
    return r;
  }
  const double rho_g = input.density_kg_m3 * options.gravity_m_s2;
  const double h_in = input.inlet.pressure_pa / rho_g + EndElevation(input.inlet, profile);
  const double h_out = input.outlet.pressure_pa / rho_g + EndElevation(input.outlet, profile);
  const double m_in = input.inlet.flow_kg_s, m_out = input.outlet.flow_kg_s;
  r.inlet_head_m = h_in;
  r.outlet_head_m = h_out;
  r.laterals_used = static_cast<int>(lat.size());
  double lat_sum = 0.0;
  for (double v : lat) lat_sum += v;
  r.imbalance_kg_s = m_in + lat_sum - m_out;

  const Crossing c = Solve(sp, h_in, h_out, m_in, m_out, lat);
  r.status = c.status;
  r.chainage_m = c.x;
  r.head_m = c.head;
  if (Finite(c.x)) r.pressure_pa = rho_g * (c.head - ElevationAt(profile, c.x));
  if (c.status != LocateStatus::kFound) {
    r.reason = StatusReason(c.status);
    return r;
  }
  r.found = true;

  // Band: +/- k sigma of one input at a time.
  const double k = options.coverage_k;
  const double x0 = c.x;
  double up2 = 0.0, down2 = 0.0, lat_shift2 = 0.0;
  bool undetermined = false;

  // Per input, the up and down shifts (m) of its two perturbations.
  struct Shift { double up = 0.0, down = 0.0; bool lost = false; };
  auto shifts = [&](double dh_in, double dh_out, double dm_in, double dm_out, int lat_index,
                    double dlat) {
    Shift s;
    if (dh_in == 0.0 && dh_out == 0.0 && dm_in == 0.0 && dm_out == 0.0 && dlat == 0.0) return s;
    std::vector<double> l = lat;
    for (double sign : {1.0, -1.0}) {
      if (lat_index >= 0) l[static_cast<size_t>(lat_index)] = lat[static_cast<size_t>(lat_index)] + sign * dlat;
      const Crossing p = Solve(sp, h_in + sign * dh_in, h_out + sign * dh_out, m_in + sign * dm_in,
                               m_out + sign * dm_out, l);
      if (!Finite(p.x)) {
        s.lost = true;
        continue;
      }
      const double d = p.x - x0;
      s.up = std::max(s.up, d);
      s.down = std::max(s.down, -d);
    }
    return s;
  };
  auto add = [&](const Shift& s, double* field) {
    if (s.lost) {
      undetermined = true;
      *field = kInf;
      return;
    }
    up2 += s.up * s.up;
    down2 += s.down * s.down;
    *field = std::max(s.up, s.down);
  };
  add(shifts(k * input.inlet.pressure_sigma_pa / rho_g, 0, 0, 0, -1, 0), &r.shift_inlet_pressure_m);
  add(shifts(0, k * input.outlet.pressure_sigma_pa / rho_g, 0, 0, -1, 0), &r.shift_outlet_pressure_m);
  add(shifts(0, 0, k * input.inlet.flow_sigma_kg_s, 0, -1, 0), &r.shift_inlet_flow_m);
  add(shifts(0, 0, 0, k * input.outlet.flow_sigma_kg_s, -1, 0), &r.shift_outlet_flow_m);
  for (size_t i = 0; i < lat.size(); ++i) {
    double field = 0.0;
    add(shifts(0, 0, 0, 0, static_cast<int>(i), k * lat_sigma[i]), &field);
    lat_shift2 += field * field;
  }
  r.shift_laterals_m = std::sqrt(lat_shift2);

  const double x_in = input.inlet.chainage_m, x_out = input.outlet.chainage_m;
  if (undetermined) {
    r.chainage_low_m = x_in;
    r.chainage_high_m = x_out;
    r.band_clamped = true;
    return r;
  }
  const double lo = x0 - std::sqrt(down2), hi = x0 + std::sqrt(up2);
  r.chainage_low_m = std::max(lo, x_in);
  r.chainage_high_m = std::min(hi, x_out);
  r.band_clamped = lo < x_in || hi > x_out;
  return r;
}

double FrictionScaleFromSteadyState(const std::vector<PipeSection>& sections,
                                    const std::vector<ElevationPoint>& profile,
                                    const GradientLocateInput& input,
                                    const GradientLocateOptions& options, std::string* why) {
  // The locator's own model (BuildSpan, Span::Slope at friction scale 1),
  // walked piece by piece without building the span: the monitor calls this
  // on every quiet block, so it allocates nothing.
  auto fail = [why](const char* m) {
    if (why) *why = m;
    return kNaN;
  };
  if (!options.IsValid(why)) return kNaN;
  if (sections.empty()) return fail("no pipe sections");
  if (!(input.density_kg_m3 > 0.0) || !Finite(input.density_kg_m3)) return fail("density must be positive");
  if (!(input.viscosity_pa_s > 0.0) || !Finite(input.viscosity_pa_s)) return fail("viscosity must be positive");
  const double x_in = input.inlet.chainage_m, x_out = input.outlet.chainage_m;
  if (!Finite(x_in) || !Finite(x_out) || !Finite(input.inlet.pressure_pa) || !Finite(input.outlet.pressure_pa) ||
      !Finite(input.inlet.flow_kg_s))
    return fail("the ends' chainage, pressure and the inlet flow must be finite");
  if (!(x_out > x_in)) return fail("outlet chainage must exceed inlet chainage");
  const double rho = input.density_kg_m3, mu = input.viscosity_pa_s, g = options.gravity_m_s2;
  double predicted = 0.0, start = 0.0;
  for (const PipeSection& sec : sections) {
    const double a = std::max(start, x_in), b = std::min(start + sec.length_m, x_out);
    start += sec.length_m;
    if (!(b > a)) continue;
    const double d = sec.inside_diameter_m(), area = sec.flow_area_m2();
    // Split [a, b) at the laterals inside the span (as BuildSpan does).
    double from = a;
    while (from < b) {
      double to = b, m = input.inlet.flow_kg_s;
      for (const LateralFlow& lf : input.laterals) {
        if (!(lf.chainage_m > x_in && lf.chainage_m < x_out) || !Finite(lf.flow_kg_s)) continue;
        if (lf.chainage_m <= from) m += lf.flow_kg_s;
        else if (lf.chainage_m < to) to = lf.chainage_m;
      }
      if (m != 0.0) {  // Span::Slope: Darcy-Weisbach, f Q|Q| / (2 g D A^2)
        const double q = m / rho;
        const double re = std::fabs(m) * d / (area * mu);
        const double f = FrictionFactor(options.friction, re, sec.roughness_m / d);
        predicted += f * q * std::fabs(q) / (2.0 * g * d * area * area) * (to - from);
      }
      from = to;
    }
  }
  const double rho_g = rho * g;
  const double h_in = input.inlet.pressure_pa / rho_g + EndElevation(input.inlet, profile);
  const double h_out = input.outlet.pressure_pa / rho_g + EndElevation(input.outlet, profile);
  const double measured = h_in - h_out;
  if (!(std::fabs(predicted) > 0.0)) return fail("no flow: the friction formula predicts no head loss");
  const double scale = measured / predicted;
  if (!(scale > 0.0)) return fail("the measured head loss has the wrong sign for the flow");
  return scale;
}

std::string GradientLocation::ToString() const {
  char buf[320];
  if (found) {
    std::snprintf(buf, sizeof buf,
                  "gradient: leak at %.1f m [%.1f, %.1f]%s (k=%.2f) head=%.3f m imbalance=%.4f kg/s",
                  chainage_m, chainage_low_m, chainage_high_m, band_clamped ? " clamped" : "", coverage_k,
                  head_m, imbalance_kg_s);
  } else if (Finite(chainage_m)) {
    std::snprintf(buf, sizeof buf, "gradient: not found (%s): %s; lines cross at %.1f m",
                  LocateStatusName(status), reason.c_str(), chainage_m);
  } else {
    std::snprintf(buf, sizeof buf, "gradient: not found (%s): %s", LocateStatusName(status), reason.c_str());
  }
  return buf;
}

std::string GradientLocation::Report() const {
  std::string s = ToString() + "\n";
  char buf[320];
  std::snprintf(buf, sizeof buf,
                "  status=%s crossing=%.3f m head=%.3f m pressure=%.1f Pa\n"
                "  band [%.3f, %.3f] m at k=%.2f%s\n"
                "  shifts at k sigma: inlet pressure %.3f m, outlet pressure %.3f m, inlet flow %.3f m, "
                "outlet flow %.3f m, laterals %.3f m\n",
                LocateStatusName(status), chainage_m, head_m, pressure_pa, chainage_low_m, chainage_high_m,
                coverage_k, band_clamped ? " (clamped)" : "", shift_inlet_pressure_m, shift_outlet_pressure_m,
                shift_inlet_flow_m, shift_outlet_flow_m, shift_laterals_m);
  s += buf;
  std::snprintf(buf, sizeof buf, "  inlet head %.3f m, outlet head %.3f m, imbalance %.6f kg/s, laterals used %d\n",
                inlet_head_m, outlet_head_m, imbalance_kg_s, laterals_used);
  s += buf;
  return s;
}

// ---------------------------------------------------------------------------
// Negative pressure wave
// ---------------------------------------------------------------------------

bool WaveLocateOptions::IsValid(std::string* why) const {
  if (!(coverage_k >= 0.0) || !Finite(coverage_k)) {
    if (why) *why = "wave locate: coverage_k must be >= 0";
    return false;
  }
  return true;
}

WaveLocation LocateByWaveArrival(const WaveArrivals& w, const WaveLocateOptions& options) {
  WaveLocation r;
  r.coverage_k = options.coverage_k;
  if (!options.IsValid(&r.reason)) return r;
  if (!Finite(w.inlet_chainage_m) || !Finite(w.outlet_chainage_m) || !(w.outlet_chainage_m > w.inlet_chainage_m)) {
    r.reason = "span: outlet chainage must exceed inlet chainage";
    return r;
  }
  if (!(w.wave_speed_m_s > 0.0) || !Finite(w.wave_speed_m_s)) {
    r.reason = "wave speed must be positive";
    return r;
  }
  if (!Finite(w.inlet_arrival_s) || !Finite(w.outlet_arrival_s)) {
    r.reason = "arrival times must be finite";
    return r;
  }
  if (!(w.inlet_sigma_s >= 0.0) || !(w.outlet_sigma_s >= 0.0) || !Finite(w.inlet_sigma_s) ||
      !Finite(w.outlet_sigma_s)) {
    r.reason = "timing sigmas must be finite and >= 0";
    return r;
  }
  const double len = w.outlet_chainage_m - w.inlet_chainage_m;
  const double a = w.wave_speed_m_s;
  r.found = true;
  r.raw_chainage_m = w.inlet_chainage_m + 0.5 * (len + a * (w.inlet_arrival_s - w.outlet_arrival_s));
  r.chainage_m = std::clamp(r.raw_chainage_m, w.inlet_chainage_m, w.outlet_chainage_m);
  // Rounding at an end (leak at a transmitter) is not a clamp worth reporting.
  r.clamped = std::fabs(r.chainage_m - r.raw_chainage_m) > 1e-9 * len;
  r.sigma_m = 0.5 * a * std::hypot(w.inlet_sigma_s, w.outlet_sigma_s);
  r.chainage_low_m = std::clamp(r.chainage_m - options.coverage_k * r.sigma_m, w.inlet_chainage_m, w.outlet_chainage_m);
  r.chainage_high_m = std::clamp(r.chainage_m + options.coverage_k * r.sigma_m, w.inlet_chainage_m, w.outlet_chainage_m);
  return r;
}

std::string WaveLocation::ToString() const {
  char buf[256];
  if (!found) {
    std::snprintf(buf, sizeof buf, "wave: not located: %s", reason.c_str());
  } else {
    std::snprintf(buf, sizeof buf, "wave: leak at %.1f m [%.1f, %.1f] (k=%.2f, sigma=%.1f m)%s", chainage_m,
                  chainage_low_m, chainage_high_m, coverage_k, sigma_m,
                  clamped ? " clamped: arrival difference exceeds L/a" : "");
  }
  return buf;
}

std::string WaveLocation::Report() const {
  std::string s = ToString() + "\n";
  char buf[256];
  std::snprintf(buf, sizeof buf, "  raw chainage %.3f m, clamped %s, sigma %.3f m, band [%.3f, %.3f] m\n",
                raw_chainage_m, clamped ? "yes" : "no", sigma_m, chainage_low_m, chainage_high_m);
  s += buf;
  return s;
}

bool OnsetOptions::IsValid(std::string* why) const {
  auto fail = [&](const char* m) { if (why) *why = m; return false; };
  if (!(drop_threshold_pa > 0.0) || !Finite(drop_threshold_pa)) return fail("onset: drop_threshold_pa must be positive");
  if (reference_samples < 1) return fail("onset: reference_samples must be >= 1");
  if (reference_gap_samples < 0) return fail("onset: reference_gap_samples must be >= 0");
  if (confirm_samples < 1) return fail("onset: confirm_samples must be >= 1");
  if (settle_samples < 1) return fail("onset: settle_samples must be >= 1");
  if (!(max_sample_interval_s > 0.0) || !Finite(max_sample_interval_s))
    return fail("onset: max_sample_interval_s must be positive");
  return true;
}

OnsetResult DetectPressureDrop(const PressureSample* samples, int count, const OnsetOptions& o) {
  OnsetResult r;
  if (!o.IsValid(nullptr)) {
    r.reason = "invalid options (see OnsetOptions::IsValid)";
    return r;
  }
  const int ref_n = o.reference_samples;
  const int gap = o.reference_gap_samples;
  if (samples == nullptr || count < ref_n + gap + o.confirm_samples) {
    r.reason = "too few samples for the reference and the confirmation";
    return r;
  }
  for (int i = 0; i < count; ++i) {
    if (!Finite(samples[i].time_s) || !Finite(samples[i].pressure_pa)) {
      r.reason = "non-finite sample";
      return r;
    }
    if (i > 0) {
      const double dt = samples[i].time_s - samples[i - 1].time_s;
      if (!(dt > 0.0)) {
        r.reason = "sample times must increase";
        return r;
      }
      if (dt > o.max_sample_interval_s * (1.0 + kIntervalJitter)) {
        r.reason = "sampling slower than max_sample_interval_s";
        return r;
      }
    }
  }
  double sum = 0.0;
  for (int i = 0; i < ref_n; ++i) sum += samples[i].pressure_pa;
  // sum: samples [k - gap - ref_n, k - gap).
  for (int k = ref_n + gap; k < count; ++k) {
    const double ref = sum / ref_n;
    if (ref - samples[k].pressure_pa > o.drop_threshold_pa) {
      bool confirmed = true;
      for (int c = 1; c < o.confirm_samples; ++c) {
        if (k + c >= count) {
          r.reason = "buffer ends before the drop is confirmed";
          return r;
        }
        if (!(ref - samples[k + c].pressure_pa > o.drop_threshold_pa)) {
          confirmed = false;
          break;
        }
      }
      if (confirmed) {
        const int last = std::min(count - 1, k + o.settle_samples - 1);
        double low = samples[k].pressure_pa;
        for (int i = k + 1; i <= last; ++i) low = std::min(low, samples[i].pressure_pa);
        const double drop = ref - low;
        const double level = ref - 0.5 * drop;
        int j = k;
        while (samples[j].pressure_pa > level) ++j;  // stops at the settled minimum at the latest
        while (j - 1 > k - gap - ref_n && samples[j - 1].pressure_pa <= level) --j;
        const PressureSample& a = samples[j - 1];
        const PressureSample& b = samples[j];
        r.found = true;
        r.reference_pa = ref;
        r.drop_pa = drop;
        r.sample_index = k;
        if (a.pressure_pa > level) {
          r.arrival_s = a.time_s + (a.pressure_pa - level) / (a.pressure_pa - b.pressure_pa) * (b.time_s - a.time_s);
        } else {
          r.arrival_s = b.time_s;  // a noisy reference window: no clean crossing, take the sample
        }
        return r;
      }
    }
    sum += samples[k - gap].pressure_pa - samples[k - gap - ref_n].pressure_pa;
  }
  r.reason = "no drop beyond the threshold";
  return r;
}

std::string OnsetResult::ToString() const {
  char buf[200];
  if (!found) {
    std::snprintf(buf, sizeof buf, "onset: none: %s", reason);
  } else {
    std::snprintf(buf, sizeof buf, "onset: arrival %.4f s (sample %d) drop %.1f Pa from %.1f Pa", arrival_s,
                  sample_index, drop_pa, reference_pa);
  }
  return buf;
}

// ---------------------------------------------------------------------------
// Nearest landmark
// ---------------------------------------------------------------------------

NearestLandmarkResult NearestLandmark(const std::vector<LandmarkSpec>& landmarks, double chainage_m) {
  NearestLandmarkResult r;
  if (!Finite(chainage_m)) return r;
  double best = kInf;
  for (size_t i = 0; i < landmarks.size(); ++i) {
    const double d = std::fabs(chainage_m - landmarks[i].chainage_m);
    if (d < best) {
      best = d;
      r.index = static_cast<int>(i);
    }
  }
  if (r.index < 0) return r;
  const LandmarkSpec& l = landmarks[static_cast<size_t>(r.index)];
  r.found = true;
  r.name = l.name;
  r.landmark_chainage_m = l.chainage_m;
  r.signed_distance_m = chainage_m - l.chainage_m;
  return r;
}

std::string NearestLandmarkResult::ToString() const {
  if (!found) return "no landmark";
  char buf[256];
  const char* side = signed_distance_m > 0.0 ? "downstream of" : signed_distance_m < 0.0 ? "upstream of" : "at";
  if (signed_distance_m == 0.0) {
    std::snprintf(buf, sizeof buf, "at %s (chainage %.1f m)", name.c_str(), landmark_chainage_m);
  } else {
    std::snprintf(buf, sizeof buf, "%.1f m %s %s (chainage %.1f m)", std::fabs(signed_distance_m), side, name.c_str(),
                  landmark_chainage_m);
  }
  return buf;
}

}  // namespace holdfast
