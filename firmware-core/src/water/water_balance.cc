// FAVAD, hour-day factor, UARL/ILI and the IWA standard water balance.
// Sources are cited in holdfast/water.h and beside each formula.
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>
#include <string>

#include "holdfast/water.h"

namespace holdfast::water {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

std::string Fmt(const char* format, double a, double b = 0.0) {
  char buf[96];
  std::snprintf(buf, sizeof buf, format, a, b);
  return buf;
}

bool EstimateOk(const Estimate& e) { return std::isfinite(e.value) && std::isfinite(e.ci95) && e.ci95 >= 0.0; }

// Sum of a list of inputs: whole litres, and variance in m3^2 (each input's
// 95 % limit is 1.96 standard deviations; inputs independent).
BalanceComponent SumInputs(const std::vector<VolumeInput>& list, double* var_m3) {
  BalanceComponent c;
  double var = 0.0;
  for (const VolumeInput& v : list) {
    c.litres += std::llround(v.volume_m3 * 1000.0);
    const double sd = v.volume_m3 * v.accuracy95_pct / 100.0 / kZ95;
    var += sd * sd;
  }
  c.ci95_m3 = kZ95 * std::sqrt(var);
  *var_m3 = var;
  return c;
}

BalanceComponent Derived(int64_t litres, double var_m3) {
  BalanceComponent c;
  c.litres = litres;
  c.ci95_m3 = kZ95 * std::sqrt(std::max(0.0, var_m3));
  return c;
}

bool ListOk(const std::vector<VolumeInput>& list, const char* what, std::string* why) {
  for (const VolumeInput& v : list) {
    if (!std::isfinite(v.volume_m3) || v.volume_m3 < 0.0 || v.volume_m3 > 1e12) {
      if (why) *why = std::string(what) + " \"" + v.name + "\": volume must be finite, >= 0 and below 1e12 m3";
      return false;
    }
    if (!std::isfinite(v.accuracy95_pct) || v.accuracy95_pct < 0.0 || v.accuracy95_pct >= 100.0) {
      if (why) *why = std::string(what) + " \"" + v.name + "\": accuracy must be in [0, 100) %";
      return false;
    }
  }
  return true;
}

}  // namespace

std::string Estimate::ToString(int decimals) const {
  char buf[96];
  std::snprintf(buf, sizeof buf, "%.*f +- %.*f", decimals, value, decimals, ci95);
  return buf;
}

double FavadRatio(double p1_head_m, double p0_head_m, double n1) {
  if (!(p0_head_m > 0.0) || !(p1_head_m >= 0.0) || !(n1 >= 0.0) || !std::isfinite(p1_head_m) ||
      !std::isfinite(p0_head_m) || !std::isfinite(n1))
    return kNaN;
  // FAVAD (May 1994): leak flow varies with pressure to the power N1.
  return std::pow(p1_head_m / p0_head_m, n1);
}

double HourDayFactor_h(const double* pressure_head_m, int n, double step_h, double night_ref_head_m, double n1) {
  if (pressure_head_m == nullptr || n <= 0 || !(step_h > 0.0) || !(night_ref_head_m > 0.0)) return kNaN;
  double sum = 0.0;
  for (int i = 0; i < n; ++i) {
    const double r = FavadRatio(pressure_head_m[i], night_ref_head_m, n1);
    if (!std::isfinite(r)) return kNaN;
    sum += r;
  }
  return sum * step_h;
}

bool SystemInfrastructure::IsValid(std::string* why) const {
  auto fail = [&](const std::string& m) { if (why) *why = m; return false; };
  if (!EstimateOk(mains_length_km) || !(mains_length_km.value > 0.0)) return fail("mains length must be positive");
  if (!EstimateOk(service_connections) || service_connections.value < 0.0)
    return fail("service connections must not be negative");
  if (!EstimateOk(private_pipe_length_km) || private_pipe_length_km.value < 0.0)
    return fail("private pipe length must not be negative");
  if (!EstimateOk(average_pressure_head_m) || !(average_pressure_head_m.value > 0.0))
    return fail("average pressure must be positive");
  if (!(pressurised_fraction > 0.0 && pressurised_fraction <= 1.0))
    return fail("pressurised fraction must be in (0, 1]");
  return true;
}

