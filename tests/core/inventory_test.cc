// Inventory (line pack and tanks) checks.
#include "holdfast/inventory.h"

#include <cmath>

#include <gtest/gtest.h>

#include "holdfast/monitor.h"
#include "holdfast/pipe.h"
#include "test_site.h"

namespace holdfast {
namespace {

using testing::GenericLiquid;
using testing::Steel;
using testing::TwoEndSite;

constexpr double kPatm = 101325.0;

// Closed form of the thin-wall elastic pipe with a generic liquid at a uniform
// state (Wylie & Streeter 1993, sec. 2.4): M = rho(P,T) * A0 (1 + c1 D/(E e) (P - Patm)) * L.
double UniformMass(const FluidSpec& f, const PipeSection& s, double p, double t) {
  const double rho = f.reference_density_kg_m3 *
                     std::exp((p - f.reference_pressure_pa) / f.bulk_modulus_pa -
                              f.thermal_expansion_per_k * (t - f.reference_temperature_k));
  const double d = s.outside_diameter_m - 2.0 * s.wall_thickness_m;
  const double c1 = 1.0 - s.poisson_ratio * s.poisson_ratio;
  const double area = M_PI * d * d / 4.0 * (1.0 + c1 * d / (s.youngs_modulus_pa * s.wall_thickness_m) * (p - kPatm)) *
                      (1.0 + 2.0 * s.wall_thermal_expansion_per_k * (t - 288.15));
  return rho * area * s.length_m;
}

void FeedAll(Monitor* m, const Site& site, double t, double q_in, double q_out, double p0, double pl, double t0,
             double tl) {
  m->Feed({site.FindPoint("in"), t, q_in, Quality::kGood});
  m->Feed({site.FindPoint("out"), t, q_out, Quality::kGood});
  m->Feed({site.FindPoint("p0"), t, p0, Quality::kGood});
  m->Feed({site.FindPoint("pL"), t, pl, Quality::kGood});
  m->Feed({site.FindPoint("t0"), t, t0, Quality::kGood});
  m->Feed({site.FindPoint("tL"), t, tl, Quality::kGood});
}

TEST(Inventory, UniformStateMatchesClosedForm) {
  const FluidSpec f = GenericLiquid(850.0, 1.5e9, 9e-4);
  const PipeSection s = Steel(10000.0, 0.508, 0.0095);
  Site site = TwoEndSite(f, {s});
  site.points[0].unit.offset = 0.0;
  Monitor m;
  std::string why;
  ASSERT_TRUE(m.Init(site, &why)) << why;
  for (double p : {5e5, 40e5, 95e5}) {
    for (double temp : {283.15, 288.15, 301.65}) {
      static double t = 0.0;
      t += 1.0;
      FeedAll(&m, site, t, 0.0, 0.0, p, p, temp, temp);
      m.Advance(t);
      const double expected = UniformMass(f, s, p, temp);
      // Bilinear density table: off-node temperatures interpolate rho with
      // error h^2/8 * rho'' ~ 1e-7 relative for 1 K steps.
      EXPECT_NEAR(m.segment(0).linepack_kg / expected - 1.0, 0.0, 2e-7) << "P=" << p << " T=" << temp;
    }
  }
}

// A sealed segment (outlet shut) pressurised by a metered inflow: the change of
// inventory must equal the integrated inflow. Pressure is driven so that the
// closed-form mass rises exactly linearly; at a temperature on a table node
// the only error left is round-off and the table's interpolation in pressure.
TEST(Inventory, SealedSegmentConservesMeteredInflow) {
  const FluidSpec f = GenericLiquid(850.0, 1.5e9, 9e-4);
  const PipeSection s = Steel(20000.0, 0.508, 0.0095);
  Site site = TwoEndSite(f, {s});
  site.segments[0].windows_s = {300.0};
  site.segments[0].buckets_per_window = 10;
  Monitor m;
  std::string why;
  ASSERT_TRUE(m.Init(site, &why)) << why;
  const double temp = 288.15;
  const double p_start = 10e5;
  const double m0 = UniformMass(f, s, p_start, temp);
  const double q = 4.0;  // kg/s
  double p = p_start;
  for (int k = 0; k <= 600; ++k) {
    const double target = m0 + q * k;
    for (int it = 0; it < 50; ++it) {  // Newton on the closed form
      const double dp = 1.0;
      const double g = (UniformMass(f, s, p + dp, temp) - UniformMass(f, s, p - dp, temp)) / (2 * dp);
      const double step = (UniformMass(f, s, p, temp) - target) / g;
      p -= step;
      if (std::fabs(step) < 1e-9) break;
    }
    FeedAll(&m, site, k, q, 0.0, p, p, temp, temp);
    m.Advance(k);
  }
  const SegmentTick& tick = m.segment(0);
  const WindowResult& w = tick.windows[0];
  ASSERT_TRUE(w.full);
  const double inflow_kg = q * w.covered_s;
  EXPECT_LT(std::fabs(w.imbalance_kg), 1e-6 * inflow_kg) << tick.ToString();
  // Per tick, the table's interpolation in pressure leaves ~1e-5 of the rate.
  EXPECT_LT(std::fabs(tick.residual_kg_s), 1e-4 * q);
  EXPECT_GT(p, p_start + 5e5);  // the line really was pressurised
}

// Midpoint sums over reaches converge to the integral: a 500 m grid agrees
// with a 5 m grid on a non-uniform state (friction gradient, two bores).
TEST(Inventory, ReachGridConverges) {
  const FluidSpec f = GenericLiquid(860.0, 1.4e9, 8.5e-4);
  const std::vector<PipeSection> secs = {Steel(12000.0, 0.4064, 0.0079), Steel(9000.0, 0.3556, 0.0079)};
  double mass[2];
  const double reach[2] = {500.0, 5.0};
  for (int g = 0; g < 2; ++g) {
    Site site = TwoEndSite(f, secs, reach[g]);
    Monitor m;
    std::string why;
    ASSERT_TRUE(m.Init(site, &why)) << why;
    FeedAll(&m, site, 0.0, 0.0, 0.0, 62e5, 4e5, 295.0, 287.0);
    m.Advance(0.0);
    mass[g] = m.segment(0).linepack_kg;
  }
  EXPECT_NEAR(mass[0] / mass[1] - 1.0, 0.0, 1e-6);
}

// Pressure between two transmitters is linear in the hydraulic resistance
// coordinate s = integral f/D^5 dx (Darcy-Weisbach, steady flow).
TEST(Inventory, PressureProfileFollowsFrictionResistance) {
  const FluidSpec f = GenericLiquid(860.0, 1.4e9, 8.5e-4);
  const PipeSection a = Steel(10000.0, 0.4064, 0.0079), b = Steel(10000.0, 0.3239, 0.0079);
  Site site = TwoEndSite(f, {a, b}, 1000.0);
  Monitor m;
  std::string why;
  ASSERT_TRUE(m.Init(site, &why)) << why;
  const double p0 = 60e5, pl = 5e5;
  FeedAll(&m, site, 0.0, 0.0, 0.0, p0, pl, 288.15, 288.15);
  m.Advance(0.0);
  const SegmentInventory& inv = m.inventory(0);
  auto r = [](const PipeSection& s) {
    const double d = s.inside_diameter_m();
    return FullyRoughFriction(s.roughness_m / d) / std::pow(d, 5.0);
  };
  const double total = r(a) * a.length_m + r(b) * b.length_m;
  for (int i = 0; i < inv.reach_count(); ++i) {
    const double x = inv.reach_chainage_m(i);
    const double s = x <= a.length_m ? r(a) * x : r(a) * a.length_m + r(b) * (x - a.length_m);
    EXPECT_NEAR(inv.reach_pressure_pa(i), p0 - (p0 - pl) * s / total, 1e-6) << "x=" << x;
  }
  // Most of the drop happens in the smaller bore.
  EXPECT_LT(inv.reach_pressure_pa(9), p0 - 0.0 * (p0 - pl));
}

// One transmitter: hydrostatic profile P(z) = P0 - rho g (z - z0).
TEST(Inventory, HydrostaticWithOneTransmitter) {
  const FluidSpec f = GenericLiquid(1000.0, 2.2e9, 2e-4);
  Site site = TwoEndSite(f, {Steel(1000.0, 0.3239, 0.0079)}, 100.0);
  SegmentSpec& seg = site.segments[0];
  seg.pressure_gauges.resize(1);
  seg.profile = {{0.0, 0.0}, {1000.0, 50.0}};
  Monitor m;
  std::string why;
  ASSERT_TRUE(m.Init(site, &why)) << why;
  FeedAll(&m, site, 0.0, 0.0, 0.0, 10e5, 0.0, 288.15, 288.15);
  m.Advance(0.0);
  const SegmentInventory& inv = m.inventory(0);
  const double rho = FluidDensity(f, 10e5, 288.15);
  for (int i = 0; i < inv.reach_count(); ++i) {
    const double z = 50.0 * inv.reach_chainage_m(i) / 1000.0;
    EXPECT_NEAR(inv.reach_pressure_pa(i), 10e5 - rho * kStandardGravity_m_s2 * z, 1e-3);  // table rho
  }
}

TEST(Inventory, StrappingTableInterpolatesAndRejectsOutside) {
  const std::vector<StrapPoint> table = {{0.0, 0.0}, {1.0, 100.0}, {3.0, 340.0}};
  double v = 0, dv = 0;
  EXPECT_TRUE(SegmentInventory::StrapVolume(table, 0.5, &v, &dv));
  EXPECT_DOUBLE_EQ(v, 50.0);
  EXPECT_DOUBLE_EQ(dv, 100.0);
  EXPECT_TRUE(SegmentInventory::StrapVolume(table, 2.0, &v, &dv));
  EXPECT_DOUBLE_EQ(v, 220.0);
  EXPECT_DOUBLE_EQ(dv, 120.0);
  EXPECT_TRUE(SegmentInventory::StrapVolume(table, 3.0, &v, &dv));
  EXPECT_DOUBLE_EQ(v, 340.0);
  EXPECT_FALSE(SegmentInventory::StrapVolume(table, 3.01, &v, &dv));
  EXPECT_FALSE(SegmentInventory::StrapVolume(table, -0.01, &v, &dv));
  EXPECT_FALSE(SegmentInventory::StrapVolume(table, std::nan(""), &v, &dv));
}

TEST(Inventory, TankLevelOutsideTableIsFlagged) {
  const FluidSpec f = GenericLiquid(860.0, 1.4e9, 8.5e-4);
  Site site = TwoEndSite(f, {Steel(1000.0, 0.3239, 0.0079)}, 100.0);
  const int lt = testing::AddPoint(&site, "lt", PointKind::kLevel, Quantity::kLength);
  TankSpec tank;
  tank.id = "T1";
  tank.level_point = lt;
  tank.strapping = {{0.0, 0.0}, {10.0, 1000.0}};
  site.segments[0].tanks.push_back(tank);
  Monitor m;
  std::string why;
  ASSERT_TRUE(m.Init(site, &why)) << why;
  FeedAll(&m, site, 0.0, 0.0, 0.0, 5e5, 5e5, 288.15, 288.15);
  m.Feed({lt, 0.0, 4.0, Quality::kGood});
  m.Advance(0.0);
  EXPECT_NEAR(m.segment(0).tank_kg, 400.0 * FluidDensity(f, kPatm, 288.15), 1e-3);
  EXPECT_EQ(m.segment(0).flags & kInvLevelOutsideTable, 0u);
  m.Feed({lt, 1.0, 10.5, Quality::kGood});
  FeedAll(&m, site, 1.0, 0.0, 0.0, 5e5, 5e5, 288.15, 288.15);
  m.Advance(1.0);
  EXPECT_NE(m.segment(0).flags & kInvLevelOutsideTable, 0u);
  EXPECT_EQ(m.segment(0).status, SegmentStatus::kDegraded);
}

// A step of inlet temperature travels down the line at the flow velocity.
TEST(Inventory, TemperatureFrontIsCarriedWithTheFlow) {
  const FluidSpec f = GenericLiquid(860.0, 1.4e9, 8.5e-4);
  const PipeSection s = Steel(10000.0, 0.4064, 0.0079);
  Site site = TwoEndSite(f, {s}, 100.0);
  site.segments[0].ground_temperature_k = 285.0;
  site.segments[0].thermal_time_constant_s = 1e15;  // no relaxation
  Monitor m;
  std::string why;
  ASSERT_TRUE(m.Init(site, &why)) << why;
  const double q = 200.0;  // kg/s
  FeedAll(&m, site, 0.0, q, q, 20e5, 20e5, 290.0, 290.0);
  m.Advance(0.0);
  const double v = q / (FluidDensity(f, 20e5, 295.0) * s.flow_area_m2());
  for (int k = 1; k <= 3000; ++k) {
    FeedAll(&m, site, k, q, q, 20e5, 20e5, 300.0, 290.0);
    m.Advance(k);
  }
  const double front = v * 3000.0;
  const SegmentInventory& inv = m.inventory(0);
  for (int i = 0; i < inv.reach_count(); ++i) {
    const double x = inv.reach_chainage_m(i);
    if (x < front - 300.0) {
      EXPECT_NEAR(inv.reach_temperature_k(i), 300.0, 0.05) << x;
    } else if (x > front + 300.0) {
      EXPECT_NEAR(inv.reach_temperature_k(i), 290.0, 0.05) << x;
    }
  }
}

}  // namespace
}  // namespace holdfast

