// Pipe-wall elasticity, wave speed and friction.
//
// Wylie & Streeter, Fluid Transients in Systems (1993), sec. 2.4: a thin-walled
// elastic pipe changes its cross-section with pressure,
//     dA/A = c1 * D / (E * e) * dP,
// with the restraint factor c1, and the effective bulk modulus of fluid plus
// pipe satisfies 1/K_eff = 1/K + c1*D/(E*e); the wave speed is
// a = sqrt(K_eff / rho) (Korteweg 1878).
#pragma once

#include <vector>

namespace holdfast {

enum class Restraint {
  kExpansionJoints,     // c1 = 1
  kAnchoredUpstream,    // c1 = 1 - nu/2
  kAnchoredThroughout,  // c1 = 1 - nu^2
};

const char* RestraintName(Restraint r);
double RestraintFactor(Restraint r, double poisson_ratio);

struct ElevationPoint {
  double chainage_m = 0.0;   // from the segment inlet
  double elevation_m = 0.0;  // above datum
};

struct PipeSection {
  double length_m = 0.0;
  double outside_diameter_m = 0.0;
  double wall_thickness_m = 0.0;
  double youngs_modulus_pa = 207e9;   // carbon steel, common value
  double poisson_ratio = 0.30;        // carbon steel, common value
  Restraint restraint = Restraint::kAnchoredThroughout;
  double roughness_m = 45e-6;         // commercial steel, common value
  double wall_thermal_expansion_per_k = 1.2e-5;  // linear, carbon steel, common value

  double inside_diameter_m() const { return outside_diameter_m - 2.0 * wall_thickness_m; }
  double flow_area_m2() const;
  // c1 * D / (E * e), 1/Pa: relative area change per pascal.
  double wall_compliance_per_pa() const;
};

// 1/K_eff = 1/K + c1*D/(E*e).
double EffectiveBulkModulus(double fluid_bulk_modulus_pa, const PipeSection& pipe);
// Korteweg: a = sqrt(K_eff / rho).
double WaveSpeed(double fluid_bulk_modulus_pa, double density_kg_m3, const PipeSection& pipe);

// Darcy friction factor.
// Colebrook & White (1939): 1/sqrt(f) = -2 log10(eps/(3.7 D) + 2.51/(Re sqrt(f))), solved iteratively.
double ColebrookFriction(double reynolds, double relative_roughness);
// Swamee & Jain (1976): f = 0.25 / [log10(eps/(3.7 D) + 5.74/Re^0.9)]^2.
double SwameeJainFriction(double reynolds, double relative_roughness);
// Fully rough limit (von Karman): 1/sqrt(f) = -2 log10(eps/(3.7 D)).
double FullyRoughFriction(double relative_roughness);
// Laminar below Re 2000 (64/Re); Colebrook above.
double DarcyFriction(double reynolds, double relative_roughness);

}  // namespace holdfast
