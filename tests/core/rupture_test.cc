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
// controller that gives a little).
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
  // Ends that hold their flow exactly leave the metered shortfall unmoved:
  // only the pressures fall, and with both flows held that can only be mass
  // leaving the line. Both ends' waves arrive (neither end's other invariant
  // g = m + B P at the inlet, -m + B P at the outlet moved by more than its
  // wave), so the inlet's signal is raised by the one-end path.
  Rig r = MakeRig();
  Change held;
  held.dp_in = held.dp_out = -q / r.b;
  held.residual = q;
  EXPECT_TRUE(RunChange(&r, held)) << r.det.status().ToString();
  EXPECT_EQ(r.det.status().one_end, 1);
  EXPECT_NEAR(r.det.status().estimate_kg_s, q, 1e-6);  // s_in = -B dP_in
  // Without the one-end path, both ends must see the metered shortfall grow.
  RuptureOptions two;
  two.one_end = false;
  Rig r2 = MakeRig(two);
  EXPECT_FALSE(RunChange(&r2, held));
  EXPECT_NEAR(r2.det.status().estimate_kg_s, q, 1e-6);  // seen, not raised
}

// Changes at the two ends at different times: the inlet's at `steady_s`,
// the outlet's `delay_s` later (a wave's travel time, or never when it is
// longer than the run).
bool RunStaggered(Rig* r, const Change& c, double delay_s, double steady_s, double after_s, double residual_from_s) {
  bool raised = false;
  for (int k = 0; k < steady_s + after_s; ++k) {
    const bool in_on = k >= steady_s, out_on = k >= steady_s + delay_s;
    RuptureInput in;
    in.inflow_kg_s = 200.0 + (in_on ? c.dm_in : 0.0);
    in.p_inlet_pa = 60e5 + (in_on ? c.dp_in : 0.0);
    in.outflow_kg_s = 180.0 + (out_on ? c.dm_out : 0.0);
    in.p_outlet_pa = 5e5 + (out_on ? c.dp_out : 0.0);
    in.lateral_out_kg_s = 20.0;
    in.residual_kg_s = k >= steady_s + residual_from_s ? c.residual : 0.0;
    raised = raised || r->det.Step(k, in).rupture;
  }
  return raised;
}

// A rupture near the inlet of a long line: the inlet hears it at once (the
// pump runs out along its curve: half the wave in flow, half in pressure);
// the outlet would hear it only after L / a, longer than a minute on a long
// line, so the alarm must not wait for it.
TEST(RuptureDetector, NearEndRuptureIsRaisedBeforeTheFarEndHears) {
  const double q = 40.0;
  Rig r = MakeRig();
  Change c;
  c.dm_in = 0.5 * q;
  c.dp_in = -0.5 * q / r.b;
  c.residual = q;
  EXPECT_TRUE(RunStaggered(&r, c, 1e9, 240.0, 30.0, 5.0)) << r.det.status().ToString();
  EXPECT_EQ(r.det.status().one_end, 1);
  EXPECT_NEAR(r.det.status().estimate_kg_s, q, 1e-6);  // s_in = dm - B dP
}

// A pump slowing at the inlet: its own wave leaves s_in unmoved (dm = B dP)
// and moves g_in; when the wave reaches a flow-controlled outlet its
// pressure falls and s_out grows like a leak's, but the inlet's own change
// lies within the far end's look-back, so the outlet may not lead.
TEST(RuptureDetector, PumpSlowdownIntoAFlowControlledOutletIsNotARupture) {
  Rig r = MakeRig();
  const double travel_s = 37.0;  // about L / a on the rig's 40 km line
  Change c;
  c.dm_in = -25.0;
  c.dp_in = -25.0 / r.b;
  c.dm_out = 0.0;
  c.dp_out = -50.0 / r.b;  // the wave doubled on the held end
  c.residual = 30.0;       // a line-pack estimate lagging the waves
  EXPECT_FALSE(RunStaggered(&r, c, travel_s, 240.0, 200.0, travel_s)) << r.det.status().ToString();
}

