// Window balance: running sums, gaps, and the uncertainty model.
#include "holdfast/balance.h"

#include <cmath>
#include <cstdio>
#include <random>

#include <gtest/gtest.h>

#include "holdfast/monitor.h"
#include "test_site.h"

namespace holdfast {
namespace {

using testing::GenericLiquid;
using testing::Steel;
using testing::TwoEndSite;

// Standard normal quantiles as tabulated in any statistics handbook
// (e.g. NIST/SEMATECH e-Handbook, table of the normal distribution).
TEST(NormalQuantile, MatchesTables) {
  EXPECT_NEAR(NormalQuantile(0.95), 1.6448536269514722, 1e-12);
  EXPECT_NEAR(NormalQuantile(0.975), 1.959963984540054, 1e-12);
  EXPECT_NEAR(NormalQuantile(0.5), 0.0, 1e-14);
  EXPECT_NEAR(NormalQuantile(0.001), -3.090232306167813, 1e-10);
  EXPECT_NEAR(NormalQuantile(1e-9), -5.997807015007686, 1e-8);
}

TEST(Balance, OptionsValidation) {
  SegmentBalance::Options o;
  std::string why;
  EXPECT_TRUE(o.IsValid(&why));
  o.windows_s = {};
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("window"), std::string::npos);
  o.windows_s = {300, -1};
  EXPECT_FALSE(o.IsValid(&why));
  o.windows_s = {300};
  o.confidence = 0.4;
  EXPECT_FALSE(o.IsValid(&why));
  o.confidence = 0.95;
  o.buckets_per_window = 2;
  EXPECT_FALSE(o.IsValid(&why));
}

// A constant missing flow shows up in every window as exactly that rate, and
// each window covers [W, W + W/buckets) once full.
TEST(Balance, ConstantLeakGivesItsRateInEveryWindow) {
  SegmentBalance b;
  SegmentBalance::Options o;
  o.windows_s = {60.0, 600.0};
  o.buckets_per_window = 12;
  ASSERT_TRUE(b.Init(o, nullptr));
  MeterFlow flows[2] = {{100.0, 0, 0}, {-97.5, 0, 0}};
  for (int k = 0; k <= 2000; ++k) b.Step(k * 0.5, true, flows, 2, 5e6, 0, 0, 0);
  for (int i = 0; i < 2; ++i) {
    const WindowResult& w = b.window(i);
    EXPECT_TRUE(w.full);
    EXPECT_GE(w.covered_s, o.windows_s[i]);
    EXPECT_LT(w.covered_s, o.windows_s[i] * (1.0 + 1.0 / o.buckets_per_window) + 1e-9);
    EXPECT_NEAR(w.imbalance_kg_s, 2.5, 1e-9);
    EXPECT_NEAR(w.imbalance_kg, 2.5 * w.covered_s, 1e-6);
  }
}

// Invalid ticks are skipped and the inventory is re-baselined: a step in
// inventory across a gap is not an imbalance.
TEST(Balance, GapDoesNotCreateImbalance) {
  SegmentBalance b;
  SegmentBalance::Options o;
  o.windows_s = {100.0};
  o.buckets_per_window = 10;
  ASSERT_TRUE(b.Init(o, nullptr));
  MeterFlow flows[2] = {{50.0, 0, 0}, {-50.0, 0, 0}};
  for (int k = 0; k < 50; ++k) b.Step(k, true, flows, 2, 1e6, 0, 0, 0);
  for (int k = 50; k < 60; ++k) b.Step(k, false, flows, 2, 0.0, 0, 0, 0);
  for (int k = 60; k < 120; ++k) b.Step(k, true, flows, 2, 1e6 + 777.0, 0, 0, 0);
  EXPECT_NEAR(b.window(0).imbalance_kg, 0.0, 1e-9);
}

// The stated window uncertainty against a Monte Carlo of the same instrument
// model: meters with random (per sample) and systematic (per run) errors,
// pressure transmitters with random noise, temperature transmitters with
// random noise through the first-order filter. Agreement within 5 %.
TEST(Balance, WindowUncertaintyMatchesMonteCarlo) {
  const FluidSpec f = GenericLiquid(860.0, 1.4e9, 8.5e-4);
  Site site = TwoEndSite(f, {Steel(20000.0, 0.4064, 0.0079)}, 1000.0);
  SegmentSpec& seg = site.segments[0];
  seg.windows_s = {60.0, 300.0};
  seg.buckets_per_window = 60;
  seg.temperature_filter_s = 60.0;
  const double q = 200.0, sr = 0.002, ss = 0.001, sp = 2000.0, st = 0.05;
  for (const char* id : {"in", "out"}) {
    site.points[site.FindPoint(id)].random_sigma = sr;
    site.points[site.FindPoint(id)].systematic_sigma = ss;
  }
  for (const char* id : {"p0", "pL"}) site.points[site.FindPoint(id)].random_sigma = sp;
  for (const char* id : {"t0", "tL"}) site.points[site.FindPoint(id)].random_sigma = st;
  const int in = site.FindPoint("in"), out = site.FindPoint("out"), p0 = site.FindPoint("p0"),
            pl = site.FindPoint("pL"), t0 = site.FindPoint("t0"), tl = site.FindPoint("tL");

  std::mt19937_64 rng(20261202);
  std::normal_distribution<double> n01(0.0, 1.0);
  const int runs = 1500, warmup = 400, ticks = 320;
  double sum2[2] = {0, 0}, sigma_sum[2] = {0, 0};
  Monitor m;
  ASSERT_TRUE(m.Init(site, nullptr));
  for (int run = 0; run < runs; ++run) {
    m.Reset();
    const double bias_in = ss * n01(rng), bias_out = ss * n01(rng);
    const double bias_p = 5000.0 * n01(rng);  // a fixed offset cancels in differences
    for (int k = 0; k < warmup + ticks; ++k) {
      const double t = k;
      if (k >= warmup) {  // meters start after the temperature filter has settled
        m.Feed({in, t, q * (1.0 + bias_in + sr * n01(rng)), Quality::kGood});
        m.Feed({out, t, q * (1.0 + bias_out + sr * n01(rng)), Quality::kGood});
      }
      m.Feed({p0, t, 50e5 + bias_p + sp * n01(rng), Quality::kGood});
      m.Feed({pl, t, 10e5 + bias_p + sp * n01(rng), Quality::kGood});
      m.Feed({t0, t, 291.0 + st * n01(rng), Quality::kGood});
      m.Feed({tl, t, 287.0 + st * n01(rng), Quality::kGood});
      m.Advance(t);
    }
    const SegmentTick& tick = m.segment(0);
    for (int w = 0; w < 2; ++w) {
      ASSERT_TRUE(tick.windows[w].full);
      sum2[w] += tick.windows[w].imbalance_kg * tick.windows[w].imbalance_kg;
      sigma_sum[w] += tick.windows[w].sigma_kg;
    }
  }
  for (int w = 0; w < 2; ++w) {
    const double mc = std::sqrt(sum2[w] / runs);
    const double stated = sigma_sum[w] / runs;
    std::printf("window %4.0f s: Monte Carlo sigma %.2f kg, stated %.2f kg, ratio %.4f\n", seg.windows_s[w], mc,
                stated, mc / stated);
    EXPECT_NEAR(mc / stated, 1.0, 0.05) << "window " << seg.windows_s[w] << " s: Monte Carlo " << mc
                                         << " kg, stated " << stated << " kg";
  }
}

}  // namespace
}  // namespace holdfast
