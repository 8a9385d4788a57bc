// Fluid models against published values, hand calculations and each other.
#include "holdfast/fluid.h"

#include <algorithm>
#include <cmath>
#include <string>

#include <gtest/gtest.h>

#include "holdfast/units.h"

namespace holdfast {
namespace {

constexpr double kPsi_pa = 6894.757293168361;  // NIST SP 811 (2008), B.8

double KelvinOfFahrenheit(double t_f) { return (t_f - 32.0) / 1.8 + kZeroCelsius_k; }

FluidSpec Water() {
  FluidSpec f;
  f.kind = FluidKind::kWater;
  f.name = "water";
  return f;
}

FluidSpec Crude(double rho60) {
  FluidSpec f;
  f.kind = FluidKind::kCrudeOil;
  f.name = "crude";
  f.base_density_kg_m3 = rho60;
  f.commodity = ApiCommodity::kCrudeOil;
  return f;
}

FluidSpec Gas(double gravity) {
  FluidSpec f;
  f.kind = FluidKind::kNaturalGas;
  f.name = "gas";
  f.gas_gravity = gravity;
  return f;
}

FluidSpec Generic() {
  FluidSpec f;
  f.kind = FluidKind::kGenericLiquid;
  f.name = "diesel-like";
  f.reference_density_kg_m3 = 840.0;
  f.reference_pressure_pa = 101325.0;
  f.reference_temperature_k = 288.15;
  f.bulk_modulus_pa = 1.5e9;
  f.thermal_expansion_per_k = 8.5e-4;
  return f;
}

// Central differences of the reference density, for checking the derivatives.
void ExpectDerivativesMatchDifferences(const FluidSpec& f, double p, double t, double tol) {
  const FluidState s = EvaluateFluid(f, p, t);
  const double hp = 1e-4 * p;
  const double ht = 1e-3;
  const double dp = (FluidDensity(f, p + hp, t) - FluidDensity(f, p - hp, t)) / (2.0 * hp);
  const double dt = (FluidDensity(f, p, t + ht) - FluidDensity(f, p, t - ht)) / (2.0 * ht);
  EXPECT_NEAR(s.ddensity_dp_kg_m3_pa, dp, tol * std::fabs(dp)) << f.name << " " << p << " " << t;
  EXPECT_NEAR(s.ddensity_dt_kg_m3_k, dt, tol * std::max(std::fabs(dt), 1e-3))
      << f.name << " " << p << " " << t;
}

// --- Water, IAPWS-IF97 Region 1 ---

TEST(Water, If97VerificationValues) {
  // IAPWS-IF97 (IAPWS R7-97, 2012), Table 5, specific volume (from memory;
  // the same numbers are in the docstring of python3-iapws' _Region1).
  // Nine significant digits: half a unit of the last digit is below 5e-9 relative.
  EXPECT_NEAR(If97Region1SpecificVolume(3e6, 300.0) / 0.100215168e-2, 1.0, 5e-9);
  EXPECT_NEAR(If97Region1SpecificVolume(80e6, 300.0) / 0.971180894e-3, 1.0, 5e-9);
  EXPECT_NEAR(If97Region1SpecificVolume(3e6, 500.0) / 0.120241800e-2, 1.0, 5e-9);
}

TEST(Water, CompressibilityAndExpansionAt500K) {
  // python3-iapws docstring of _Region1 at 500 K, 3 MPa: kt = 0.00112892188 1/MPa,
  // alfav = 0.00164118128 1/K (computed from IAPWS-IF97 Table 3 relations).
  const FluidSpec w = Water();
  EXPECT_NEAR(FluidCompressibility(w, 3e6, 500.0) / 1.12892188e-9, 1.0, 1e-8);
  EXPECT_NEAR(FluidThermalExpansion(w, 3e6, 500.0) / 1.64118128e-3, 1.0, 1e-8);
}

TEST(Water, DerivativesMatchDifferences) {
  const FluidSpec w = Water();
  int checked = 0;
  for (double p : {0.2e6, 2e6, 10e6, 20e6, 50e6}) {
    for (double t : {280.0, 300.0, 350.0, 450.0, 600.0}) {
      bool in_range = false;
      EvaluateFluid(w, p, t, &in_range);
      if (!in_range) continue;  // vapour side of saturation (e.g. 10 MPa at 600 K)
      ExpectDerivativesMatchDifferences(w, p, t, 1e-6);
      ++checked;
    }
  }
  EXPECT_EQ(checked, 21);  // 25 less 0.2 MPa at 450 K and 0.2, 2, 10 MPa at 600 K
}

TEST(Water, ClampsOutsideRegion1) {
  const FluidSpec w = Water();
  bool in_range = true;
  FluidState s = EvaluateFluid(w, 1e6, 300.0, &in_range);
  EXPECT_TRUE(in_range);
  // Below 273.15 K: clamped to 273.15 K.
  s = EvaluateFluid(w, 1e6, 260.0, &in_range);
  EXPECT_FALSE(in_range);
  EXPECT_DOUBLE_EQ(s.density_kg_m3, FluidDensity(w, 1e6, 273.15));
  EXPECT_EQ(s.ddensity_dt_kg_m3_k, 0.0);
  // Above 100 MPa.
  s = EvaluateFluid(w, 150e6, 300.0, &in_range);
  EXPECT_FALSE(in_range);
  EXPECT_DOUBLE_EQ(s.density_kg_m3, FluidDensity(w, 100e6, 300.0));
  // Below saturation: 0.05 MPa at 373.15 K (p_sat about 0.1014 MPa) is steam;
  // the model stays on the saturated liquid.
  s = EvaluateFluid(w, 0.05e6, 373.15, &in_range);
  EXPECT_FALSE(in_range);
  EXPECT_TRUE(std::isfinite(s.density_kg_m3));
  // Saturated liquid at 100 degC is about 958.4 kg/m3 (steam tables, from memory).
  EXPECT_NEAR(s.density_kg_m3, 958.4, 0.5);
  // Above 623.15 K.
  s = EvaluateFluid(w, 30e6, 700.0, &in_range);
  EXPECT_FALSE(in_range);
  EXPECT_TRUE(std::isfinite(s.density_kg_m3));
}

// --- Natural gas, DAK with Sutton ---

// Hall & Yarborough (1973) fit of the same Standing-Katz chart, written here from
// memory as an independent second fit to compare with.
double HallYarboroughZ(double tpr, double ppr) {
  const double t = 1.0 / tpr;
  const double a = 0.06125 * t * std::exp(-1.2 * (1.0 - t) * (1.0 - t));
  auto f = [&](double y) {
    return -a * ppr + (y + y * y + y * y * y - y * y * y * y) / std::pow(1.0 - y, 3) -
           (14.76 * t - 9.76 * t * t + 4.58 * t * t * t) * y * y +
           (90.7 * t - 242.2 * t * t + 42.4 * t * t * t) * std::pow(y, 2.18 + 2.82 * t);
  };
  double lo = 1e-12, hi = 0.99;  // f(lo) < 0 < f(hi)
  for (int i = 0; i < 200; ++i) {
    const double mid = 0.5 * (lo + hi);
    (f(mid) < 0.0 ? lo : hi) = mid;
  }
  return a * ppr / (0.5 * (lo + hi));
}

TEST(Gas, DakAgainstStandingKatzChart) {
  // Standing & Katz (1942) chart readings, from memory, 2 %. (Both DAK and
  // Hall-Yarborough give 0.82 at Tpr 1.5, Ppr 2.0.)
  EXPECT_NEAR(DakZFactor(1.5, 2.0), 0.82, 0.82 * 0.02);
  EXPECT_NEAR(DakZFactor(2.0, 3.0), 0.95, 0.95 * 0.02);
  EXPECT_NEAR(DakZFactor(1.5, 10.0), 1.13, 1.13 * 0.02);
}

TEST(Gas, DakAgainstHallYarborough) {
  // Two fits of one chart agree within 1.5 % away from the critical point
  // (measured up to 2.7 % at Tpr 1.1, which is not asserted).
  for (double tpr : {1.3, 1.4, 1.5, 1.7, 2.0, 2.4, 3.0}) {
    for (double ppr : {0.2, 0.5, 1.0, 2.0, 3.0, 5.0, 7.0, 10.0, 15.0}) {
      EXPECT_NEAR(DakZFactor(tpr, ppr) / HallYarboroughZ(tpr, ppr), 1.0, 0.015)
          << "Tpr " << tpr << " Ppr " << ppr;
    }
  }
}

TEST(Gas, DakTendsToIdealGas) {
  // Z -> 1 as Ppr -> 0 (every equation of state; the second virial term is O(Ppr)).
  for (double tpr : {1.05, 1.5, 3.0}) {
    EXPECT_NEAR(DakZFactor(tpr, 1e-6), 1.0, 1e-6);
    EXPECT_NEAR(DakZFactor(tpr, 1e-3), 1.0, 1e-3);
  }
}

TEST(Gas, SuttonPseudoCriticalHandCalculation) {
  // Sutton (1985), g = 0.65, hand calculation:
  //   Tpc = 169.2 + 349.5*0.65 - 74.0*0.4225 = 365.11 degR = 202.8389 K
  //   Ppc = 756.8 - 131.0*0.65 - 3.6*0.4225 = 670.129 psia = 4.620377 MPa
  double tpc = 0.0, ppc = 0.0;
  SuttonPseudoCritical(0.65, &tpc, &ppc);
  EXPECT_NEAR(tpc, 365.11 / 1.8, 1e-9);
  EXPECT_NEAR(ppc, 670.129 * kPsi_pa, 1e-6);
  EXPECT_NEAR(tpc, 202.8389, 1e-4);
  EXPECT_NEAR(ppc, 4.620377e6, 1.0);
}

TEST(Gas, DensityIsRealGasLaw) {
  const FluidSpec g = Gas(0.65);
  double tpc = 0.0, ppc = 0.0;
  SuttonPseudoCritical(0.65, &tpc, &ppc);
  const double mw = 0.65 * kAirMolarMass_kg_mol;
  for (double p : {2e6, 5e6, 10e6}) {
    for (double t : {270.0, 300.0, 330.0}) {
      const double z = DakZFactor(t / tpc, p / ppc);
      // rho = P Mw / (Z R T), the definition of Z.
      EXPECT_NEAR(FluidDensity(g, p, t) / (p * mw / (z * kGasConstant_j_mol_k * t)), 1.0, 1e-12);
      ExpectDerivativesMatchDifferences(g, p, t, 1e-6);
    }
  }
  // Low pressure (below the DAK range, flagged) tends to the ideal gas.
  bool in_range = true;
  const double rho = EvaluateFluid(g, 1000.0, 300.0, &in_range).density_kg_m3;
  EXPECT_FALSE(in_range);
  EXPECT_NEAR(rho / (1000.0 * mw / (kGasConstant_j_mol_k * 300.0)), 1.0, 1e-3);
}

// --- Crude oil and refined products, API MPMS 11.1 ---

TEST(Api, CtlIsOneAt60F) {
  // API MPMS 11.1: CTL = 1 at the base temperature (the formula has dT = 0).
  for (ApiCommodity c : {ApiCommodity::kCrudeOil, ApiCommodity::kGasoline,
                         ApiCommodity::kTransitionZone, ApiCommodity::kJetFuel,
                         ApiCommodity::kFuelOil, ApiCommodity::kLubeOil}) {
    EXPECT_EQ(ApiCtl(c, 850.0, 60.0), 1.0);
  }
  EXPECT_EQ(ApiCpl(850.0, 60.0, 0.0), 1.0);
}

TEST(Api, CrudeCtlHandCalculation) {
  // Hand calculation from the published formula, crude oil, rho60 = 850 kg/m3, 100 degF:
  //   alpha60 = 341.0957 / 850^2                     = 4.72104775e-4 1/degF
  //   1 + 0.8 alpha60 (40 + 0.01374979547)           = 1.01511255
  //   CTL = exp(-4.72104775e-4 * 40 * 1.01511255)    = exp(-0.0191695792) = 0.98101299
  EXPECT_NEAR(ApiCtl(ApiCommodity::kCrudeOil, 850.0, 100.0), 0.98101299, 1e-8);
}

TEST(Api, CplHandCalculation) {
  // Hand calculation, rho60 = 850, 60 degF:
  //   Fp = exp(-1.9947 + 0.00013427*60 + (793920 + 2326*60)/850^2) * 1e-5
  //      = exp(-1.9866438 + 933480/722500) * 1e-5 = exp(-1.9866438 + 1.2920138) * 1e-5
  //      = exp(-0.6946300) * 1e-5 = 4.992592e-6 1/psi
  //   CPL at 1000 psig = 1 / (1 - 4.992592e-3) = 1.0050176
  EXPECT_NEAR(ApiCompressibilityPerPsi(850.0, 60.0), 4.992592e-6, 1e-11);
  EXPECT_NEAR(ApiCpl(850.0, 60.0, 1000.0), 1.0050176, 1e-7);
}

TEST(Api, DensityIsBaseTimesCtlTimesCpl) {
  const FluidSpec c = Crude(850.0);
  // At 60 degF and one standard atmosphere the density is the base density.
  EXPECT_NEAR(FluidDensity(c, kStandardAtmosphere_pa, KelvinOfFahrenheit(60.0)), 850.0, 1e-9);
  const double t_f = 100.0, pg = 800.0;
  const double expected = 850.0 * ApiCtl(ApiCommodity::kCrudeOil, 850.0, t_f) *
                          ApiCpl(850.0, t_f, pg);
  EXPECT_NEAR(FluidDensity(c, kStandardAtmosphere_pa + pg * kPsi_pa, KelvinOfFahrenheit(t_f)),
              expected, 1e-9);
}

TEST(Api, DerivativesMatchDifferences) {
  FluidSpec gasoline = Crude(730.0);
  gasoline.kind = FluidKind::kRefinedProduct;
  gasoline.commodity = ApiCommodity::kGasoline;
  gasoline.name = "gasoline";
  for (const FluidSpec& f : {Crude(850.0), Crude(950.0), gasoline}) {
    for (double p : {0.5e6, 5e6, 15e6}) {
      for (double t : {263.15, 288.15, 330.0}) ExpectDerivativesMatchDifferences(f, p, t, 1e-6);
    }
  }
}

TEST(Api, RangeFlags) {
  const FluidSpec c = Crude(850.0);
  bool in_range = false;
  EvaluateFluid(c, 5e6, 300.0, &in_range);
  EXPECT_TRUE(in_range);
  // Above 1500 psig: flagged, but the density keeps rising with pressure.
  const FluidState s = EvaluateFluid(c, 15e6, 300.0, &in_range);
  EXPECT_FALSE(in_range);
  EXPECT_GT(s.ddensity_dp_kg_m3_pa, 0.0);
  // Above 302 degF: clamped.
  const FluidState hot = EvaluateFluid(c, 5e6, 450.0, &in_range);
  EXPECT_FALSE(in_range);
  EXPECT_DOUBLE_EQ(hot.density_kg_m3, FluidDensity(c, 5e6, KelvinOfFahrenheit(302.0)));
}

// --- Generic liquid ---

TEST(GenericLiquid, ExactFormula) {
  const FluidSpec f = Generic();
  const double p = 5e6, t = 300.0;
  // Definition: rho = rho_ref exp((P - P_ref)/K - beta (T - T_ref)).
  const double rho = 840.0 * std::exp((p - 101325.0) / 1.5e9 - 8.5e-4 * (t - 288.15));
  const FluidState s = EvaluateFluid(f, p, t);
  EXPECT_DOUBLE_EQ(s.density_kg_m3, rho);
  EXPECT_DOUBLE_EQ(s.ddensity_dp_kg_m3_pa, rho / 1.5e9);
  EXPECT_DOUBLE_EQ(s.ddensity_dt_kg_m3_k, -rho * 8.5e-4);
  EXPECT_DOUBLE_EQ(FluidCompressibility(f, p, t), 1.0 / 1.5e9);
  EXPECT_DOUBLE_EQ(FluidThermalExpansion(f, p, t), 8.5e-4);
  EXPECT_DOUBLE_EQ(FluidDensity(f, 101325.0, 288.15), 840.0);
}

// --- Validation ---

TEST(FluidSpec, IsValid) {
  std::string why;
  EXPECT_TRUE(Water().IsValid(&why));
  EXPECT_TRUE(Generic().IsValid(&why));
  EXPECT_TRUE(Crude(850.0).IsValid(&why));
  EXPECT_TRUE(Gas(0.65).IsValid(&why));

  FluidSpec f = Generic();
  f.bulk_modulus_pa = 0.0;
  EXPECT_FALSE(f.IsValid(&why));
  EXPECT_NE(why.find("bulk_modulus_pa"), std::string::npos) << why;
  f = Generic();
  f.reference_density_kg_m3 = -1.0;
  EXPECT_FALSE(f.IsValid(&why));
  f = Generic();
  f.thermal_expansion_per_k = std::nan("");
  EXPECT_FALSE(f.IsValid(&why));

  EXPECT_FALSE(Crude(0.0).IsValid(&why));
  EXPECT_FALSE(Crude(500.0).IsValid(&why));   // below the API MPMS 11.1 range
  EXPECT_FALSE(Crude(1300.0).IsValid(&why));  // above it
  f = Crude(750.0);
  f.kind = FluidKind::kRefinedProduct;        // commodity left at crude oil
  EXPECT_FALSE(f.IsValid(&why));
  f.commodity = ApiCommodity::kGasoline;
  EXPECT_TRUE(f.IsValid(&why)) << why;
  f = Crude(850.0);
  f.commodity = ApiCommodity::kJetFuel;       // contradicts the crude-oil kind
  EXPECT_FALSE(f.IsValid(&why));

  EXPECT_FALSE(Gas(0.0).IsValid(&why));
  EXPECT_FALSE(Gas(0.5).IsValid(&why));
  EXPECT_FALSE(Gas(1.6).IsValid(&why));
  EXPECT_NE(why.find("gas_gravity"), std::string::npos) << why;
}

TEST(FluidKind, Names) {
  EXPECT_EQ(std::string(FluidKindName(FluidKind::kWater)), "water");
  EXPECT_EQ(std::string(FluidKindName(FluidKind::kGenericLiquid)), "generic_liquid");
  EXPECT_EQ(std::string(FluidKindName(FluidKind::kCrudeOil)), "crude_oil");
  EXPECT_EQ(std::string(FluidKindName(FluidKind::kRefinedProduct)), "refined_product");
  EXPECT_EQ(std::string(FluidKindName(FluidKind::kNaturalGas)), "natural_gas");
}

// --- DensityTable ---

// Worst errors of the table against the reference at the centre of every cell
// (where bilinear interpolation is worst) and at a few off-centre points.
struct TableErrors {
  double rho_rel = 0.0;  // relative
  double dp_rel = 0.0;   // relative to |drho/dP|
  double dt_abs = 0.0;   // absolute, kg/m3/K (drho/dT crosses zero for water)
};

TableErrors CompareTable(const FluidSpec& f, const DensityTable::Options& o) {
  DensityTable table;
  std::string why;
  EXPECT_TRUE(table.Build(f, o, &why)) << why;
  TableErrors e;
  const int np = static_cast<int>(std::lround((o.pressure_max_pa - o.pressure_min_pa) /
                                              o.pressure_step_pa));
  const int nt = static_cast<int>(std::lround((o.temperature_max_k - o.temperature_min_k) /
                                              o.temperature_step_k));
  for (int i = 0; i < np; ++i) {
    for (int j = 0; j < nt; ++j) {
      for (double fx : {0.5, 0.25}) {
        const double p = o.pressure_min_pa + (i + fx) * o.pressure_step_pa;
        const double t = o.temperature_min_k + (j + 1.0 - fx) * o.temperature_step_k;
        FluidState got;
        EXPECT_TRUE(table.Evaluate(p, t, &got));
        const FluidState ref = EvaluateFluid(f, p, t);
        e.rho_rel = std::max(e.rho_rel, std::fabs(got.density_kg_m3 / ref.density_kg_m3 - 1.0));
        e.dp_rel = std::max(
            e.dp_rel, std::fabs(got.ddensity_dp_kg_m3_pa / ref.ddensity_dp_kg_m3_pa - 1.0));
        e.dt_abs = std::max(e.dt_abs, std::fabs(got.ddensity_dt_kg_m3_k - ref.ddensity_dt_kg_m3_k));
        EXPECT_NEAR(table.Density(p, t), got.density_kg_m3, 1e-12 * got.density_kg_m3);
      }
    }
  }
  return e;
}

TEST(DensityTable, WaterMatchesReference) {
  DensityTable::Options o;  // default pressure grid; temperature inside Region 1
  o.temperature_min_k = 274.15;
  o.temperature_max_k = 343.15;
  const TableErrors e = CompareTable(Water(), o);
  RecordProperty("water_rho_rel", std::to_string(e.rho_rel));
  EXPECT_LT(e.rho_rel, 1e-5);
  EXPECT_LT(e.dp_rel, 1e-3);
  EXPECT_LT(e.dt_abs, 1e-3);  // drho/dT is about -0.2 .. -0.6 kg/m3/K here
}

TEST(DensityTable, CrudeMatchesReference) {
  const DensityTable::Options o;  // defaults
  const TableErrors e = CompareTable(Crude(850.0), o);
  RecordProperty("crude_rho_rel", std::to_string(e.rho_rel));
  EXPECT_LT(e.rho_rel, 1e-5);
  EXPECT_LT(e.dp_rel, 1e-3);
  EXPECT_LT(e.dt_abs, 1e-4);  // drho/dT is about -0.7 kg/m3/K
}

TEST(DensityTable, GasMatchesReference) {
  const DensityTable::Options o;  // defaults
  const TableErrors e = CompareTable(Gas(0.65), o);
  RecordProperty("gas_rho_rel", std::to_string(e.rho_rel));
  // Gas density is far more curved (and near zero at the low end); looser.
  EXPECT_LT(e.rho_rel, 1e-3);
}

TEST(DensityTable, NodesAreExact) {
  const FluidSpec w = Water();
  DensityTable::Options o;
  o.temperature_min_k = 280.0;
  o.temperature_max_k = 300.0;
  DensityTable table;
  std::string why;
  ASSERT_TRUE(table.Build(w, o, &why)) << why;
  FluidState s;
  ASSERT_TRUE(table.Evaluate(5e6, 290.0, &s));
  const FluidState ref = EvaluateFluid(w, 5e6, 290.0);
  EXPECT_NEAR(s.density_kg_m3, ref.density_kg_m3, 1e-12 * ref.density_kg_m3);
  // The far corner is inside and exact too.
  ASSERT_TRUE(table.Evaluate(o.pressure_max_pa, o.temperature_max_k, &s));
  EXPECT_NEAR(s.density_kg_m3, FluidDensity(w, o.pressure_max_pa, o.temperature_max_k), 1e-9);
}

TEST(DensityTable, ReportsClamping) {
  const FluidSpec c = Crude(850.0);
  DensityTable table;
  std::string why;
  const DensityTable::Options o;
  ASSERT_TRUE(table.Build(c, o, &why)) << why;
  EXPECT_TRUE(table.built());
  FluidState in, out;
  EXPECT_TRUE(table.Evaluate(5e6, 300.0, &in));
  // Pressure above the grid: clamped to the top edge.
  EXPECT_FALSE(table.Evaluate(300e5, 300.0, &out));
  ASSERT_TRUE(table.Evaluate(o.pressure_max_pa, 300.0, &in));
  EXPECT_DOUBLE_EQ(out.density_kg_m3, in.density_kg_m3);
  // Temperature below the grid.
  EXPECT_FALSE(table.Evaluate(5e6, 200.0, &out));
  ASSERT_TRUE(table.Evaluate(5e6, o.temperature_min_k, &in));
  EXPECT_DOUBLE_EQ(out.density_kg_m3, in.density_kg_m3);
  // Both, and NaN.
  EXPECT_FALSE(table.Evaluate(-1.0, 1000.0, &out));
  EXPECT_TRUE(std::isfinite(out.density_kg_m3));
  EXPECT_FALSE(table.Evaluate(std::nan(""), 300.0, &out));
  EXPECT_TRUE(std::isfinite(out.density_kg_m3));
}

TEST(DensityTable, UnevenStepEndsOnMax) {
  DensityTable::Options o;
  o.pressure_min_pa = 1e5;
  o.pressure_max_pa = 10.1e5;  // not a multiple of the step
  o.pressure_step_pa = 2e5;
  o.temperature_min_k = 280.0;
  o.temperature_max_k = 290.5;
  o.temperature_step_k = 2.0;
  DensityTable table;
  std::string why;
  ASSERT_TRUE(table.Build(Generic(), o, &why)) << why;
  FluidState s;
  EXPECT_TRUE(table.Evaluate(10.1e5, 290.5, &s));
  EXPECT_NEAR(s.density_kg_m3, FluidDensity(Generic(), 10.1e5, 290.5), 1e-9);
}

TEST(DensityTable, OptionsValidation) {
  std::string why;
  EXPECT_TRUE(DensityTable::Options().IsValid(&why));
  DensityTable::Options o;
  o.pressure_min_pa = 0.0;
  EXPECT_FALSE(o.IsValid(&why));
  o = DensityTable::Options();
  o.pressure_max_pa = o.pressure_min_pa;
  EXPECT_FALSE(o.IsValid(&why));
  o = DensityTable::Options();
  o.pressure_step_pa = -1.0;
  EXPECT_FALSE(o.IsValid(&why));
  o = DensityTable::Options();
  o.temperature_max_k = 200.0;
  EXPECT_FALSE(o.IsValid(&why));
  o = DensityTable::Options();
  o.temperature_step_k = 0.0;
  EXPECT_FALSE(o.IsValid(&why));
  o = DensityTable::Options();
  o.pressure_step_pa = 1.0;  // 20 million rows
  EXPECT_FALSE(o.IsValid(&why));
  o = DensityTable::Options();
  o.temperature_min_k = std::nan("");
  EXPECT_FALSE(o.IsValid(&why));

  DensityTable table;
  o = DensityTable::Options();
  o.temperature_step_k = 0.0;
  EXPECT_FALSE(table.Build(Water(), o, &why));
  EXPECT_FALSE(table.built());
  EXPECT_FALSE(table.Build(Gas(0.2), DensityTable::Options(), &why));
  EXPECT_FALSE(table.built());
  FluidState s;
  EXPECT_FALSE(table.Evaluate(1e6, 300.0, &s));
}

}  // namespace
}  // namespace holdfast