std::string UarlResult::ToString() const {
  std::string s = "UARL " + litres_per_day.ToString(0) + " L/day (" + litres_per_connection_day.ToString(1) +
                  " L/connection/day)";
  if (!applicability_note.empty()) s += "; " + applicability_note;
  return s;
}

UarlResult ComputeUarl(const SystemInfrastructure& s) {
  UarlResult r;
  // Lambert et al. (1999), UARL in litres/day:
  //   (18 * Lm + 0.8 * Nc + 25 * Lp) * P   (coefficients from memory)
  const double lm = s.mains_length_km.value, nc = s.service_connections.value, lp = s.private_pipe_length_km.value;
  const double p = s.average_pressure_head_m.value, f = s.pressurised_fraction;
  const double base = 18.0 * lm + 0.8 * nc + 25.0 * lp;
  r.litres_per_day.value = base * p * f;
  // First-order propagation: partial derivatives times standard deviations.
  const double v = std::pow(18.0 * p * f * s.mains_length_km.sigma(), 2) +
                   std::pow(0.8 * p * f * s.service_connections.sigma(), 2) +
                   std::pow(25.0 * p * f * s.private_pipe_length_km.sigma(), 2) +
                   std::pow(base * f * s.average_pressure_head_m.sigma(), 2);
  r.litres_per_day.ci95 = kZ95 * std::sqrt(v);
  if (nc > 0.0) {
    r.litres_per_connection_day.value = r.litres_per_day.value / nc;
    r.litres_per_connection_day.ci95 = r.litres_per_day.ci95 / nc;
  } else {
    r.litres_per_connection_day = {kNaN, kNaN};
  }
  if (nc < 5000.0 || p < 25.0) {
    r.applicability_note = "outside the range the formula was fitted for (about 5000+ connections, 25+ m; "
                           "from memory): treat the ILI as indicative";
  }
  return r;
}

Estimate ComputeIli(const Estimate& carl, const Estimate& uarl) {
  if (!(uarl.value > 0.0)) return {kNaN, kNaN};
  Estimate e;
  e.value = carl.value / uarl.value;
  const double rc = carl.value != 0.0 ? carl.sigma() / carl.value : 0.0;
  const double ru = uarl.sigma() / uarl.value;
  // Relative variances add for a quotient (first order); when CARL is zero
  // the absolute spread is CARL's own.
  const double sd = carl.value != 0.0 ? std::fabs(e.value) * std::sqrt(rc * rc + ru * ru) : carl.sigma() / uarl.value;
  e.ci95 = kZ95 * sd;
  return e;
}

bool WaterBalanceInputs::IsValid(std::string* why) const {
  if (!(period_days > 0.0 && period_days <= 3660.0)) {
    if (why) *why = "period_days must be in (0, 3660]";
    return false;
  }
  if (system_input.empty()) {
    if (why) *why = "at least one system input volume is needed";
    return false;
  }
  return ListOk(system_input, "system input", why) && ListOk(billed_metered, "billed metered", why) &&
         ListOk(billed_unmetered, "billed unmetered", why) && ListOk(unbilled_metered, "unbilled metered", why) &&
         ListOk(unbilled_unmetered, "unbilled unmetered", why) && ListOk(unauthorised, "unauthorised", why) &&
         ListOk(meter_inaccuracies, "meter inaccuracies", why) && infrastructure.IsValid(why);
}

