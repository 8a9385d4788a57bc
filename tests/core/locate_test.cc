// Leak location: gradient intersection, negative pressure wave, nearest landmark.
//
// The gradient tests build a noise-free steady profile for a leak at a known
// chainage with their own forward model (Darcy-Weisbach head loss, friction
// by their own Colebrook-White Newton solve or the Swamee-Jain formula),
// independent of the code under test, and ask it to find the leak again.
#include "holdfast/locate.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <random>
#include <vector>

#include <gtest/gtest.h>

#include "test_site.h"

namespace holdfast {
namespace {

using testing::Steel;

constexpr double kG = 9.80665;  // standard gravity, NIST SP 811 (exact)
constexpr double kPi = 3.14159265358979323846;

// Colebrook & White (1939), 1/sqrt(f) = -2 log10(r/3.7 + 2.51/(Re sqrt f)),
// solved here by Newton's method on x = 1/sqrt(f) (written for the test).
double TestColebrook(double re, double rr) {
  double x = 8.0;
  for (int i = 0; i < 60; ++i) {
    const double u = rr / 3.7 + 2.51 * x / re;
    const double g = x + 2.0 * std::log10(u);
    const double dg = 1.0 + 2.0 / std::log(10.0) * (2.51 / re) / u;
    const double step = g / dg;
    x -= step;
    if (std::fabs(step) < 1e-15 * x) break;
  }
  return 1.0 / (x * x);
}
// Swamee & Jain (1976): f = 0.25 / log10(r/3.7 + 5.74/Re^0.9)^2.
double TestSwameeJain(double re, double rr) {
  const double l = std::log10(rr / 3.7 + 5.74 / std::pow(re, 0.9));
  return 0.25 / (l * l);
}

struct Fluid {
  double rho = 850.0;  // a light crude, round numbers
  double mu = 0.008;   // Pa s
};

// Forward model of the line with a leak: flow along the line, head loss per
// metre by Darcy-Weisbach dH/dx = -f V^2 / (2 g D) (flows here are positive).
struct Line {
  std::vector<PipeSection> sections;
  std::vector<ElevationPoint> profile;
  std::vector<LateralFlow> laterals;
  Fluid fluid;
  bool swamee_jain = false;
  double friction_scale = 1.0;

