// Fluid property models: density as a function of absolute pressure and
// temperature, with the two derivatives the inventory and the uncertainty
// need. Exact (reference) evaluation lives here; the hot path uses a
// DensityTable built once from these functions.
#pragma once

#include <string>
#include <vector>

namespace holdfast {

enum class FluidKind {
  kWater,           // IAPWS-IF97 Region 1 (IAPWS 2007), liquid water
  kGenericLiquid,   // rho = rho_ref * exp((P-P_ref)/K - beta*(T-T_ref))
  kCrudeOil,        // API MPMS Ch. 11.1 (2004)-style CTL and CPL
  kRefinedProduct,  // API MPMS Ch. 11.1 (2004)-style CTL and CPL, product constants
  kNaturalGas,      // rho = P*Mw/(Z*R*T); Z by Dranchuk & Abou-Kassem (1975),
                    // pseudo-critical properties by Sutton (1985)
};

// Commodity groups of API MPMS Ch. 11.1, which fix the K0, K1, K2 constants of
// the thermal expansion coefficient at 60 degF.
enum class ApiCommodity { kCrudeOil, kGasoline, kTransitionZone, kJetFuel, kFuelOil, kLubeOil };

const char* FluidKindName(FluidKind k);

// Typical dynamic viscosity near 15 degC, Pa s, when a config gives none
// (common handbook magnitudes, from memory): water 1.1e-3; crude oil 1e-2;
// gasoline 5e-4, jet fuel 1.5e-3, fuel oil (diesel) 3.5e-3, lube oil 1e-1,
// transition zone 1e-3; natural gas 1.1e-5.
double DefaultViscosity(FluidKind kind, ApiCommodity commodity);

struct FluidSpec {
  FluidKind kind = FluidKind::kWater;
  std::string name;

  // kGenericLiquid: reference state and the two coefficients.
  double reference_density_kg_m3 = 0.0;
  double reference_pressure_pa = 101325.0;   // absolute
  double reference_temperature_k = 288.15;
  double bulk_modulus_pa = 0.0;               // isothermal
  double thermal_expansion_per_k = 0.0;       // volumetric

  // kCrudeOil / kRefinedProduct: base density at 60 degF (15.556 degC) and 0 psig.
  double base_density_kg_m3 = 0.0;
  ApiCommodity commodity = ApiCommodity::kCrudeOil;

  // kNaturalGas: specific gravity relative to air (Mw = gravity * 28.9647 g/mol).
  double gas_gravity = 0.0;

  // Dynamic viscosity, Pa s, for friction (leak location). Config
  // "viscosity_cp"; when absent, DefaultViscosity() of the model.
  double viscosity_pa_s = 1.0e-3;

