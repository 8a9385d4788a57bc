// The rupture fast path (rupture.h) on signals built from the method of
// characteristics' compatibility relations (Wylie & Streeter, Fluid
// Transients in Systems, 1993, ch. 3; from memory): a wave travelling
// towards an end carries dm = -/+ B dP, B = A / a, and the end's boundary
// reflects it along the other characteristic. The values below are hand
// arithmetic on those relations.
#include "holdfast/rupture.h"

#include <cmath>

#include <gtest/gtest.h>

#include "holdfast/pipe.h"
#include "test_site.h"

namespace holdfast {
namespace {

using testing::GenericLiquid;
using testing::Steel;
using testing::TwoEndSite;

struct Rig {
  SegmentSpec seg;
  RuptureDetector det;
  double b = 0.0;  // A / a, m s
};

Rig MakeRig(const RuptureOptions& o = {}) {
  Rig r;
  const Site site = TwoEndSite(GenericLiquid(850.0, 1.5e9, 9e-4), {Steel(40000.0, 0.4064, 0.0079)});
  r.seg = site.segments[0];
  r.seg.nominal_flow_kg_s = 200.0;
  std::string why;
  EXPECT_TRUE(r.det.Init(o, r.seg, 1.0, 850.0, 1.5e9, 1000.0, &why)) << why;
  r.b = r.det.b_inlet_m_s();
  return r;
}

// Steady flow for `from_s` seconds, then the given end changes (at the
// inlet: flow and pressure; at the outlet: flow and pressure; laterals).
struct Change {
  double dm_in = 0.0, dp_in = 0.0, dm_out = 0.0, dp_out = 0.0, dlat = 0.0, residual = 0.0;
};

bool RunChange(Rig* r, const Change& c, double steady_s = 240.0, double after_s = 40.0) {
  bool raised = false;
  for (int k = 0; k < steady_s + after_s; ++k) {
    const bool on = k >= steady_s;
    RuptureInput in;
    in.inflow_kg_s = 200.0 + (on ? c.dm_in : 0.0);
    in.outflow_kg_s = 180.0 + (on ? c.dm_out : 0.0);
    in.lateral_out_kg_s = 20.0 + (on ? c.dlat : 0.0);
    in.p_inlet_pa = 60e5 + (on ? c.dp_in : 0.0);
    in.p_outlet_pa = 5e5 + (on ? c.dp_out : 0.0);
    in.residual_kg_s = on ? c.residual : 0.0;
    raised = raised || r->det.Step(k, in).rupture;
  }
  return raised;
}

TEST(RuptureDetector, BIsAreaOverWaveSpeed) {
  Rig r = MakeRig();
  const PipeSection& s = r.seg.sections[0];
  // Korteweg wave speed, pipe.h; B = A / a by definition.
  EXPECT_NEAR(r.b, s.flow_area_m2() / WaveSpeed(1.5e9, 850.0, s), 1e-15);
  EXPECT_DOUBLE_EQ(r.det.threshold_kg_s(), 20.0);  // 10 % of 200 kg/s
}

// A leak of q mid-line sends dm = q / 2 towards each end. Whatever the ends
// do with it, s_in = dm_in - B dP_in = q and s_out = -dm_out - B dP_out = q.
// Boundary behaviours: a reservoir holding pressure (the flow takes it
// all), half and half, and mostly pressure (a stiff pump or a flow
// controller that gives a little). Ends that hold their flow exactly leave
// the metered shortfall unmoved: the fast path needs it to grow (so that a
// pump trip into a flow-controlled outlet is not a rupture), and such a
// line's rupture is the decision's (documented limitation).
TEST(RuptureDetector, LeakIsSeenWhateverTheEndsDo) {
  const double q = 30.0;
  for (double share : {0.1, 0.5, 1.0}) {
    Rig r = MakeRig();
    Change c;
    c.dm_in = share * q;                    // the inflow rises by this share of q
    c.dp_in = -(1.0 - share) * q / r.b;     // the pressure takes the rest
    c.dm_out = -share * q;                  // the outflow falls
    c.dp_out = -(1.0 - share) * q / r.b;
    c.residual = q;
    // A tank-free segment: the outlet meter is at the pipe end.
    EXPECT_TRUE(RunChange(&r, c)) << "share " << share << ": " << r.det.status().ToString();
    EXPECT_NEAR(r.det.status().estimate_kg_s, q, 1e-6);
  }
  Rig r = MakeRig();
  Change held;
  held.dp_in = held.dp_out = -q / r.b;
  held.residual = q;
  EXPECT_FALSE(RunChange(&r, held));
  EXPECT_NEAR(r.det.status().estimate_kg_s, q, 1e-6);  // seen, not raised
}

// A pump slowdown at the inlet: the wave it sends satisfies the invariant
// there (dm = B dP), so s_in does not move; the metered shortfall falls.
TEST(RuptureDetector, PumpChangeIsNotALeak) {
  Rig r = MakeRig();
  Change c;
  c.dm_in = -25.0;
  c.dp_in = -25.0 / r.b;
  c.dm_out = -50.0;  // after its reflection at a reservoir outlet
  c.dp_out = 0.0;
  c.residual = 30.0;  // a line-pack estimate lagging the waves
  EXPECT_FALSE(RunChange(&r, c)) << r.det.status().ToString();
  EXPECT_NEAR(r.det.status().wave_in_kg_s, 0.0, 1e-6);
}

// A metered delivery opening mid-line is hydraulically a leak of its flow;
// its metered change is subtracted from both ends.
TEST(RuptureDetector, MeteredDeliveryIsNotALeak) {
  Rig r = MakeRig();
  Change c;
  c.dm_in = 15.0;
  c.dp_in = -15.0 / r.b;
  c.dm_out = -15.0;
  c.dp_out = -15.0 / r.b;
  c.dlat = 30.0;
  EXPECT_FALSE(RunChange(&r, c)) << r.det.status().ToString();
  EXPECT_NEAR(r.det.status().estimate_kg_s, 0.0, 1e-6);
}

// The line must be quiet before the look-back: a leak-like change right
// after an operating change (here the metered flows moved two minutes
// earlier) is left to the decision.
TEST(RuptureDetector, NeedsAQuietLineBefore) {
  Rig r = MakeRig();
  bool raised = false;
  for (int k = 0; k < 400; ++k) {
    RuptureInput in;
    in.inflow_kg_s = k >= 200 ? 260.0 : 200.0;  // a restart-like rise, then the leak-like one
    in.outflow_kg_s = 180.0;
    in.lateral_out_kg_s = 20.0;
    in.p_inlet_pa = 60e5;
    in.p_outlet_pa = 5e5;
    if (k >= 320) {
      in.inflow_kg_s += 15.0;
      in.outflow_kg_s -= 15.0;
      in.p_inlet_pa -= 15.0 / r.b;
      in.p_outlet_pa -= 15.0 / r.b;
      in.residual_kg_s = 30.0;
    }
    raised = raised || r.det.Step(k, in).rupture;
  }
  EXPECT_FALSE(raised) << r.det.status().ToString();
}

TEST(RuptureOptions, EachFailureSaysWhy) {
  std::string why;
  RuptureOptions o;
  EXPECT_TRUE(o.IsValid(&why));
  o.reference_s = 30.0;
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("reference_s"), std::string::npos);
  o = RuptureOptions{};
  o.quiet_share = 0.0;
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("quiet_share"), std::string::npos);
}

}  // namespace
}  // namespace holdfast
