// Pipe-wall elasticity, wave speed and friction. Sources beside each function
// in pipe.h.
#include "holdfast/pipe.h"

#include <algorithm>
#include <cmath>

namespace holdfast {

const char* RestraintName(Restraint r) {
  switch (r) {
    case Restraint::kExpansionJoints:    return "expansion_joints";
    case Restraint::kAnchoredUpstream:   return "anchored_upstream";
    case Restraint::kAnchoredThroughout: return "anchored_throughout";
  }
  return "unknown";
}

// Wylie & Streeter, Fluid Transients in Systems (1993), sec. 2.4, thin-walled pipe:
// (a) anchored upstream only:            c1 = 1 - nu/2
// (b) anchored throughout against axial movement: c1 = 1 - nu^2
// (c) expansion joints throughout:       c1 = 1
double RestraintFactor(Restraint r, double poisson_ratio) {
  switch (r) {
    case Restraint::kExpansionJoints:    return 1.0;
    case Restraint::kAnchoredUpstream:   return 1.0 - 0.5 * poisson_ratio;
    case Restraint::kAnchoredThroughout: return 1.0 - poisson_ratio * poisson_ratio;
  }
  return 1.0;
}

double PipeSection::flow_area_m2() const {
  const double d = inside_diameter_m();
  constexpr double kPi = 3.141592653589793;
  return 0.25 * kPi * d * d;
}

double PipeSection::wall_compliance_per_pa() const {
  return RestraintFactor(restraint, poisson_ratio) * inside_diameter_m() /
         (youngs_modulus_pa * wall_thickness_m);
}

double EffectiveBulkModulus(double fluid_bulk_modulus_pa, const PipeSection& pipe) {
  return 1.0 / (1.0 / fluid_bulk_modulus_pa + pipe.wall_compliance_per_pa());
}

double WaveSpeed(double fluid_bulk_modulus_pa, double density_kg_m3, const PipeSection& pipe) {
  return std::sqrt(EffectiveBulkModulus(fluid_bulk_modulus_pa, pipe) / density_kg_m3);
}

namespace {
constexpr double kLaminarReynolds = 2000.0;
// eps/D below zero is meaningless; it is read as a smooth pipe.
double Roughness(double relative_roughness) { return std::max(relative_roughness, 0.0); }
}  // namespace

// Colebrook & White (1939), solved for x = 1/sqrt(f) by fixed-point iteration
//   x <- -2 log10(r/3.7 + 2.51 x / Re),
// a contraction (|dg/dx| < 0.87/x, below 0.3 for turbulent flow) started from
// Swamee-Jain, run until the relative change of x is below 1e-12.
double ColebrookFriction(double reynolds, double relative_roughness) {
  const double r = Roughness(relative_roughness);
  if (!(reynolds > 0.0)) return FullyRoughFriction(r);
  double x = 1.0 / std::sqrt(SwameeJainFriction(reynolds, r));
  for (int i = 0; i < 100; ++i) {
    const double next = -2.0 * std::log10(r / 3.7 + 2.51 * x / reynolds);
    const double change = std::fabs(next - x);
    x = next;
    if (change <= 1e-12 * std::fabs(x)) break;
  }
  return 1.0 / (x * x);
}

// Swamee & Jain (1976), J. Hydraulics Division ASCE 102(5).
double SwameeJainFriction(double reynolds, double relative_roughness) {
  const double r = Roughness(relative_roughness);
  if (!(reynolds > 0.0)) return FullyRoughFriction(r);
  const double l = std::log10(r / 3.7 + 5.74 / std::pow(reynolds, 0.9));
  return 0.25 / (l * l);
}

// von Karman fully rough limit. Zero for a perfectly smooth pipe (the limit).
double FullyRoughFriction(double relative_roughness) {
  const double r = Roughness(relative_roughness);
  if (r == 0.0) return 0.0;
  const double x = -2.0 * std::log10(r / 3.7);
  return 1.0 / (x * x);
}

// 64/Re below Re 2000 (Hagen-Poiseuille), Colebrook from 2000 up; the jump at
// 2000 is the usual transition. Re <= 0 (no flow, or bad input) gives the
// fully rough value so that the result stays finite.
double DarcyFriction(double reynolds, double relative_roughness) {
  if (!(reynolds > 0.0)) return FullyRoughFriction(relative_roughness);
  if (reynolds < kLaminarReynolds) return 64.0 / reynolds;
  return ColebrookFriction(reynolds, relative_roughness);
}

}  // namespace holdfast
