// Fluid property models. See fluid.h for the list of models and their sources.
#include "holdfast/fluid.h"

#include <algorithm>
#include <cmath>
#include <cstddef>
#include <string>
#include <vector>

#include "holdfast/units.h"

namespace holdfast {
namespace {

// ---------------------------------------------------------------------------
// IAPWS-IF97, Region 1 (liquid water).
// ---------------------------------------------------------------------------

// Coefficients of the dimensionless Gibbs free energy of Region 1,
//   gamma(pi, tau) = sum n_i (7.1 - pi)^I_i (tau - 1.222)^J_i,
// from IAPWS-IF97 (IAPWS R7-97, 2012), Table 2.
constexpr int kIf97Terms = 34;
constexpr int kIf97I[kIf97Terms] = {0, 0, 0, 0, 0, 0, 0, 0, 1,  1,  1,  1,  1,  1,  2,   2,   2,
                                    2, 2, 3, 3, 3, 4, 4, 4, 5, 8,  8,  21, 23, 29, 30, 31, 32};
constexpr int kIf97J[kIf97Terms] = {-2, -1, 0,   1,  2,  3,   4,   5,   -9,  -7,  -1,  0,
                                    1,  3,  -3,  0,  1,  3,   17,  -4,  0,   6,   -5,  -2,
                                    10, -8, -11, -6, -29, -31, -38, -39, -40, -41};
constexpr double kIf97N[kIf97Terms] = {
    0.14632971213167,     -0.84548187169114,    -0.37563603672040e1,  0.33855169168385e1,
    -0.95791963387872,    0.15772038513228,     -0.16616417199501e-1, 0.81214629983568e-3,
    0.28319080123804e-3,  -0.60706301565874e-3, -0.18990068218419e-1, -0.32529748770505e-1,
    -0.21841717175414e-1, -0.52838357969930e-4, -0.47184321073267e-3, -0.30001780793026e-3,
    0.47661393906987e-4,  -0.44141845330846e-5, -0.72694996297594e-15, -0.31679644845054e-4,
    -0.28270797985312e-5, -0.85205128120103e-9, -0.22425281908000e-5, -0.65171222895601e-6,
    -0.14341729937924e-12, -0.40516996860117e-6, -0.12734301741641e-8, -0.17424871230634e-9,
    -0.68762131295531e-18, 0.14478307828521e-19, 0.26335781662795e-22, -0.11947622640071e-22,
    0.18228094581404e-23, -0.93537087292458e-25};
constexpr int kIf97MaxI = 32;   // largest I
constexpr int kIf97MinJ = -41;  // smallest J
constexpr int kIf97MaxJ = 17;   // largest J

constexpr double kIf97PStar_pa = 16.53e6;   // IAPWS-IF97, Eq. 7
constexpr double kIf97TStar_k = 1386.0;     // IAPWS-IF97, Eq. 7
constexpr double kIf97R_j_kg_k = 461.526;   // IAPWS-IF97, Eq. 1 (specific gas constant)

// Region 1 range used here: 273.15 K to 623.15 K, saturation pressure to 100 MPa
// (IAPWS-IF97, Sec. 4 and Fig. 1).
constexpr double kWaterTMin_k = 273.15;
constexpr double kWaterTMax_k = 623.15;
constexpr double kWaterPMax_pa = 100.0e6;

// Saturation pressure, IAPWS-IF97 Region 4, Eq. 30 with the coefficients of
// IAPWS-IF97 (IAPWS R7-97, 2012), Table 34. Valid 273.15 K .. 647.096 K.
double If97SaturationPressure(double temperature_k) {
  constexpr double n1 = 0.11670521452767e4, n2 = -0.72421316703206e6,
                   n3 = -0.17073846940092e2, n4 = 0.12020824702470e5,
                   n5 = -0.32325550322333e7, n6 = 0.14915108613530e2,
                   n7 = -0.48232657361591e4, n8 = 0.40511340542057e6,
                   n9 = -0.23855557567849, n10 = 0.65017534844798e3;
  const double t = temperature_k;
  const double theta = t + n9 / (t - n10);
  const double a = theta * theta + n1 * theta + n2;
  const double b = n3 * theta * theta + n4 * theta + n5;
  const double c = n6 * theta * theta + n7 * theta + n8;
  const double x = 2.0 * c / (-b + std::sqrt(b * b - 4.0 * a * c));
  const double x2 = x * x;
  return x2 * x2 * 1.0e6;  // Eq. 30 gives MPa
}

// gamma_pi, gamma_pipi, gamma_pitau of Region 1 (IAPWS-IF97, Table 4).
struct If97Derivatives {
  double g_pi = 0.0;
  double g_pipi = 0.0;
  double g_pitau = 0.0;
};

If97Derivatives If97Region1Gamma(double pi, double tau) {
  // Powers by repeated multiplication: exact to rounding, no pow().
  const double a = 7.1 - pi;
  const double b = tau - 1.222;
  double pa[kIf97MaxI + 2];  // pa[k] = a^(k-2), exponents -2 .. MaxI - 1
  {
    const double inv_a = 1.0 / a;
    pa[0] = inv_a * inv_a;
    pa[1] = inv_a;
    pa[2] = 1.0;
    for (int k = 3; k <= kIf97MaxI + 1; ++k) pa[k] = pa[k - 1] * a;
  }
  constexpr int kNb = kIf97MaxJ - (kIf97MinJ - 1) + 1;
  double pb[kNb];  // pb[k] = b^(k + MinJ - 1), exponents MinJ-1 .. MaxJ
  {
    const double inv_b = 1.0 / b;
    constexpr int kZero = 1 - kIf97MinJ;  // index of b^0
    pb[kZero] = 1.0;
    for (int k = kZero + 1; k < kNb; ++k) pb[k] = pb[k - 1] * b;
    for (int k = kZero - 1; k >= 0; --k) pb[k] = pb[k + 1] * inv_b;
  }
  auto pow_a = [&pa](int e) { return pa[e + 2]; };
  auto pow_b = [&pb](int e) { return pb[e - kIf97MinJ + 1]; };

  If97Derivatives d;
  for (int k = 0; k < kIf97Terms; ++k) {
    const int i = kIf97I[k];
    const int j = kIf97J[k];
    if (i == 0) continue;  // terms without pi drop out of every pi-derivative
    const double n = kIf97N[k];
    const double ai1 = pow_a(i - 1);
    // d/dpi (7.1 - pi)^I = -I (7.1 - pi)^(I-1)
    d.g_pi -= n * i * ai1 * pow_b(j);
    d.g_pipi += n * i * (i - 1) * pow_a(i - 2) * pow_b(j);  // zero for I = 1
    d.g_pitau -= n * i * j * ai1 * pow_b(j - 1);
  }
  return d;
}

// Region 1 state at an in-range (P, T). IAPWS-IF97, Table 3:
//   v = R T pi gamma_pi / P = R T gamma_pi / P*,
//   kappa_T = -(1/v) (dv/dP)_T = -gamma_pipi / (P* gamma_pi),
//   alpha_v = (1/v) (dv/dT)_P = (1 - tau gamma_pitau / gamma_pi) / T.
// So rho = 1/v, drho/dP = rho kappa_T, drho/dT = -rho alpha_v.
FluidState WaterState(double pressure_pa, double temperature_k) {
  const double pi = pressure_pa / kIf97PStar_pa;
  const double tau = kIf97TStar_k / temperature_k;
  const If97Derivatives g = If97Region1Gamma(pi, tau);
  const double v = kIf97R_j_kg_k * temperature_k * g.g_pi / kIf97PStar_pa;
  const double rho = 1.0 / v;
  const double kappa = -g.g_pipi / (kIf97PStar_pa * g.g_pi);
  const double alpha = (1.0 - tau * g.g_pitau / g.g_pi) / temperature_k;
  FluidState s;
  s.density_kg_m3 = rho;
  s.ddensity_dp_kg_m3_pa = rho * kappa;
  s.ddensity_dt_kg_m3_k = -rho * alpha;
  return s;
}

// Outside the range the state is that of the nearest in-range point, and the
// derivative along a clamped axis is zero, so that the three numbers stay
// consistent with each other. Below saturation the pressure is clamped to
// p_sat(T); the temperature derivative there is taken at constant pressure
// (it leaves out drho/dP * dp_sat/dT, about 0.1 % of drho/dT at 350 K).
FluidState EvaluateWater(double pressure_pa, double temperature_k, bool* in_range) {
  double t = temperature_k;
  double p = pressure_pa;
  bool t_clamped = false, p_clamped = false;
  if (!(t >= kWaterTMin_k)) { t = kWaterTMin_k; t_clamped = true; }
  if (t > kWaterTMax_k) { t = kWaterTMax_k; t_clamped = true; }
  const double p_sat = If97SaturationPressure(t);
  if (!(p >= p_sat)) { p = p_sat; p_clamped = true; }
  if (p > kWaterPMax_pa) { p = kWaterPMax_pa; p_clamped = true; }
  *in_range = !t_clamped && !p_clamped;
  FluidState s = WaterState(p, t);
  if (p_clamped) s.ddensity_dp_kg_m3_pa = 0.0;
  if (t_clamped) s.ddensity_dt_kg_m3_k = 0.0;
  return s;
}

// ---------------------------------------------------------------------------
// Generic liquid: rho = rho_ref exp((P - P_ref)/K - beta (T - T_ref)).
// ---------------------------------------------------------------------------

FluidState EvaluateGenericLiquid(const FluidSpec& f, double pressure_pa, double temperature_k) {
  const double inv_k = 1.0 / f.bulk_modulus_pa;
  const double beta = f.thermal_expansion_per_k;
  const double rho =
      f.reference_density_kg_m3 * std::exp((pressure_pa - f.reference_pressure_pa) * inv_k -
                                           beta * (temperature_k - f.reference_temperature_k));
  FluidState s;
  s.density_kg_m3 = rho;
  s.ddensity_dp_kg_m3_pa = rho * inv_k;
  s.ddensity_dt_kg_m3_k = -rho * beta;
  return s;
}

// ---------------------------------------------------------------------------
// Crude oil and refined products: API MPMS Ch. 11.1 (2004)-style CTL and CPL.
//
// Simplified against the standard: the temperature is used as given (the
// standard first converts ITS-90 to IPTS-68 and shifts its base to
// 60.0068749 degF, and shifts the base density accordingly), there is no
// rounding of intermediate values, and the equilibrium vapour pressure is
// taken as zero gauge. The differences are of order 1e-5 in the VCF.
// ---------------------------------------------------------------------------

constexpr double kPsi_pa = 6894.757293168361;  // lbf/in2; NIST SP 811 (2008), B.8
constexpr double kApiDelta60_f = 0.01374979547;  // API MPMS 11.1 (2004), delta60, degF
// Ranges of API MPMS 11.1 (2004), from memory: -58 .. 302 degF, 0 .. 1500 psig,
// base density 610.6 .. 1163.5 kg/m3 (lubricating oils from 800.9 kg/m3).
constexpr double kApiTMin_f = -58.0;
constexpr double kApiTMax_f = 302.0;
constexpr double kApiPMax_psi = 1500.0;
constexpr double kApiRhoMin_kg_m3 = 610.6;
constexpr double kApiLubeRhoMin_kg_m3 = 800.9;
constexpr double kApiRhoMax_kg_m3 = 1163.5;

struct ApiConstants {
  double k0, k1, k2;
};

// Commodity constants of alpha60 = K0/rho60^2 + K1/rho60 + K2, rho60 in kg/m3,
// alpha60 in 1/degF. API MPMS 11.1 (2004); values written from memory.
ApiConstants ApiCommodityConstants(ApiCommodity c) {
  switch (c) {
    case ApiCommodity::kCrudeOil:       return {341.0957, 0.0, 0.0};
    case ApiCommodity::kGasoline:       return {192.4571, 0.2438, 0.0};
    case ApiCommodity::kTransitionZone: return {1489.0670, 0.0, -0.00186840};
    case ApiCommodity::kJetFuel:        return {330.3010, 0.0, 0.0};
    case ApiCommodity::kFuelOil:        return {103.8720, 0.2701, 0.0};
    case ApiCommodity::kLubeOil:        return {0.0, 0.34878, 0.0};
  }
  return {341.0957, 0.0, 0.0};
}

double ApiAlpha60(ApiCommodity c, double rho60) {
  const ApiConstants k = ApiCommodityConstants(c);
  return k.k0 / (rho60 * rho60) + k.k1 / rho60 + k.k2;
}

double KelvinToFahrenheit(double t_k) { return (t_k - kZeroCelsius_k) * 1.8 + 32.0; }

// The crude-oil kind always uses the crude-oil constants; a refined product
// uses the commodity of its spec.
ApiCommodity CommodityOf(const FluidSpec& f) {
  return f.kind == FluidKind::kCrudeOil ? ApiCommodity::kCrudeOil : f.commodity;
}

FluidState EvaluateApi(const FluidSpec& f, double pressure_pa, double temperature_k,
                       bool* in_range) {
  const double rho60 = f.base_density_kg_m3;
  const ApiCommodity c = CommodityOf(f);
  bool ok = true;
  bool t_clamped = false, p_clamped = false;
  double t_f = KelvinToFahrenheit(temperature_k);
  if (!(t_f >= kApiTMin_f)) { t_f = kApiTMin_f; t_clamped = true; }
  if (t_f > kApiTMax_f) { t_f = kApiTMax_f; t_clamped = true; }
  // Pressure: flagged outside 0 .. 1500 psig but not flattened there, since a
  // flat density would hide line pack; the CPL form is smooth well beyond the
  // standard's range. Clamped only to 0 Pa absolute and 100 MPa.
  double p = pressure_pa;
  if (!(p >= 0.0)) { p = 0.0; p_clamped = true; }
  if (p > 100.0e6) { p = 100.0e6; p_clamped = true; }
  const double pg_psi = (p - kStandardAtmosphere_pa) / kPsi_pa;
  if (t_clamped || !(pg_psi >= 0.0) || pg_psi > kApiPMax_psi) ok = false;
  *in_range = ok;

  const double alpha = ApiAlpha60(c, rho60);
  const double dt = t_f - 60.0;
  const double ctl = std::exp(-alpha * dt * (1.0 + 0.8 * alpha * (dt + kApiDelta60_f)));
  // d ln CTL / dT_F
  const double dlnctl_dtf = -alpha - 0.8 * alpha * alpha * (2.0 * dt + kApiDelta60_f);

  const double fp = ApiCompressibilityPerPsi(rho60, t_f);
  const double dfp_dtf = fp * (0.00013427 + 2326.0 / (rho60 * rho60));
  const double inv_denom = 1.0 / (1.0 - fp * pg_psi);
  const double cpl = inv_denom;
  const double dlncpl_dpg = fp * inv_denom;
  const double dlncpl_dtf = pg_psi * dfp_dtf * inv_denom;

  const double rho = rho60 * ctl * cpl;
  FluidState s;
  s.density_kg_m3 = rho;
  s.ddensity_dp_kg_m3_pa = rho * dlncpl_dpg / kPsi_pa;
  s.ddensity_dt_kg_m3_k = rho * 1.8 * (dlnctl_dtf + dlncpl_dtf);
  // Along a clamped axis the density no longer changes.
  if (p_clamped) s.ddensity_dp_kg_m3_pa = 0.0;
  if (t_clamped) s.ddensity_dt_kg_m3_k = 0.0;
  return s;
}

// ---------------------------------------------------------------------------
// Natural gas: Dranchuk & Abou-Kassem (1975) with Sutton (1985) pseudo-criticals.
// ---------------------------------------------------------------------------

// Dranchuk, P.M. and Abou-Kassem, J.H. (1975), "Calculation of Z Factors for
// Natural Gases Using Equations of State", J. Can. Pet. Tech. 14(3): A1..A11.
constexpr double kDakA1 = 0.3265, kDakA2 = -1.0700, kDakA3 = -0.5339, kDakA4 = 0.01569,
                 kDakA5 = -0.05165, kDakA6 = 0.5475, kDakA7 = -0.7361, kDakA8 = 0.1844,
                 kDakA9 = 0.1056, kDakA10 = 0.6134, kDakA11 = 0.7210;
// Stated range of the fit (DAK 1975): 1.0 < Tpr <= 3.0, 0.2 <= Ppr < 30.
constexpr double kDakTprMin = 1.0, kDakTprMax = 3.0;
constexpr double kDakPprMin = 0.2, kDakPprMax = 30.0;

// Z(rho_r, Tpr) of the DAK equation and its partial derivatives.
struct DakZ {
  double z, dz_drho, dz_dt;
};

DakZ DakZOfDensity(double rho_r, double tr) {
  const double it = 1.0 / tr;
  const double it2 = it * it, it3 = it2 * it, it4 = it3 * it, it5 = it4 * it;
  const double a = kDakA1 + kDakA2 * it + kDakA3 * it3 + kDakA4 * it4 + kDakA5 * it5;
  const double da = -(kDakA2 * it2 + 3.0 * kDakA3 * it4 + 4.0 * kDakA4 * it5 +
                      5.0 * kDakA5 * it5 * it);
  const double c = kDakA7 * it + kDakA8 * it2;
  const double dc = -(kDakA7 * it2 + 2.0 * kDakA8 * it3);
  const double b = kDakA6 + c;
  const double r2 = rho_r * rho_r;
  const double r4 = r2 * r2;
  const double r5 = r4 * rho_r;
  const double e = std::exp(-kDakA11 * r2);
  const double q = (1.0 + kDakA11 * r2) * r2;  // (1 + A11 r^2) r^2
  DakZ out;
  out.z = 1.0 + a * rho_r + b * r2 - kDakA9 * c * r5 + kDakA10 * q * it3 * e;
  // d/dr [q e] = e (2 r + 2 A11 r^3 - 2 A11^2 r^5)
  const double dqe = e * (2.0 * rho_r + 2.0 * kDakA11 * r2 * rho_r -
                          2.0 * kDakA11 * kDakA11 * r5);
  out.dz_drho = a + 2.0 * b * rho_r - 5.0 * kDakA9 * c * r4 + kDakA10 * it3 * dqe;
  out.dz_dt = da * rho_r + dc * r2 - kDakA9 * dc * r5 - 3.0 * kDakA10 * q * it4 * e;
  return out;
}

// Solves rho_r Z(rho_r, Tpr) = 0.27 Ppr / Tpr for the reduced density
// rho_r = 0.27 Ppr / (Z Tpr). Newton from the ideal-gas value, kept inside a
// bracket and replaced by bisection when it leaves it or stalls.
double DakReducedDensity(double tr, double pr) {
  const double target = 0.27 * pr / tr;
  if (!(target > 0.0)) return 0.0;
  // Bracket: g(0) = -target < 0; grow hi until g(hi) > 0.
  double lo = 0.0;
  double hi = std::min(target, 3.0);
  auto g = [tr, target](double r) { return r * DakZOfDensity(r, tr).z - target; };
  for (int k = 0; k < 60 && g(hi) <= 0.0; ++k) {
    lo = hi;
    hi *= 1.5;
  }
  double r = std::clamp(target, lo, hi);  // ideal-gas start (Z = 1)
  for (int it = 0; it < 200; ++it) {
    const DakZ z = DakZOfDensity(r, tr);
    const double gr = r * z.z - target;
    if (gr == 0.0) return r;
    if (gr < 0.0) lo = r; else hi = r;
    const double dg = z.z + r * z.dz_drho;
    double next = (dg > 0.0) ? r - gr / dg : 0.5 * (lo + hi);
    if (!(next > lo && next < hi)) next = 0.5 * (lo + hi);
    if (std::fabs(next - r) <= 1e-14 * std::max(1.0, r) || hi - lo <= 1e-15 * hi) return next;
    r = next;
  }
  return r;
}

// Gas density and derivatives at (P, T), clamped in temperature to the DAK
// range and in pressure to its upper end (derivative zero along a clamped
// axis). Below Ppr 0.2 the equation is used as is (it tends to the ideal gas,
// correctly) but flagged.
FluidState EvaluateGas(const FluidSpec& f, double pressure_pa, double temperature_k,
                       bool* in_range) {
  double tpc = 0.0, ppc = 0.0;
  SuttonPseudoCritical(f.gas_gravity, &tpc, &ppc);
  const double mw = f.gas_gravity * kAirMolarMass_kg_mol;
  bool ok = true;
  bool t_clamped = false, p_clamped = false;
  double tr = temperature_k / tpc;
  double pr = pressure_pa / ppc;
  if (!(tr > kDakTprMin)) { ok = false; }
  if (!(tr >= kDakTprMin)) { tr = kDakTprMin; t_clamped = true; }
  if (tr > kDakTprMax) { tr = kDakTprMax; ok = false; t_clamped = true; }
  if (!(pr >= kDakPprMin)) ok = false;
  if (!(pr >= 0.0)) { pr = 0.0; p_clamped = true; }
  if (pr > kDakPprMax) { pr = kDakPprMax; ok = false; p_clamped = true; }
  *in_range = ok;

  // rho = P Mw / (Z R T) = rho_r * Ppc Mw / (0.27 R Tpc): proportional to rho_r.
  const double scale = ppc * mw / (0.27 * kGasConstant_j_mol_k * tpc);
  const double rr = DakReducedDensity(tr, pr);
  const DakZ z = DakZOfDensity(rr, tr);
  const double dg = z.z + rr * z.dz_drho;  // d(rho_r Z)/d rho_r
  // Implicit differentiation of rho_r Z(rho_r, Tr) = 0.27 Pr / Tr.
  const double drr_dpr = (0.27 / tr) / dg;
  const double drr_dtr = (-0.27 * pr / (tr * tr) - rr * z.dz_dt) / dg;
  FluidState s;
  s.density_kg_m3 = scale * rr;
  s.ddensity_dp_kg_m3_pa = p_clamped ? 0.0 : scale * drr_dpr / ppc;
  s.ddensity_dt_kg_m3_k = t_clamped ? 0.0 : scale * drr_dtr / tpc;
  return s;
}

bool Fail(std::string* why, const std::string& reason) {
  if (why) *why = reason;
  return false;
}

bool Positive(double x) { return std::isfinite(x) && x > 0.0; }

}  // namespace

// ---------------------------------------------------------------------------
// Public functions.
// ---------------------------------------------------------------------------

const char* FluidKindName(FluidKind k) {
  switch (k) {
    case FluidKind::kWater:          return "water";
    case FluidKind::kGenericLiquid:  return "generic_liquid";
    case FluidKind::kCrudeOil:       return "crude_oil";
    case FluidKind::kRefinedProduct: return "refined_product";
    case FluidKind::kNaturalGas:     return "natural_gas";
  }
  return "unknown";
}

bool FluidSpec::IsValid(std::string* why) const {
  const std::string who = "fluid '" + name + "' (" + FluidKindName(kind) + "): ";
  switch (kind) {
    case FluidKind::kWater:
      return true;
    case FluidKind::kGenericLiquid:
      if (!Positive(reference_density_kg_m3))
        return Fail(why, who + "reference_density_kg_m3 must be positive");
      if (!Positive(reference_pressure_pa))
        return Fail(why, who + "reference_pressure_pa must be positive (absolute)");
      if (!Positive(reference_temperature_k))
        return Fail(why, who + "reference_temperature_k must be positive");
      if (!Positive(bulk_modulus_pa))
        return Fail(why, who + "bulk_modulus_pa must be positive");
      if (!std::isfinite(thermal_expansion_per_k) || std::fabs(thermal_expansion_per_k) > 0.01)
        return Fail(why, who + "thermal_expansion_per_k must be finite and below 0.01 1/K");
      return true;
    case FluidKind::kCrudeOil:
    case FluidKind::kRefinedProduct: {
      if (kind == FluidKind::kCrudeOil && commodity != ApiCommodity::kCrudeOil)
        return Fail(why, who + "a crude oil takes the crude-oil commodity constants");
      if (kind == FluidKind::kRefinedProduct && commodity == ApiCommodity::kCrudeOil)
        return Fail(why, who + "a refined product needs a product commodity");
      const double lo =
          commodity == ApiCommodity::kLubeOil ? kApiLubeRhoMin_kg_m3 : kApiRhoMin_kg_m3;
      if (!std::isfinite(base_density_kg_m3) || base_density_kg_m3 < lo ||
          base_density_kg_m3 > kApiRhoMax_kg_m3)
        return Fail(why, who + "base_density_kg_m3 " + std::to_string(base_density_kg_m3) +
                             " is outside " + std::to_string(lo) + " .. " +
                             std::to_string(kApiRhoMax_kg_m3));
      return true;
    }
    case FluidKind::kNaturalGas:
      if (!std::isfinite(gas_gravity) || gas_gravity < 0.55 || gas_gravity > 1.5)
        return Fail(why, who + "gas_gravity must be between 0.55 and 1.5");
      return true;
  }
  return Fail(why, who + "unknown fluid kind");
}

FluidState EvaluateFluid(const FluidSpec& fluid, double pressure_pa, double temperature_k,
                         bool* in_range) {
  bool ok = true;
  FluidState s;
  switch (fluid.kind) {
    case FluidKind::kWater:
      s = EvaluateWater(pressure_pa, temperature_k, &ok);
      break;
    case FluidKind::kGenericLiquid:
      s = EvaluateGenericLiquid(fluid, pressure_pa, temperature_k);
      break;
    case FluidKind::kCrudeOil:
    case FluidKind::kRefinedProduct:
      s = EvaluateApi(fluid, pressure_pa, temperature_k, &ok);
      break;
    case FluidKind::kNaturalGas:
      s = EvaluateGas(fluid, pressure_pa, temperature_k, &ok);
      break;
  }
  if (in_range) *in_range = ok;
  return s;
}

double FluidDensity(const FluidSpec& fluid, double pressure_pa, double temperature_k) {
  return EvaluateFluid(fluid, pressure_pa, temperature_k).density_kg_m3;
}

double FluidCompressibility(const FluidSpec& fluid, double pressure_pa, double temperature_k) {
  const FluidState s = EvaluateFluid(fluid, pressure_pa, temperature_k);
  return s.ddensity_dp_kg_m3_pa / s.density_kg_m3;
}

double FluidThermalExpansion(const FluidSpec& fluid, double pressure_pa, double temperature_k) {
  const FluidState s = EvaluateFluid(fluid, pressure_pa, temperature_k);
  return -s.ddensity_dt_kg_m3_k / s.density_kg_m3;
}

double If97Region1SpecificVolume(double pressure_pa, double temperature_k) {
  const double pi = pressure_pa / kIf97PStar_pa;
  const double tau = kIf97TStar_k / temperature_k;
  return kIf97R_j_kg_k * temperature_k * If97Region1Gamma(pi, tau).g_pi / kIf97PStar_pa;
}

double DakZFactor(double pseudo_reduced_temperature, double pseudo_reduced_pressure) {
  const double tr = pseudo_reduced_temperature;
  const double rr = DakReducedDensity(tr, pseudo_reduced_pressure);
  return DakZOfDensity(rr, tr).z;
}

// Sutton, R.P. (1985), "Compressibility Factors for High-Molecular-Weight
// Reservoir Gases", SPE 14265: Tpc = 169.2 + 349.5 g - 74.0 g^2 (degR),
// Ppc = 756.8 - 131.0 g - 3.6 g^2 (psia).
void SuttonPseudoCritical(double gas_gravity, double* tpc_k, double* ppc_pa) {
  const double g = gas_gravity;
  const double tpc_r = 169.2 + 349.5 * g - 74.0 * g * g;
  const double ppc_psia = 756.8 - 131.0 * g - 3.6 * g * g;
  if (tpc_k) *tpc_k = tpc_r / 1.8;  // degR -> K, exact
  if (ppc_pa) *ppc_pa = ppc_psia * kPsi_pa;
}

double ApiCtl(ApiCommodity c, double base_density_kg_m3, double temperature_f) {
  const double alpha = ApiAlpha60(c, base_density_kg_m3);
  const double dt = temperature_f - 60.0;
  return std::exp(-alpha * dt * (1.0 + 0.8 * alpha * (dt + kApiDelta60_f)));
}

double ApiCpl(double base_density_kg_m3, double temperature_f, double gauge_pressure_psi) {
  const double fp = ApiCompressibilityPerPsi(base_density_kg_m3, temperature_f);
  return 1.0 / (1.0 - fp * gauge_pressure_psi);
}

// F_p = exp(-1.9947 + 0.00013427 t + (793920 + 2326 t) / rho60^2) * 1e-5, 1/psi,
// t in degF, rho60 in kg/m3. API MPMS 11.1 (2004) form; constants from memory.
// Returned already multiplied by the 1e-5 scale, i.e. in 1/psi.
double ApiCompressibilityPerPsi(double base_density_kg_m3, double temperature_f) {
  const double r2 = base_density_kg_m3 * base_density_kg_m3;
  return std::exp(-1.9947 + 0.00013427 * temperature_f +
                  (793920.0 + 2326.0 * temperature_f) / r2) *
         1.0e-5;
}

// ---------------------------------------------------------------------------
// DensityTable.
// ---------------------------------------------------------------------------

namespace {
// Largest table accepted: 4 million nodes, about 100 MB with three arrays.
constexpr double kMaxTableNodes = 4.0e6;

// Number of intervals so that the step is at most `step` and the grid ends
// exactly on `max`.
int Intervals(double min, double max, double step) {
  return static_cast<int>(std::ceil((max - min) / step - 1e-9));
}
}  // namespace

bool DensityTable::Options::IsValid(std::string* why) const {
  if (!Positive(pressure_min_pa))
    return Fail(why, "density table: pressure_min_pa must be positive (absolute)");
  if (!std::isfinite(pressure_max_pa) || !(pressure_max_pa > pressure_min_pa))
    return Fail(why, "density table: pressure_max_pa must be above pressure_min_pa");
  if (!Positive(pressure_step_pa))
    return Fail(why, "density table: pressure_step_pa must be positive");
  if (!Positive(temperature_min_k))
    return Fail(why, "density table: temperature_min_k must be positive");
  if (!std::isfinite(temperature_max_k) || !(temperature_max_k > temperature_min_k))
    return Fail(why, "density table: temperature_max_k must be above temperature_min_k");
  if (!Positive(temperature_step_k))
    return Fail(why, "density table: temperature_step_k must be positive");
  const double np = std::ceil((pressure_max_pa - pressure_min_pa) / pressure_step_pa) + 1.0;
  const double nt =
      std::ceil((temperature_max_k - temperature_min_k) / temperature_step_k) + 1.0;
  if (np * nt > kMaxTableNodes)
    return Fail(why, "density table: " + std::to_string(np) + " x " + std::to_string(nt) +
                         " nodes is more than " + std::to_string(kMaxTableNodes));
  return true;
}

bool DensityTable::Build(const FluidSpec& fluid, const Options& options, std::string* why) {
  rho_.clear();
  drho_dp_.clear();
  drho_dt_.clear();
  np_ = nt_ = 0;
  if (!options.IsValid(why)) return false;
  if (!fluid.IsValid(why)) return false;

  options_ = options;
  const int ip_n = Intervals(options.pressure_min_pa, options.pressure_max_pa,
                             options.pressure_step_pa);
  const int it_n = Intervals(options.temperature_min_k, options.temperature_max_k,
                             options.temperature_step_k);
  const double dp = (options.pressure_max_pa - options.pressure_min_pa) / ip_n;
  const double dt = (options.temperature_max_k - options.temperature_min_k) / it_n;
  const int np = ip_n + 1;
  const int nt = it_n + 1;
  const std::size_t n = static_cast<std::size_t>(np) * static_cast<std::size_t>(nt);
  std::vector<double> rho(n), drho_dp(n), drho_dt(n);
  for (int ip = 0; ip < np; ++ip) {
    const double p = ip == ip_n ? options.pressure_max_pa : options.pressure_min_pa + ip * dp;
    for (int it = 0; it < nt; ++it) {
      const double t =
          it == it_n ? options.temperature_max_k : options.temperature_min_k + it * dt;
      const FluidState s = EvaluateFluid(fluid, p, t);
      const std::size_t k = static_cast<std::size_t>(ip) * nt + it;
      rho[k] = s.density_kg_m3;
      drho_dp[k] = s.ddensity_dp_kg_m3_pa;
      drho_dt[k] = s.ddensity_dt_kg_m3_k;
      if (!std::isfinite(rho[k]) || !(rho[k] > 0.0))
        return Fail(why, "density table: fluid '" + fluid.name + "' gives density " +
                             std::to_string(rho[k]) + " at " + std::to_string(p) + " Pa, " +
                             std::to_string(t) + " K");
    }
  }
  np_ = np;
  nt_ = nt;
  inv_dp_ = ip_n / (options.pressure_max_pa - options.pressure_min_pa);
  inv_dt_ = it_n / (options.temperature_max_k - options.temperature_min_k);
  rho_ = std::move(rho);
  drho_dp_ = std::move(drho_dp);
  drho_dt_ = std::move(drho_dt);
  return true;
}

// One clamped index computation per axis: x in grid units, clamped to
// [0, n-1]; the cell index is floor(x) limited to n-2 so that x = n-1 falls
// in the last cell with weight 1.
bool DensityTable::Evaluate(double pressure_pa, double temperature_k, FluidState* out) const {
  if (np_ < 2) {
    *out = FluidState{};
    return false;
  }
  const double xmax = static_cast<double>(np_ - 1);
  const double ymax = static_cast<double>(nt_ - 1);
  // Inside-ness is judged on the inputs so that the far edges count as inside
  // whatever the rounding of x and y. NaN fails every comparison: reported as
  // outside and clamped to the low edge below.
  const bool inside = pressure_pa >= options_.pressure_min_pa &&
                      pressure_pa <= options_.pressure_max_pa &&
                      temperature_k >= options_.temperature_min_k &&
                      temperature_k <= options_.temperature_max_k;
  double x = (pressure_pa - options_.pressure_min_pa) * inv_dp_;
  double y = (temperature_k - options_.temperature_min_k) * inv_dt_;
  x = x >= 0.0 ? (x <= xmax ? x : xmax) : 0.0;
  y = y >= 0.0 ? (y <= ymax ? y : ymax) : 0.0;
  int ip = static_cast<int>(x);
  int it = static_cast<int>(y);
  ip = ip < np_ - 2 ? ip : np_ - 2;
  it = it < nt_ - 2 ? it : nt_ - 2;
  const double fx = x - ip;
  const double fy = y - it;
  const std::size_t k00 = static_cast<std::size_t>(ip) * nt_ + it;
  const std::size_t k10 = k00 + nt_;
  const double w00 = (1.0 - fx) * (1.0 - fy);
  const double w01 = (1.0 - fx) * fy;
  const double w10 = fx * (1.0 - fy);
  const double w11 = fx * fy;
  const double* r = rho_.data();
  const double* a = drho_dp_.data();
  const double* b = drho_dt_.data();
  out->density_kg_m3 = w00 * r[k00] + w01 * r[k00 + 1] + w10 * r[k10] + w11 * r[k10 + 1];
  out->ddensity_dp_kg_m3_pa = w00 * a[k00] + w01 * a[k00 + 1] + w10 * a[k10] + w11 * a[k10 + 1];
  out->ddensity_dt_kg_m3_k = w00 * b[k00] + w01 * b[k00 + 1] + w10 * b[k10] + w11 * b[k10 + 1];
  return inside;
}

double DensityTable::Density(double pressure_pa, double temperature_k) const {
  FluidState s;
  Evaluate(pressure_pa, temperature_k, &s);
  return s.density_kg_m3;
}

}  // namespace holdfast