  double Elevation(double x) const {
    if (profile.empty()) return 0.0;
    if (x <= profile.front().chainage_m) return profile.front().elevation_m;
    for (size_t k = 1; k < profile.size(); ++k)
      if (x <= profile[k].chainage_m) {
        const double w = (x - profile[k - 1].chainage_m) / (profile[k].chainage_m - profile[k - 1].chainage_m);
        return profile[k - 1].elevation_m + w * (profile[k].elevation_m - profile[k - 1].elevation_m);
      }
    return profile.back().elevation_m;
  }
  int SectionAt(double x) const {
    double start = 0.0;
    for (size_t i = 0; i < sections.size(); ++i) {
      if (x < start + sections[i].length_m) return static_cast<int>(i);
      start += sections[i].length_m;
    }
    return static_cast<int>(sections.size()) - 1;
  }
  double SlopeAt(double x, double mdot) const {
    const PipeSection& s = sections[static_cast<size_t>(SectionAt(x))];
    const double d = s.outside_diameter_m - 2.0 * s.wall_thickness_m;
    const double area = kPi * d * d / 4.0;
    const double v = mdot / (fluid.rho * area);
    const double re = fluid.rho * v * d / fluid.mu;
    const double f = friction_scale * (swamee_jain ? TestSwameeJain(re, s.roughness_m / d)
                                                   : TestColebrook(re, s.roughness_m / d));
    return f * v * v / (2.0 * kG * d);
  }
  // Flow at x: inlet flow, plus laterals passed, minus the leak once passed.
  double FlowAt(double x, double m_in, double x_in, double leak_x, double leak_kg_s) const {
    double m = m_in;
    for (const LateralFlow& l : laterals)
      if (l.chainage_m > x_in && l.chainage_m < x) m += l.flow_kg_s;
    if (x > leak_x) m -= leak_kg_s;
    return m;
  }
  // Head loss from a to b (a < b): exact sum over the pieces between events.
  double HeadLoss(double a, double b, double m_in, double x_in, double leak_x, double leak_kg_s) const {
    std::vector<double> ev = {a, b, leak_x};
    double start = 0.0;
    for (const PipeSection& s : sections) {
      ev.push_back(start);
      start += s.length_m;
    }
    for (const LateralFlow& l : laterals) ev.push_back(l.chainage_m);
    std::sort(ev.begin(), ev.end());
    double loss = 0.0;
    for (size_t i = 0; i + 1 < ev.size(); ++i) {
      const double lo = std::max(ev[i], a), hi = std::min(ev[i + 1], b);
      if (!(hi > lo)) continue;
      const double mid = 0.5 * (lo + hi);
      loss += SlopeAt(mid, FlowAt(mid, m_in, x_in, leak_x, leak_kg_s)) * (hi - lo);
    }
    return loss;
  }
  // Steady state with a leak: the input the locator sees, noise free.
  GradientLocateInput Measure(double x_in, double x_out, double p_in_pa, double m_in, double leak_x,
                              double leak_kg_s) const {
    GradientLocateInput in;
    in.density_kg_m3 = fluid.rho;
    in.viscosity_pa_s = fluid.mu;
    in.laterals = laterals;
    in.inlet.chainage_m = x_in;
    in.inlet.pressure_pa = p_in_pa;
    in.inlet.flow_kg_s = m_in;
    const double h_in = p_in_pa / (fluid.rho * kG) + Elevation(x_in);
    const double h_out = h_in - HeadLoss(x_in, x_out, m_in, x_in, leak_x, leak_kg_s);
    in.outlet.chainage_m = x_out;
    in.outlet.pressure_pa = fluid.rho * kG * (h_out - Elevation(x_out));
    in.outlet.flow_kg_s = FlowAt(x_out + 1e-9, m_in, x_in, leak_x, leak_kg_s);
    return in;
  }
};

// Gradient intersection, single flat section: the crossing is the leak, to
// the rounding of the heads (the lines are straight, the crossing algebraic).
TEST(GradientLocate, SingleFlatSectionIsExact) {
  Line line;
  line.sections = {Steel(40000.0, 0.3239, 0.0095)};  // 12-inch line, 40 km
  double worst = 0.0;
  for (double leak_x : {200.0, 7300.0, 20000.0, 33333.3, 39900.0}) {
    for (double leak : {0.5, 2.0, 10.0}) {
      const GradientLocateInput in = line.Measure(0.0, 40000.0, 60e5, 80.0, leak_x, leak);
      const GradientLocation r = LocateByPressureGradient(line.sections, line.profile, in);
      ASSERT_TRUE(r.found) << r.Report();
      EXPECT_NEAR(r.chainage_m, leak_x, 1e-6) << r.ToString();
      EXPECT_NEAR(r.imbalance_kg_s, leak, 1e-12);
      // Head at the crossing: inlet head minus the loss to the leak (test's model).
      const double h_leak = 60e5 / (850.0 * kG) - line.HeadLoss(0.0, leak_x, 80.0, 0.0, leak_x, leak);
      EXPECT_NEAR(r.head_m, h_leak, 1e-6);
      EXPECT_NEAR(r.pressure_pa, 850.0 * kG * h_leak, 1e-2);
      // No uncertainties given: the band is the point.
      EXPECT_EQ(r.chainage_low_m, r.chainage_m);
      EXPECT_EQ(r.chainage_high_m, r.chainage_m);
      worst = std::max(worst, std::fabs(r.chainage_m - leak_x));
    }
  }
  std::printf("single flat section: worst location error %.3g m\n", worst);
}

// Two sections of different bore with an elevation profile, transmitters
// inside the segment, one tapping above the pipe: still exact. Elevation
// only enters through the conversion of each end's pressure to head.
TEST(GradientLocate, TwoBoresWithElevationIsExact) {
  Line line;
  line.sections = {Steel(12000.0, 0.4064, 0.0095), Steel(18000.0, 0.3239, 0.0084)};
  line.sections[1].roughness_m = 30e-6;
  line.profile = {{0.0, 10.0}, {8000.0, 120.0}, {15000.0, 40.0}, {30000.0, 85.0}};
  double worst = 0.0;
  for (double leak_x : {3000.0, 11999.0, 12000.0, 12001.0, 21000.0, 29000.0}) {
    GradientLocateInput in = line.Measure(500.0, 29500.0, 70e5, 120.0, leak_x, 3.0);
    const GradientLocation r = LocateByPressureGradient(line.sections, line.profile, in);
    ASSERT_TRUE(r.found) << r.Report();
    EXPECT_NEAR(r.chainage_m, leak_x, 1e-6) << r.ToString();
    worst = std::max(worst, std::fabs(r.chainage_m - leak_x));

    // The inlet tapping 1.5 m above the profile reads 1.5 m of head less.
    in.inlet.elevation_m = line.Elevation(500.0) + 1.5;
    in.inlet.pressure_pa -= 1.5 * 850.0 * kG;
    const GradientLocation r2 = LocateByPressureGradient(line.sections, line.profile, in);
    ASSERT_TRUE(r2.found);
    EXPECT_NEAR(r2.chainage_m, leak_x, 1e-6);
    worst = std::max(worst, std::fabs(r2.chainage_m - leak_x));
  }
  std::printf("two bores with elevation: worst location error %.3g m\n", worst);

  // Ignoring the elevation (a flat profile) puts the leak elsewhere: the
  // 75 m rise from 500 m to 29500 m is not friction.
  const GradientLocateInput in = line.Measure(500.0, 29500.0, 70e5, 120.0, 21000.0, 3.0);
  const GradientLocation flat = LocateByPressureGradient(line.sections, {}, in);
  EXPECT_FALSE(flat.found && std::fabs(flat.chainage_m - 21000.0) < 100.0) << flat.ToString();
}

// A mid-line delivery changes the flow along both lines; passing it in keeps
// the crossing exact on either side of the delivery; leaving it out does not.
TEST(GradientLocate, MidLineDeliveryIsExact) {
  Line line;
  line.sections = {Steel(15000.0, 0.4064, 0.0095), Steel(15000.0, 0.3239, 0.0095)};
  line.profile = {{0.0, 0.0}, {30000.0, -20.0}};
  line.laterals = {{14000.0, -30.0, 0.0}, {25000.0, 5.0, 0.0}};  // delivery, then an injection
  double worst = 0.0;
  for (double leak_x : {6000.0, 14000.0, 20000.0, 27000.0}) {
    const GradientLocateInput in = line.Measure(0.0, 30000.0, 50e5, 110.0, leak_x, 2.5);
    const GradientLocation r = LocateByPressureGradient(line.sections, line.profile, in);
    ASSERT_TRUE(r.found) << r.Report();
    EXPECT_EQ(r.laterals_used, 2);
    EXPECT_NEAR(r.imbalance_kg_s, 2.5, 1e-12);
    EXPECT_NEAR(r.chainage_m, leak_x, 1e-6) << r.ToString();
    worst = std::max(worst, std::fabs(r.chainage_m - leak_x));

    GradientLocateInput blind = in;
    blind.laterals.clear();
    const GradientLocation b = LocateByPressureGradient(line.sections, line.profile, blind);
    EXPECT_FALSE(b.found && std::fabs(b.chainage_m - leak_x) < 100.0) << b.ToString();
  }
  std::printf("mid-line delivery: worst location error %.3g m\n", worst);
  // Laterals outside the span are ignored.
  const GradientLocateInput in = line.Measure(1000.0, 29000.0, 50e5, 110.0, 20000.0, 2.5);
  GradientLocateInput extra = in;
  extra.laterals.push_back({500.0, -40.0, 0.0});
  extra.laterals.push_back({29000.0, -40.0, 0.0});
  const GradientLocation r = LocateByPressureGradient(line.sections, line.profile, extra);
  ASSERT_TRUE(r.found);
  EXPECT_EQ(r.laterals_used, 2);
  EXPECT_NEAR(r.chainage_m, 20000.0, 1e-6);
}

// Swamee-Jain as an option: data made with Swamee-Jain friction are located
// exactly with it; located with Colebrook-White they are off by a friction
// mismatch of under 1 % (Swamee & Jain 1976 state about 1 %), which the
// method magnifies by about L / (2 * leak fraction). A friction scale learned
// from the leak-free state (FrictionScaleFromSteadyState) removes most of it.
TEST(GradientLocate, SwameeJainOptionAndFrictionCalibration) {
  Line line;
  line.sections = {Steel(30000.0, 0.3239, 0.0095)};
  line.swamee_jain = true;
  const double leak_x = 11000.0;
  const GradientLocateInput in = line.Measure(0.0, 30000.0, 60e5, 90.0, leak_x, 4.5);

  GradientLocateOptions sj;
  sj.friction = FrictionModel::kSwameeJain;
  const GradientLocation exact = LocateByPressureGradient(line.sections, line.profile, in, sj);
  ASSERT_TRUE(exact.found);
  EXPECT_NEAR(exact.chainage_m, leak_x, 1e-6);

  GradientLocateOptions cw;  // Colebrook-White, the default
  EXPECT_EQ(cw.friction, FrictionModel::kColebrookWhite);
  const GradientLocation off = LocateByPressureGradient(line.sections, line.profile, in, cw);
  const double err_uncal = off.found ? std::fabs(off.chainage_m - leak_x) : 30000.0;
  EXPECT_GT(err_uncal, 1.0) << off.ToString();

  // Calibrate on the state before the leak.
  const GradientLocateInput before = line.Measure(0.0, 30000.0, 60e5, 90.0, 30000.0, 0.0);
  std::string why;
  cw.friction_scale = FrictionScaleFromSteadyState(line.sections, line.profile, before, cw, &why);
  ASSERT_TRUE(std::isfinite(cw.friction_scale)) << why;
  EXPECT_NEAR(cw.friction_scale, 1.0, 0.02);  // the two formulas agree within about 1-2 %
  const GradientLocation cal = LocateByPressureGradient(line.sections, line.profile, in, cw);
  ASSERT_TRUE(cal.found) << cal.ToString();
  const double err_cal = std::fabs(cal.chainage_m - leak_x);
  EXPECT_LT(err_cal, 0.1 * err_uncal);
  std::printf("Colebrook on Swamee-Jain data: scale %.5f, error %.1f m uncalibrated, %.2f m calibrated\n",
              cw.friction_scale, err_uncal, err_cal);
  // Calibrated on its own model's data, the scale is 1.
  EXPECT_NEAR(FrictionScaleFromSteadyState(line.sections, line.profile, before, sj, &why), 1.0, 1e-12);
}

// The band grows with the transmitters' sigma and holds the true location.
TEST(GradientLocate, BandWidensWithTransmitterSigmaAndContainsTruth) {
  Line line;
  line.sections = {Steel(25000.0, 0.3239, 0.0095)};
  const double leak_x = 9000.0;
  GradientLocateInput in = line.Measure(0.0, 25000.0, 55e5, 70.0, leak_x, 3.5);
  double last_width = -1.0;
  for (double sigma_pa : {0.0, 100.0, 500.0, 2000.0, 5000.0}) {
    in.inlet.pressure_sigma_pa = sigma_pa;
    in.outlet.pressure_sigma_pa = sigma_pa;
    const GradientLocation r = LocateByPressureGradient(line.sections, line.profile, in);
    ASSERT_TRUE(r.found);
    const double width = r.chainage_high_m - r.chainage_low_m;
    EXPECT_GT(width, last_width) << r.Report();
    EXPECT_LE(r.chainage_low_m, leak_x + 1e-6);  // the crossing itself is exact to rounding
    EXPECT_GE(r.chainage_high_m, leak_x - 1e-6);
    // Pressure enters linearly: the two ends' shifts add in quadrature
    // to k * sigma_P / (rho g) / |slope difference| each.
    if (sigma_pa > 0.0 && !r.band_clamped) {
      EXPECT_NEAR(r.chainage_high_m - r.chainage_m,
                  std::hypot(r.shift_inlet_pressure_m, r.shift_outlet_pressure_m), 1e-6);
    }
    std::printf("sigma_P %6.0f Pa: band [%.1f, %.1f] m, width %.1f m\n", sigma_pa, r.chainage_low_m,
                r.chainage_high_m, width);
    last_width = width;
  }
  // Flow meter sigma widens it too, and lopsidedly (x is not linear in flow).
  in.inlet.pressure_sigma_pa = in.outlet.pressure_sigma_pa = 500.0;
  const double w0 = [&] {
    const GradientLocation r = LocateByPressureGradient(line.sections, line.profile, in);
    return r.chainage_high_m - r.chainage_low_m;
  }();
  in.inlet.flow_sigma_kg_s = in.outlet.flow_sigma_kg_s = 0.002 * 70.0;
  const GradientLocation rf = LocateByPressureGradient(line.sections, line.profile, in);
  ASSERT_TRUE(rf.found);
  EXPECT_GT(rf.chainage_high_m - rf.chainage_low_m, w0);
  EXPECT_GT(rf.shift_outlet_flow_m, 0.0);
  // Meters too poor to tell the leak from zero at k sigma: the band is the span.
  in.inlet.flow_sigma_kg_s = in.outlet.flow_sigma_kg_s = 0.05 * 70.0;
  const GradientLocation rb = LocateByPressureGradient(line.sections, line.profile, in);
  ASSERT_TRUE(rb.found);
  EXPECT_TRUE(rb.band_clamped);
  EXPECT_EQ(rb.chainage_low_m, 0.0);
  EXPECT_EQ(rb.chainage_high_m, 25000.0);
}

// Coverage by simulation: with transmitter errors drawn at their sigma, the
// 95 % band (k = 1.96) holds the truth in about 95 % of trials. Binomial
// sd at n = 400 is about 1.1 %, so [0.91, 0.99] is a loose check.
TEST(GradientLocate, BandCoverageByMonteCarlo) {
  Line line;
  line.sections = {Steel(25000.0, 0.3239, 0.0095)};
  const double leak_x = 16000.0;
  const GradientLocateInput truth = line.Measure(0.0, 25000.0, 55e5, 70.0, leak_x, 3.5);
  std::mt19937_64 rng(20240611);
  std::normal_distribution<double> n01(0.0, 1.0);
  const double sigma_pa = 1500.0;
  int inside = 0, trials = 400;
  for (int i = 0; i < trials; ++i) {
    GradientLocateInput in = truth;
    in.inlet.pressure_sigma_pa = in.outlet.pressure_sigma_pa = sigma_pa;
    in.inlet.pressure_pa += sigma_pa * n01(rng);
    in.outlet.pressure_pa += sigma_pa * n01(rng);
    const GradientLocation r = LocateByPressureGradient(line.sections, line.profile, in);
    if (r.found && r.chainage_low_m <= leak_x && leak_x <= r.chainage_high_m) ++inside;
  }
  const double coverage = static_cast<double>(inside) / trials;
  std::printf("Monte Carlo coverage of the 95 %% band: %.3f\n", coverage);
  EXPECT_GE(coverage, 0.91);
  EXPECT_LE(coverage, 0.99);
}

// When the lines cross outside the span the chainage is the crossing of the
// extended lines, and found is false. Built from the straight lines of one
// flat section extended beyond each end (Darcy-Weisbach slopes, test model).
TEST(GradientLocate, CrossingOutsideSpanIsReportedNotFound) {
  Line line;
  line.sections = {Steel(30000.0, 0.3239, 0.0095)};
  const double m_in = 80.0, m_out = 78.0;
  const double s_up = line.SlopeAt(1.0, m_in), s_dn = line.SlopeAt(1.0, m_out);
  GradientLocateInput in;
  in.density_kg_m3 = 850.0;
  in.viscosity_pa_s = 0.008;
  in.inlet = {5000.0, 60e5, 0.0, m_in, 0.0, kNaN};
  in.outlet = {25000.0, 0.0, 0.0, m_out, 0.0, kNaN};
  const double h_in = 60e5 / (850.0 * kG);
  // "Leak" at 27000 m, beyond the outlet end.
  in.outlet.pressure_pa = 850.0 * kG * (h_in - s_up * 22000.0 + s_dn * 2000.0);
  GradientLocation r = LocateByPressureGradient(line.sections, line.profile, in);
  EXPECT_FALSE(r.found);
  EXPECT_EQ(r.status, LocateStatus::kDownstreamOfSpan);
  EXPECT_NEAR(r.chainage_m, 27000.0, 1e-6) << r.ToString();
  EXPECT_NE(r.ToString().find("downstream_of_span"), std::string::npos);
  // "Leak" at 2000 m, upstream of the inlet end.
  in.outlet.pressure_pa = 850.0 * kG * (h_in + s_up * 3000.0 - s_dn * 23000.0);
  r = LocateByPressureGradient(line.sections, line.profile, in);
  EXPECT_FALSE(r.found);
  EXPECT_EQ(r.status, LocateStatus::kUpstreamOfSpan);
  EXPECT_NEAR(r.chainage_m, 2000.0, 1e-6) << r.ToString();
}

TEST(GradientLocate, NothingToLocateAndInvalidInput) {
  Line line;
  line.sections = {Steel(30000.0, 0.3239, 0.0095)};
  GradientLocateInput in = line.Measure(0.0, 30000.0, 60e5, 80.0, 30000.0, 0.0);  // no leak
  GradientLocation r = LocateByPressureGradient(line.sections, line.profile, in);
  EXPECT_FALSE(r.found);
  EXPECT_EQ(r.status, LocateStatus::kFlowsEqual) << r.ToString();
  EXPECT_FALSE(r.reason.empty());
  in.outlet.flow_kg_s = 81.0;
  r = LocateByPressureGradient(line.sections, line.profile, in);
  EXPECT_EQ(r.status, LocateStatus::kNoMissingFlow) << r.ToString();

  const GradientLocateInput good = line.Measure(0.0, 30000.0, 60e5, 80.0, 12000.0, 2.0);
  in = good;
  in.density_kg_m3 = -1.0;
  EXPECT_EQ(LocateByPressureGradient(line.sections, line.profile, in).status, LocateStatus::kInvalidInput);
  in = good;
  in.outlet.chainage_m = 0.0;
  r = LocateByPressureGradient(line.sections, line.profile, in);
  EXPECT_EQ(r.status, LocateStatus::kInvalidInput);
  EXPECT_NE(r.reason.find("outlet chainage"), std::string::npos) << r.reason;
  in = good;
  in.outlet.chainage_m = 30500.0;
  EXPECT_EQ(LocateByPressureGradient(line.sections, line.profile, in).status, LocateStatus::kInvalidInput);
  EXPECT_EQ(LocateByPressureGradient({}, line.profile, good).status, LocateStatus::kInvalidInput);
  GradientLocateOptions o;
  o.coverage_k = -1.0;
  r = LocateByPressureGradient(line.sections, line.profile, good, o);
  EXPECT_EQ(r.status, LocateStatus::kInvalidInput);
  EXPECT_NE(r.reason.find("coverage_k"), std::string::npos);
}

TEST(GradientLocate, OptionsValidation) {
  GradientLocateOptions o;
  std::string why;
  EXPECT_TRUE(o.IsValid(&why));
  EXPECT_DOUBLE_EQ(o.coverage_k, 1.96);
  o.friction_scale = 0.0;
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("friction_scale"), std::string::npos);
  o = {};
  o.equal_flow_fraction = 1.0;
  EXPECT_FALSE(o.IsValid(&why));
  o = {};
  o.gravity_m_s2 = 0.0;
  EXPECT_FALSE(o.IsValid(&why));
}

// Laminar flow (Re < 2000, Hagen-Poiseuille f = 64/Re) takes the same path in
// both models, and the crossing is still exact (f = 64/Re, test's formula).
TEST(GradientLocate, FrictionFactorModels) {
  EXPECT_DOUBLE_EQ(FrictionFactor(FrictionModel::kColebrookWhite, 1000.0, 1e-4), 0.064);
  EXPECT_DOUBLE_EQ(FrictionFactor(FrictionModel::kSwameeJain, 1000.0, 1e-4), 0.064);
  // Turbulent: Colebrook-White against the test's own Newton solve; Swamee-Jain
  // within 3 % of it (measured worst 2.8 % at Re 5e3, r 1e-2; within 1 % at
  // Re >= 1e5, the usual figure quoted for the fit, from memory).
  double worst = 0.0;
  for (double re : {5e3, 1e5, 1e7})
    for (double rr : {1e-6, 1e-4, 1e-2}) {
      const double cw = FrictionFactor(FrictionModel::kColebrookWhite, re, rr);
      EXPECT_NEAR(cw, TestColebrook(re, rr), 1e-10 * cw);
      const double ratio = FrictionFactor(FrictionModel::kSwameeJain, re, rr) / cw;
      EXPECT_NEAR(ratio, 1.0, re >= 1e5 ? 0.01 : 0.03) << re << " " << rr;
      worst = std::max(worst, std::fabs(ratio - 1.0));
    }
  std::printf("Swamee-Jain against Colebrook-White: worst relative difference %.4f\n", worst);
  EXPECT_STREQ(FrictionModelName(FrictionModel::kSwameeJain), "swamee_jain");
}

// ---------------------------------------------------------------------------
// Negative pressure wave
// ---------------------------------------------------------------------------

// x = (L + a (t_in - t_out)) / 2 (primer sec. 5) on exact arrival times
// t0 + x/a and t0 + (L - x)/a, with the span starting at a chainage offset.
TEST(WaveLocate, ArrivalTimesGiveTheLocation) {
  WaveArrivals w;
  w.inlet_chainage_m = 2000.0;
  w.outlet_chainage_m = 32000.0;
  w.wave_speed_m_s = 1100.0;
  const double len = 30000.0;
  for (double x : {0.0, 1.0, 7500.0, 15000.0, 29999.0, 30000.0}) {
    w.inlet_arrival_s = 100.0 + x / 1100.0;
    w.outlet_arrival_s = 100.0 + (len - x) / 1100.0;
    const WaveLocation r = LocateByWaveArrival(w);
    ASSERT_TRUE(r.found);
    EXPECT_NEAR(r.chainage_m, 2000.0 + x, 1e-6) << r.ToString();
    EXPECT_FALSE(r.clamped);
  }
  // Timing sigma: dx = a sqrt(s_in^2 + s_out^2) / 2 (law of propagation).
  w.inlet_sigma_s = 0.03;
  w.outlet_sigma_s = 0.04;
  const WaveLocation r = LocateByWaveArrival(w);
  EXPECT_NEAR(r.sigma_m, 1100.0 * 0.05 / 2.0, 1e-9);
  EXPECT_NEAR(r.chainage_high_m - r.chainage_m, 0.0, 1e-9);  // at the outlet end: clamped band
  w.inlet_arrival_s = w.outlet_arrival_s = 50.0;             // mid-span
  const WaveLocation mid = LocateByWaveArrival(w);
  EXPECT_NEAR(mid.chainage_m, 17000.0, 1e-9);
  EXPECT_NEAR(mid.chainage_high_m - mid.chainage_m, 1.96 * 27.5, 1e-9);
  EXPECT_NEAR(mid.chainage_m - mid.chainage_low_m, 1.96 * 27.5, 1e-9);
}

TEST(WaveLocate, ClampsToTheSpanAndSaysSo) {
  WaveArrivals w;
  w.outlet_chainage_m = 20000.0;
  w.wave_speed_m_s = 1000.0;
  w.inlet_arrival_s = 30.0;  // 30 s after the outlet: more than L/a = 20 s
  w.outlet_arrival_s = 0.0;
  WaveLocation r = LocateByWaveArrival(w);
  EXPECT_TRUE(r.found);
  EXPECT_TRUE(r.clamped);
  EXPECT_EQ(r.chainage_m, 20000.0);
  EXPECT_NEAR(r.raw_chainage_m, 25000.0, 1e-9);
  EXPECT_NE(r.ToString().find("clamped"), std::string::npos);
  w.inlet_arrival_s = 0.0;
  w.outlet_arrival_s = 21.0;
  r = LocateByWaveArrival(w);
  EXPECT_TRUE(r.clamped);
  EXPECT_EQ(r.chainage_m, 0.0);
  EXPECT_NEAR(r.raw_chainage_m, -500.0, 1e-9);
  // Invalid input.
  w.wave_speed_m_s = 0.0;
  r = LocateByWaveArrival(w);
  EXPECT_FALSE(r.found);
  EXPECT_NE(r.reason.find("wave speed"), std::string::npos);
  WaveLocateOptions o;
  o.coverage_k = -1.0;
  std::string why;
  EXPECT_FALSE(o.IsValid(&why));
}

// Pressure at one end: steady 45 bar with an optional slow ripple, then a
// drop of depth `drop` arriving at t_arrive, instantly (rise = 0) or as a
// linear ramp over `rise` seconds; optional Gaussian noise. Sampled from
// t_start every dt.
std::vector<PressureSample> Samples(double t_start, double dt, int n, double t_arrive, double drop, double rise,
                                    double ripple_pa, double noise_pa, std::mt19937_64* rng) {
  std::normal_distribution<double> n01(0.0, 1.0);
  std::vector<PressureSample> s(static_cast<size_t>(n));
  for (int i = 0; i < n; ++i) {
    const double t = t_start + i * dt;
    double p = 45e5 + ripple_pa * std::sin(0.7 * t);
    if (t >= t_arrive) p -= rise > 0.0 ? drop * std::min(1.0, (t - t_arrive) / rise) : drop;
    if (noise_pa > 0.0) p += noise_pa * n01(*rng);
    s[static_cast<size_t>(i)] = {t, p};
  }
  return s;
}

struct WaveTrial {
  double worst_m = 0.0;
  int located = 0, trials = 0;
};

// Sweeps leak positions and sampling phases at both ends; each end's buffer
// starts at its own phase, as two free-running samplers on synchronised
// clocks do.
WaveTrial RunWaveTrials(double rate_hz, double rise_s, double ripple_pa, double noise_pa, uint64_t seed) {
  const double a = 1100.0, len = 30000.0, dt = 1.0 / rate_hz;
  std::mt19937_64 rng(seed);
  std::uniform_real_distribution<double> u01(0.0, 1.0);
  WaveTrial out;
  for (double x : {300.0, 5000.0, 12345.0, 15000.0, 22222.0, 29700.0}) {
    for (int rep = 0; rep < 8; ++rep) {
      const double t0 = 100.0 + 3.0 * u01(rng);
      const double t_in = t0 + x / a, t_out = t0 + (len - x) / a;
      const auto s_in = Samples(t_in - 4.0 - dt * u01(rng), dt, static_cast<int>(10.0 * rate_hz), t_in, 50e3,
                                rise_s, ripple_pa, noise_pa, &rng);
      const auto s_out = Samples(t_out - 4.0 - dt * u01(rng), dt, static_cast<int>(10.0 * rate_hz), t_out, 50e3,
                                 rise_s, ripple_pa, noise_pa, &rng);
      const OnsetResult o_in = DetectPressureDrop(s_in.data(), static_cast<int>(s_in.size()));
      const OnsetResult o_out = DetectPressureDrop(s_out.data(), static_cast<int>(s_out.size()));
      ++out.trials;
      if (!o_in.found || !o_out.found) continue;
      WaveArrivals w;
      w.outlet_chainage_m = len;
      w.wave_speed_m_s = a;
      w.inlet_arrival_s = o_in.arrival_s;
      w.outlet_arrival_s = o_out.arrival_s;
      const WaveLocation r = LocateByWaveArrival(w);
      if (!r.found) continue;
      ++out.located;
      out.worst_m = std::max(out.worst_m, std::fabs(r.chainage_m - x));
    }
  }
  return out;
}

// Step drops sampled at 5 and 10 Hz, picked by the onset detector: each pick
// is within dt/2 of the arrival (midpoint of the bracketing samples), so the
// location is within a * dt / 2; the brief asks for a * dt.
TEST(WaveLocate, StepFrontsSampledAt5And10Hz) {
  for (double hz : {5.0, 10.0}) {
    const WaveTrial t = RunWaveTrials(hz, 0.0, 0.0, 0.0, 7);
    EXPECT_EQ(t.located, t.trials);
    EXPECT_LE(t.worst_m, 1100.0 / hz / 2.0 + 1e-6);
    std::printf("step fronts at %.0f Hz: worst location error %.1f m (bound a*dt/2 = %.1f m)\n", hz, t.worst_m,
                1100.0 / hz / 2.0);
  }
}

// A linear front of 0.5 s (longer than two sample intervals at 5 Hz) is
// picked exactly at its half-depth point at both ends; the common offset of
// rise/2 cancels in t_in - t_out.
TEST(WaveLocate, RampFrontsArePickedExactly) {
  for (double hz : {5.0, 10.0}) {
    const WaveTrial t = RunWaveTrials(hz, 0.5, 0.0, 0.0, 11);
    EXPECT_EQ(t.located, t.trials);
    EXPECT_LT(t.worst_m, 1e-6);
    std::printf("0.5 s ramp fronts at %.0f Hz: worst location error %.3g m\n", hz, t.worst_m);
  }
}

// With transmitter noise (300 Pa sd against a 50 kPa drop, 10 kPa threshold)
// and a slow 200 Pa ripple the location stays within a * dt.
TEST(WaveLocate, NoisyStepFrontsStayWithinOneSampleOfTravel) {
  for (double hz : {5.0, 10.0}) {
    const WaveTrial t = RunWaveTrials(hz, 0.0, 200.0, 300.0, 13);
    EXPECT_EQ(t.located, t.trials);
    EXPECT_LE(t.worst_m, 1100.0 / hz);
    std::printf("noisy step fronts at %.0f Hz: worst location error %.1f m (a*dt = %.1f m)\n", hz, t.worst_m,
                1100.0 / hz);
  }
}

TEST(OnsetDetector, RejectsSpikesSlowSamplingAndQuietBuffers) {
  // Quiet: no drop.
  auto s = Samples(0.0, 0.1, 60, 1e9, 0.0, 0.0, 200.0, 0.0, nullptr);
  OnsetResult r = DetectPressureDrop(s.data(), static_cast<int>(s.size()));
  EXPECT_FALSE(r.found);
  EXPECT_STREQ(r.reason, "no drop beyond the threshold");
  // A one-sample spike is not a front (confirm_samples = 2); the real drop
  // later is found.
  s = Samples(0.0, 0.1, 60, 4.05, 50e3, 0.0, 200.0, 0.0, nullptr);
  s[20].pressure_pa -= 40e3;
  r = DetectPressureDrop(s.data(), static_cast<int>(s.size()));
  ASSERT_TRUE(r.found) << r.ToString();
  EXPECT_NEAR(r.arrival_s, 4.05, 0.05 + 1e-9);
  EXPECT_NEAR(r.drop_pa, 50e3, 1e3);
  EXPECT_EQ(r.sample_index, 41);
  // 2 Hz is too slow for the default 5 Hz limit.
  s = Samples(0.0, 0.5, 30, 8.0, 50e3, 0.0, 200.0, 0.0, nullptr);
  r = DetectPressureDrop(s.data(), static_cast<int>(s.size()));
  EXPECT_FALSE(r.found);
  EXPECT_STREQ(r.reason, "sampling slower than max_sample_interval_s");
  // Too few samples, bad order.
  r = DetectPressureDrop(s.data(), 3);
  EXPECT_FALSE(r.found);
  s = Samples(0.0, 0.1, 30, 2.0, 50e3, 0.0, 200.0, 0.0, nullptr);
  std::swap(s[5], s[6]);
  EXPECT_FALSE(DetectPressureDrop(s.data(), static_cast<int>(s.size())).found);
  // Drop at the very end: not confirmed.
  s = Samples(0.0, 0.1, 30, 2.85, 50e3, 0.0, 200.0, 0.0, nullptr);
  r = DetectPressureDrop(s.data(), static_cast<int>(s.size()));
  EXPECT_FALSE(r.found);
  EXPECT_STREQ(r.reason, "buffer ends before the drop is confirmed");
  // Options.
  OnsetOptions o;
  std::string why;
  EXPECT_TRUE(o.IsValid(&why));
  o.reference_samples = 0;
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("reference_samples"), std::string::npos);
  EXPECT_FALSE(DetectPressureDrop(s.data(), static_cast<int>(s.size()), o).found);
}