// An outlet valve opening: the outlet's own wave (flow up, pressure down)
// reaches the inlet L / a later as a pressure fall with the pump's flow
// rising, which at the inlet alone reads like a leak's wave. The outlet's
// own change (g_out) and the metered shortfall falling keep it out.
TEST(RuptureDetector, OutletValveOpeningIsNotARuptureAtTheInlet) {
  Rig r = MakeRig();
  const double travel_s = 37.0;
  const double x = 30.0;
  bool raised = false;
  for (int k = 0; k < 500; ++k) {
    RuptureInput in;
    in.outflow_kg_s = 180.0 + (k >= 240 ? x : 0.0);
    in.p_outlet_pa = 5e5 - (k >= 240 ? x / r.b : 0.0);
    in.inflow_kg_s = 200.0 + (k >= 240 + travel_s ? 0.5 * x : 0.0);
    in.p_inlet_pa = 60e5 - (k >= 240 + travel_s ? 0.5 * x / r.b : 0.0);
    in.lateral_out_kg_s = 20.0;
    in.residual_kg_s = k >= 240 ? 0.6 * x : 0.0;  // a lagging line-pack estimate
    raised = raised || r.det.Step(k, in).rupture;
  }
  EXPECT_FALSE(raised) << r.det.status().ToString();
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

// A rupture far from both ends of a long line: neither end hears it within
// the look-back, while the line pack from the transmitters near it falls at
// the leak's rate. A transmitter stepping down instead moves the line pack
// once: a large imbalance for one tick, nothing after it. The path learns
// its noise gate for the first half hour.
TEST(RuptureDetector, MidLineRuptureIsRaisedFromTheLineBeforeEitherEndHears) {
  const double q = 40.0;
  Rig r = MakeRig();
  int raised_at = -1;
  RuptureStatus first;
  for (int k = 0; k < 2100 && raised_at < 0; ++k) {
    RuptureInput in;
    in.inflow_kg_s = 200.0;
    in.outflow_kg_s = 180.0;
    in.lateral_out_kg_s = 20.0;
    in.p_inlet_pa = 60e5;
    in.p_outlet_pa = 5e5;
    in.residual_kg_s = (k >= 2040 ? q : 0.0) + 0.5 * std::sin(0.7 * k);  // a little noise for its gate
    if (r.det.Step(k, in).rupture) {
      raised_at = k;
      first = r.det.status();
    }
  }
  ASSERT_GE(raised_at, 2040) << r.det.status().ToString();
  // The last half of the look-back (30 s) must be mostly leak, its oldest
  // third half of it: about 25 s after the onset with 5 s end means.
  EXPECT_LE(raised_at - 2040, 35);
  EXPECT_EQ(first.one_end, 3);
  // The rate over those 30 s, the part before the onset included.
  EXPECT_GE(first.estimate_kg_s, 0.5 * q);
  EXPECT_LE(first.estimate_kg_s, q + 0.5);

  Rig step = MakeRig();
  bool raised = false;
  for (int k = 0; k < 2200; ++k) {
    RuptureInput in;
    in.inflow_kg_s = 200.0;
    in.outflow_kg_s = 180.0;
    in.lateral_out_kg_s = 20.0;
    in.p_inlet_pa = 60e5;
    in.p_outlet_pa = 5e5;
    in.residual_kg_s = k == 2050 ? 60.0 * q : 0.0;  // as much mass in one tick as the leak in a minute
    raised = raised || step.det.Step(k, in).rupture;
  }
  EXPECT_FALSE(raised) << step.det.status().ToString();
}

// A blocked-in line whose waves slosh between its closed ends: no flow at
// either end, the inlet pressure falling while the outlet's rises, and a
// line-pack estimate that lags the waves. At a closed end nothing tells an
// arriving wave from the end's own, so the far end's opposite signal keeps
// it out of the one-end path.
TEST(RuptureDetector, SloshingBlockedInLineIsNotARupture) {
  Rig r = MakeRig();
  const double x = 25.0;  // kg/s of wave signal at each end
  bool raised = false;
  for (int k = 0; k < 500; ++k) {
    RuptureInput in;
    in.lateral_out_kg_s = 0.0;
    const double phase = k >= 240 ? std::min(1.0, (k - 240) / 20.0) : 0.0;
    in.p_inlet_pa = 40e5 - phase * x / r.b;
    in.p_outlet_pa = 38e5 + phase * x / r.b;
    in.residual_kg_s = 0.7 * x * phase;
    raised = raised || r.det.Step(k, in).rupture;
  }
  EXPECT_FALSE(raised) << r.det.status().ToString();
}

// The inlet's own operator's change (a pump slowing: ds_in = 0, dg_in =
// -2 x), its reflection from a flow-controlled outlet (passive there: |dg| =
// |ds|) returning after 2 L / a and moving s_in as an arriving leak's wave
// would, with the model error of the balance agreeing: the inlet is not a
// passive end over the far end's span (|dg| - |ds| beyond the quiet
// margin), so it does not lead a one-end rupture. Signals are written as
// the invariants (m = (s + g) / 2, P = (g - s) / 2B; hand arithmetic).
TEST(RuptureDetector, ReturningReflectionOfTheInletsOwnChangeIsNotARupture) {
  Rig r = MakeRig();
  const double travel_s = 35.0;  // L / a on the 40 km rig, about
  bool raised = false, inlet_would_lead = false;
  for (int k = 0; k < 420; ++k) {
    double ds_in = 0.0, dg_in = 0.0, ds_out = 0.0, dg_out = 0.0;
    if (k >= 240) dg_in = -19.0;                       // the operator's change, x = 9.5 kg/s
    if (k >= 240 + travel_s) { ds_out = 9.5; dg_out = -9.5; }  // at the flow-held outlet
    if (k >= 240 + 2 * travel_s) { ds_in = 12.0; dg_in -= 12.0; }  // back at the pump, reflected
    RuptureInput in;
    in.inflow_kg_s = 200.0 + 0.5 * (ds_in + dg_in);
    in.p_inlet_pa = 60e5 + (dg_in - ds_in) / (2.0 * r.b);
    in.outflow_kg_s = 180.0 - 0.5 * (ds_out + dg_out);
    in.p_outlet_pa = 5e5 + (dg_out - ds_out) / (2.0 * r.det.b_outlet_m_s());
    in.lateral_out_kg_s = 20.0;
    in.residual_kg_s = k >= 240 ? 12.0 : 0.0;  // model error in the settling line
    const RuptureStatus& st = r.det.Step(k, in);
    raised = raised || st.rupture;
    // What the one-end rule without the passive-leader check raised:
    inlet_would_lead = inlet_would_lead || (st.wave_in_kg_s >= 10.0 && st.far_out_kg_s <= 10.0 &&
                                            st.far_in_kg_s > 10.0);
  }
  EXPECT_TRUE(inlet_would_lead);
  EXPECT_FALSE(raised);
}

// A blocked-in line (no flow at either end) whose ends then show what a
// leak would (a restart opening its valves, the line settling after a
// shut-in): no rupture; the shut-in watch owns a leak in a standing line.
// The same change on the flowing line is raised (LeakIsSeenWhateverTheEndsDo).
TEST(RuptureDetector, StandingLineRaisesNoRupture) {
  Rig r = MakeRig();
  bool raised = false;
  const double q = 30.0;  // kg/s, both ends hear q / 2 each way
  for (int k = 0; k < 300; ++k) {
    const bool on = k >= 240;
    RuptureInput in;
    in.inflow_kg_s = on ? 0.5 * q : 0.0;
    in.p_inlet_pa = 30e5 - (on ? 0.5 * q / r.b : 0.0);
    in.outflow_kg_s = on ? -0.5 * q : 0.0;
    in.p_outlet_pa = 30e5 - (on ? 0.5 * q / r.det.b_outlet_m_s() : 0.0);
    in.residual_kg_s = on ? q : 0.0;
    const RuptureStatus& st = r.det.Step(k, in);
    raised = raised || st.rupture;
    if (k == 299) EXPECT_TRUE(st.standing) << st.ToString();
  }
  EXPECT_FALSE(raised);
}

// A line at rest (blocked in, settled): a leak q sends q / 2 each way; at a
// closed end the wave reflects and the pressure falls by twice the wave's,
// dP = 2 (q / 2) / B = q / B (the same compatibility relations), so B x the
// fall is q at each end while both meters stay at zero. Raised once the
// line has stood for rest_settle_s; not while the shut-in's own waves may
// still run, and not when a meter moved (a valve opening).
struct RestRun {
  bool raised = false, at_rest = false;
};
RestRun RunAtRest(double stood_s, double outflow_after_kg_s) {
  Rig r = MakeRig();
  RestRun out;
  const double q = 30.0;  // kg/s; threshold 0.1 x 200 = 20, wave share 10
  for (int k = 0; k < stood_s + 40; ++k) {
    const bool on = k >= stood_s;
    RuptureInput in;
    in.p_inlet_pa = 30e5 - (on ? q / r.b : 0.0);
    in.p_outlet_pa = 30e5 - (on ? q / r.det.b_outlet_m_s() : 0.0);
    in.outflow_kg_s = on ? outflow_after_kg_s : 0.0;
    in.residual_kg_s = on && outflow_after_kg_s == 0.0 ? q : 0.0;  // a valve: the pack leaves by its meter
    const RuptureStatus& st = r.det.Step(k, in);
    out.raised = out.raised || st.rupture;
    out.at_rest = out.at_rest || (st.rupture && st.at_rest);
  }
  return out;
}

TEST(RuptureDetector, LineAtRestRaisesFromItsEndPressures) {
  const RestRun settled = RunAtRest(900.0, 0.0);  // stood 900 s > rest_settle_s (600 s)
  EXPECT_TRUE(settled.raised);
  EXPECT_TRUE(settled.at_rest);
  EXPECT_FALSE(RunAtRest(300.0, 0.0).raised);    // stood 300 s: the shut-in's waves may still run
  EXPECT_FALSE(RunAtRest(900.0, 25.0).raised);   // the outlet meter moved: a valve, not a leak
}

// LeakLike lets the decision see a leak's own inventory change instead of
// holding it as an operating change. A restart from a shut-in shows the
// same end signature (the inlet draws more flow, the outlet falls, the
// metered shortfall moves), so on a standing line only a rupture raised at
// rest counts.
TEST(RuptureStatus, OnAStandingLineOnlyARuptureAtRestIsLeakLike) {
  RuptureStatus st;
  st.wave_in_kg_s = 30.0;
  st.wave_out_kg_s = 25.0;
  st.metered_kg_s = 12.0;
  st.lateral_change_kg_s = 0.0;
  EXPECT_TRUE(st.LeakLike(20.0));  // flowing line: both ends and the meters agree
  st.standing = true;
  EXPECT_FALSE(st.LeakLike(20.0));  // the same at a restart
  st.rupture = st.at_rest = true;
  EXPECT_TRUE(st.LeakLike(20.0));
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
