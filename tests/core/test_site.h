// Builds small sites in C++ for core tests (no config file involved).
#pragma once

#include <string>

#include "holdfast/site.h"

namespace holdfast::testing {

inline int AddPoint(Site* site, const std::string& id, PointKind kind, Quantity q, double random = 0.0,
                    double systematic = 0.0) {
  PointSpec p;
  p.id = id;
  p.kind = kind;
  p.unit.quantity = q;
  p.unit.factor = 1.0;
  p.unit.offset = 0.0;
  p.staleness_s = 1e9;
  p.random_sigma = random;
  p.systematic_sigma = systematic;
  site->points.push_back(p);
  return static_cast<int>(site->points.size()) - 1;
}

inline FluidSpec GenericLiquid(double rho_ref, double bulk_pa, double beta_per_k) {
  FluidSpec f;
  f.kind = FluidKind::kGenericLiquid;
  f.name = "test_liquid";
  f.reference_density_kg_m3 = rho_ref;
  f.reference_pressure_pa = 101325.0;
  f.reference_temperature_k = 288.15;
  f.bulk_modulus_pa = bulk_pa;
  f.thermal_expansion_per_k = beta_per_k;
  return f;
}

inline PipeSection Steel(double length_m, double od_m, double wall_m) {
  PipeSection s;
  s.length_m = length_m;
  s.outside_diameter_m = od_m;
  s.wall_thickness_m = wall_m;
  s.youngs_modulus_pa = 207e9;
  s.poisson_ratio = 0.3;
  s.restraint = Restraint::kAnchoredThroughout;
  s.roughness_m = 45e-6;
  return s;
}

// One segment: mass meters "in" (inlet) and "out" (outlet), pressure gauges
// "p0" and "pL" at the ends, temperature gauges "t0" and "tL" at the ends.
inline Site TwoEndSite(const FluidSpec& fluid, const std::vector<PipeSection>& sections,
                       double reach_m = 500.0) {
  Site site;
  site.name = "test";
  site.atmospheric_pressure_pa = 101325.0;
  site.fluids.push_back(fluid);
  site.fluid_ids.push_back("f");
  SegmentSpec seg;
  seg.id = "S1";
  seg.name = "S1";
  seg.fluid = 0;
  seg.sections = sections;
  double length = 0.0;
  for (const auto& s : sections) length += s.length_m;
  seg.profile = {{0.0, 0.0}};
  seg.reach_length_m = reach_m;
  seg.temperature_filter_s = 0.0;
  const int in = AddPoint(&site, "in", PointKind::kFlow, Quantity::kMassFlow);
  const int out = AddPoint(&site, "out", PointKind::kFlow, Quantity::kMassFlow);
  const int p0 = AddPoint(&site, "p0", PointKind::kPressure, Quantity::kPressure);
  const int pl = AddPoint(&site, "pL", PointKind::kPressure, Quantity::kPressure);
  const int t0 = AddPoint(&site, "t0", PointKind::kTemperature, Quantity::kTemperature);
  const int tl = AddPoint(&site, "tL", PointKind::kTemperature, Quantity::kTemperature);
  MeterSpec mi;
  mi.point = in;
  mi.role = MeterRole::kInlet;
  MeterSpec mo;
  mo.point = out;
  mo.role = MeterRole::kOutlet;
  mo.chainage_m = length;
  seg.meters = {mi, mo};
  seg.pressure_gauges = {{p0, 0.0, 0.0}, {pl, length, 0.0}};
  seg.temperature_gauges = {{t0, 0.0, 0.0}, {tl, length, 0.0}};
  site.segments.push_back(seg);
  return site;
}

}  // namespace holdfast::testing