bool ComputeWaterBalance(const WaterBalanceInputs& in, WaterBalance* out, std::string* why) {
  if (!in.IsValid(why)) return false;
  WaterBalance b;
  b.period_days = in.period_days;
  double v_siv, v_bm, v_bu, v_um, v_uu, v_un, v_mi;
  b.system_input = SumInputs(in.system_input, &v_siv);
  b.billed_metered = SumInputs(in.billed_metered, &v_bm);
  b.billed_unmetered = SumInputs(in.billed_unmetered, &v_bu);
  b.unbilled_metered = SumInputs(in.unbilled_metered, &v_um);
  b.unbilled_unmetered = SumInputs(in.unbilled_unmetered, &v_uu);
  b.unauthorised = SumInputs(in.unauthorised, &v_un);
  b.meter_inaccuracies = SumInputs(in.meter_inaccuracies, &v_mi);
  // IWA standard water balance (Alegre et al. 2000), top-down: components
  // in whole litres so that every identity holds exactly; variances of
  // independent inputs add through sums and differences alike.
  const double v_billed = v_bm + v_bu, v_unbilled = v_um + v_uu, v_auth = v_billed + v_unbilled;
  const double v_app = v_un + v_mi;
  b.billed_authorised = Derived(b.billed_metered.litres + b.billed_unmetered.litres, v_billed);
  b.unbilled_authorised = Derived(b.unbilled_metered.litres + b.unbilled_unmetered.litres, v_unbilled);
  b.authorised = Derived(b.billed_authorised.litres + b.unbilled_authorised.litres, v_auth);
  b.water_losses = Derived(b.system_input.litres - b.authorised.litres, v_siv + v_auth);
  b.apparent_losses = Derived(b.unauthorised.litres + b.meter_inaccuracies.litres, v_app);
  b.real_losses = Derived(b.water_losses.litres - b.apparent_losses.litres, v_siv + v_auth + v_app);
  b.non_revenue_water = Derived(b.system_input.litres - b.billed_authorised.litres, v_siv + v_billed);
  if (b.system_input.litres > 0) {
    b.nrw_pct_of_input = 100.0 * static_cast<double>(b.non_revenue_water.litres) /
                         static_cast<double>(b.system_input.litres);
  }
  if (b.water_losses.litres < 0) b.warnings.push_back("water losses are negative: check the input volumes");
  if (b.real_losses.litres < 0) b.warnings.push_back("real losses are negative: apparent losses exceed water losses");
  // CARL (current annual real losses) per day, UARL, ILI.
  b.carl_l_per_day.value = static_cast<double>(b.real_losses.litres) / in.period_days;
  b.carl_l_per_day.ci95 = b.real_losses.ci95_m3 * 1000.0 / in.period_days;
  b.uarl = ComputeUarl(in.infrastructure);
  b.ili = ComputeIli(b.carl_l_per_day, b.uarl.litres_per_day);
  const double nc = in.infrastructure.service_connections.value;
  if (nc > 0.0) {
    b.real_losses_l_per_connection_day = {b.carl_l_per_day.value / nc, b.carl_l_per_day.ci95 / nc};
  } else {
    b.real_losses_l_per_connection_day = {kNaN, kNaN};
  }
  *out = std::move(b);
  return true;
}

std::string WaterBalance::ToString() const {
  std::string s;
  auto row = [&](const char* name, const BalanceComponent& c) {
    char buf[160];
    std::snprintf(buf, sizeof buf, "%-34s %16.3f m3  +- %12.3f m3\n", name, c.m3(), c.ci95_m3);
    s += buf;
  };
  row("system input volume", system_input);
  row("  billed metered consumption", billed_metered);
  row("  billed unmetered consumption", billed_unmetered);
  row("billed authorised (revenue water)", billed_authorised);
  row("  unbilled metered consumption", unbilled_metered);
  row("  unbilled unmetered consumption", unbilled_unmetered);
  row("unbilled authorised consumption", unbilled_authorised);
  row("authorised consumption", authorised);
  row("water losses", water_losses);
  row("  unauthorised consumption", unauthorised);
  row("  customer meter inaccuracies", meter_inaccuracies);
  row("apparent losses", apparent_losses);
  row("real losses", real_losses);
  row("non-revenue water", non_revenue_water);
  s += Fmt("NRW %.2f %% of system input\n", nrw_pct_of_input);
  s += "CARL " + carl_l_per_day.ToString(0) + " L/day; " + uarl.ToString() + "\n";
  s += "ILI " + ili.ToString(2) + "\n";
  for (const std::string& w : warnings) s += "warning: " + w + "\n";
  return s;
}

}  // namespace holdfast::water