namespace holdfast {
namespace {

// With transport, a transmitter's residual corrects the profile near it and
// fades over kTemperatureResidualLength_m: an outlet reading 2 K below the
// transported model (a front arriving a few minutes off) moves the reaches
// by the outlet by about 2 K and the middle of a 30 km line by almost
// nothing (0.5 exp(-15 km / 3 km) = 0.3 %), where the linear spreading it
// replaced moved it by half.
TEST(Inventory, TransmitterResidualCorrectsLocally) {
  const FluidSpec f = GenericLiquid(860.0, 1.4e9, 8.5e-4);
  const PipeSection s = Steel(30000.0, 0.4064, 0.0079);
  Site site = TwoEndSite(f, {s}, 250.0);
  site.segments[0].ground_temperature_k = 285.0;
  site.segments[0].thermal_time_constant_s = 1e15;  // no relaxation
  Monitor m;
  std::string why;
  ASSERT_TRUE(m.Init(site, &why)) << why;
  const double q = 200.0;
  for (int k = 0; k <= 600; ++k) {
    FeedAll(&m, site, k, q, q, 20e5, 20e5, 290.0, k < 300 ? 290.0 : 288.0);
    m.Advance(k);
  }
  const SegmentInventory& inv = m.inventory(0);
  for (int i = 0; i < inv.reach_count(); ++i) {
    const double x = inv.reach_chainage_m(i);
    // Linear between the transmitters, times the fade from the outlet one.
    const double expected = 290.0 - 2.0 * (x / 30000.0) * std::exp(-(30000.0 - x) / kTemperatureResidualLength_m);
    EXPECT_NEAR(inv.reach_temperature_k(i), expected, 0.02) << x;
  }
}

}  // namespace
}  // namespace holdfast