  bool IsValid(std::string* why) const;
};

struct FluidState {
  double density_kg_m3 = 0.0;
  double ddensity_dp_kg_m3_pa = 0.0;  // isothermal
  double ddensity_dt_kg_m3_k = 0.0;   // isobaric
};

// Reference evaluation. pressure_pa is absolute. Outside a model's range the
// functions still return finite numbers (clamped) and `in_range` (if given) is false.
FluidState EvaluateFluid(const FluidSpec& fluid, double pressure_pa, double temperature_k,
                         bool* in_range = nullptr);

// Convenience views of EvaluateFluid.
double FluidDensity(const FluidSpec& fluid, double pressure_pa, double temperature_k);
// Isothermal compressibility kappa_T = (1/rho) drho/dP, 1/Pa. Bulk modulus K = 1/kappa_T.
double FluidCompressibility(const FluidSpec& fluid, double pressure_pa, double temperature_k);
// Volumetric thermal expansion beta = -(1/rho) drho/dT, 1/K.
double FluidThermalExpansion(const FluidSpec& fluid, double pressure_pa, double temperature_k);

// --- Pieces of the models, exposed for tests against published values ---

// IAPWS-IF97 Region 1: specific volume, m3/kg, and its derivatives.
double If97Region1SpecificVolume(double pressure_pa, double temperature_k);
// Dranchuk & Abou-Kassem (1975) Z-factor at pseudo-reduced temperature and pressure.
double DakZFactor(double pseudo_reduced_temperature, double pseudo_reduced_pressure);
// Sutton (1985) pseudo-critical temperature (K) and pressure (Pa) from gas gravity.
void SuttonPseudoCritical(double gas_gravity, double* tpc_k, double* ppc_pa);
// API MPMS 11.1 correction factors for temperature (CTL) and pressure (CPL).
// temperature_f in degF, gauge_pressure_psi in psig, base density in kg/m3 at 60 degF.
double ApiCtl(ApiCommodity c, double base_density_kg_m3, double temperature_f);
double ApiCpl(double base_density_kg_m3, double temperature_f, double gauge_pressure_psi);
// Scaled compressibility factor F_p (1/psi) of API MPMS 11.1.
double ApiCompressibilityPerPsi(double base_density_kg_m3, double temperature_f);

// Fast density for the hot path: bilinear interpolation of rho, drho/dP and
// drho/dT on a regular (P, T) grid filled from EvaluateFluid. Built once when
// a site is compiled; evaluation allocates nothing. Outside the grid the
// state is clamped to the nearest edge and counted by the caller.
class DensityTable {
 public:
  struct Options {
    double pressure_min_pa = 0.5e5;      // absolute
    double pressure_max_pa = 200.0e5;
    double pressure_step_pa = 0.25e5;
    double temperature_min_k = 253.15;
    double temperature_max_k = 343.15;
    double temperature_step_k = 1.0;
    bool IsValid(std::string* why) const;
  };

  DensityTable() = default;
  // Returns false with the reason if the options are invalid.
  bool Build(const FluidSpec& fluid, const Options& options, std::string* why);
  bool built() const { return !rho_.empty(); }

  // Density and derivatives at (P absolute, T). Returns false if clamped.
  bool Evaluate(double pressure_pa, double temperature_k, FluidState* out) const;
  double Density(double pressure_pa, double temperature_k) const;
  // Density only, inline for the tick loop. Returns false if clamped.
  inline bool DensityOnly(double pressure_pa, double temperature_k, double* rho) const;

  const Options& options() const { return options_; }

 private:
  Options options_;
  int np_ = 0, nt_ = 0;
  double inv_dp_ = 0.0, inv_dt_ = 0.0;
  std::vector<double> rho_, drho_dp_, drho_dt_;  // [ip * nt_ + it]
};

inline bool DensityTable::DensityOnly(double pressure_pa, double temperature_k, double* rho) const {
  const bool inside = pressure_pa >= options_.pressure_min_pa && pressure_pa <= options_.pressure_max_pa &&
                      temperature_k >= options_.temperature_min_k && temperature_k <= options_.temperature_max_k;
  const double xmax = static_cast<double>(np_ - 2), ymax = static_cast<double>(nt_ - 2);
  double x = (pressure_pa - options_.pressure_min_pa) * inv_dp_;
  double y = (temperature_k - options_.temperature_min_k) * inv_dt_;
  x = x >= 0.0 ? x : 0.0;
  y = y >= 0.0 ? y : 0.0;
  // Cell index clamped to the last cell; the fraction may reach 1 at the far edge.
  const double xi = x < xmax ? static_cast<double>(static_cast<int>(x)) : xmax;
  const double yi = y < ymax ? static_cast<double>(static_cast<int>(y)) : ymax;
  double fx = x - xi, fy = y - yi;
  fx = fx < 1.0 ? fx : 1.0;
  fy = fy < 1.0 ? fy : 1.0;
  const double* r = rho_.data() + static_cast<std::size_t>(xi) * static_cast<std::size_t>(nt_) + static_cast<std::size_t>(yi);
  const double lo = r[0] + fy * (r[1] - r[0]);
  const double hi = r[nt_] + fy * (r[nt_ + 1] - r[nt_]);
  *rho = lo + fx * (hi - lo);
  return inside;
}

}  // namespace holdfast