// ---------------------------------------------------------------------------
// Nearest landmark (arithmetic: distances by hand)
// ---------------------------------------------------------------------------

TEST(NearestLandmark, NearestWithSignedDistance) {
  const std::vector<LandmarkSpec> marks = {
      {"Pump station A", 0.0}, {"Block valve V3", 12500.0}, {"River crossing", 18000.0}, {"Terminal", 40000.0}};
  NearestLandmarkResult r = NearestLandmark(marks, 13750.0);
  ASSERT_TRUE(r.found);
  EXPECT_EQ(r.index, 1);
  EXPECT_EQ(r.name, "Block valve V3");
  EXPECT_DOUBLE_EQ(r.signed_distance_m, 1250.0);
  EXPECT_EQ(r.ToString(), "1250.0 m downstream of Block valve V3 (chainage 12500.0 m)");
  r = NearestLandmark(marks, 17000.0);
  EXPECT_EQ(r.name, "River crossing");
  EXPECT_DOUBLE_EQ(r.signed_distance_m, -1000.0);
  EXPECT_EQ(r.ToString(), "1000.0 m upstream of River crossing (chainage 18000.0 m)");
  r = NearestLandmark(marks, 40000.0);
  EXPECT_EQ(r.ToString(), "at Terminal (chainage 40000.0 m)");
  // Equidistant: the first in list order.
  r = NearestLandmark(marks, 15250.0);
  EXPECT_EQ(r.index, 1);
  // None.
  r = NearestLandmark({}, 100.0);
  EXPECT_FALSE(r.found);
  EXPECT_EQ(r.ToString(), "no landmark");
}

// A located leak reads the same in a log line and in a test failure.
TEST(GradientLocate, PrintsItself) {
  Line line;
  line.sections = {Steel(20000.0, 0.3239, 0.0095)};
  GradientLocateInput in = line.Measure(0.0, 20000.0, 50e5, 60.0, 4000.0, 1.5);
  in.inlet.pressure_sigma_pa = in.outlet.pressure_sigma_pa = 1000.0;
  const GradientLocation r = LocateByPressureGradient(line.sections, line.profile, in);
  EXPECT_EQ(r.ToString().rfind("gradient: leak at 4000.0 m [", 0), 0u) << r.ToString();
  EXPECT_NE(r.Report().find("shifts at k sigma"), std::string::npos);
}

}  // namespace
}  // namespace holdfast
