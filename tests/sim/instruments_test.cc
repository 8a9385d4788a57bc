// Instrument models: the deterministic random numbers and each blemish.
#include "instruments.h"

#include <cmath>
#include <cstdint>
#include <limits>
#include <string>
#include <vector>

#include <gtest/gtest.h>

namespace holdfast::sim {
namespace {

TEST(Rng, SameSeedSameNumbersDifferentSeedDifferentNumbers) {
  Rng a(42), b(42), c(43);
  for (int i = 0; i < 1000; ++i) {
    const double x = a.Normal();
    EXPECT_EQ(x, b.Normal());
    if (i == 0) {
      EXPECT_NE(x, c.Normal());
    }
  }
}

TEST(Rng, UniformUsesTheStandardGenerator) {
  // std::mt19937_64 is fixed by the C++ standard ([rand.predef]: the 10000th
  // output of a default-constructed engine is 9981545732273789042), so the
  // uniforms built from it are the same on every conforming library.
  std::mt19937_64 g;
  g.discard(9999);
  EXPECT_EQ(g(), 9981545732273789042ull);
  Rng r(5489u);  // the default seed
  std::mt19937_64 ref(5489u);
  for (int i = 0; i < 10; ++i) EXPECT_EQ(r.Uniform(), static_cast<double>(ref() >> 11) * 0x1.0p-53);
}

TEST(Rng, PolarMethodGivesStandardNormalMoments) {
  // Marsaglia & Bray (1964): N(0, 1). With n = 400000 the standard error of
  // the mean is 0.0016 and of the variance about 0.0022; the bounds are 4 sigma.
  Rng r(7);
  const int n = 400000;
  double s1 = 0.0, s2 = 0.0, s4 = 0.0;
  int beyond2 = 0;
  for (int i = 0; i < n; ++i) {
    const double z = r.Normal();
    s1 += z;
    s2 += z * z;
    s4 += z * z * z * z;
    if (std::fabs(z) > 2.0) ++beyond2;
  }
  const double mean = s1 / n, var = s2 / n - mean * mean;
  EXPECT_NEAR(mean, 0.0, 0.0065);
  EXPECT_NEAR(var, 1.0, 0.009);
  EXPECT_NEAR(s4 / n, 3.0, 0.05);  // kurtosis of the normal
  // P(|Z| > 2) = 0.0455 (standard normal table, from memory).
  EXPECT_NEAR(static_cast<double>(beyond2) / n, 0.0455, 0.0015);
}

TEST(Rng, StreamSeedsAreStableAndDistinct) {
  // Regression values of this implementation (SplitMix64 over FNV-1a): a
  // change here changes every simulated file.
  EXPECT_EQ(SplitMix64(0), 0xE220A8397B1DCDAFull);
  EXPECT_NE(StreamSeed(1, "noise/A"), StreamSeed(1, "noise/B"));
  EXPECT_NE(StreamSeed(1, "noise/A"), StreamSeed(2, "noise/A"));
  EXPECT_EQ(StreamSeed(1, "noise/A"), StreamSeed(1, "noise/A"));
}

std::vector<SimReading> Readings(const InstrumentSpec& spec, double duration, double (*truth)(double), uint64_t seed = 1) {
  Instrument in;
  in.Init(0, "X", spec, seed, duration);
  std::vector<SimReading> out;
  while (in.next_sample_s() <= duration) {
    SimReading r;
    if (in.Sample(truth(in.next_sample_s()), &r)) out.push_back(r);
  }
  return out;
}

double Ramp(double t) { return 10.0 + 0.01 * t; }
double Flat(double) { return 5.0; }

TEST(Instrument, SamplesEveryPeriodFromThePhase) {
  InstrumentSpec s;
  s.sample_period_s = 2.0;
  s.phase_s = 0.5;
  const auto r = Readings(s, 100.0, Ramp);
  ASSERT_EQ(r.size(), 50u);  // 0.5, 2.5, ..., 98.5
  EXPECT_DOUBLE_EQ(r.front().time_s, 0.5);
  EXPECT_DOUBLE_EQ(r.back().time_s, 98.5);
  for (const auto& x : r) EXPECT_DOUBLE_EQ(x.value, Ramp(x.time_s));  // no errors configured
}

TEST(Instrument, BiasDriftNoiseAndQuantum) {
  InstrumentSpec s;
  s.bias = 0.3;
  s.drift_per_day = 0.864;  // 1e-5 per second
  s.quantum = 0.01;
  const auto r = Readings(s, 1000.0, Flat);
  for (const auto& x : r) {
    const double expect = 5.0 + 0.3 + 1e-5 * x.time_s;
    EXPECT_NEAR(x.value, expect, 0.005 + 1e-12);
    EXPECT_NEAR(x.value * 100.0, std::round(x.value * 100.0), 1e-6);
  }
  InstrumentSpec n;
  n.noise_fraction = 0.01;  // 1 % of 5.0: sigma 0.05
  const auto rn = Readings(n, 20000.0, Flat);
  double s1 = 0.0, s2 = 0.0;
  for (const auto& x : rn) {
    s1 += x.value - 5.0;
    s2 += (x.value - 5.0) * (x.value - 5.0);
  }
  const double nn = static_cast<double>(rn.size());
  EXPECT_NEAR(s1 / nn, 0.0, 0.004);
  EXPECT_NEAR(std::sqrt(s2 / nn), 0.05, 0.002);
}

TEST(Instrument, DrawnBiasIsFixedForASeed) {
  InstrumentSpec s;
  s.bias_draw_sigma = 0.2;
  Instrument a, b, c;
  a.Init(0, "PT", s, 9, 10.0);
  b.Init(0, "PT", s, 9, 10.0);
  c.Init(0, "PT", s, 10, 10.0);
  EXPECT_EQ(a.bias(), b.bias());
  EXPECT_NE(a.bias(), c.bias());
  EXPECT_LT(std::fabs(a.bias()), 1.0);  // 5 sigma
}

TEST(Instrument, ReportByExceptionWithHeartbeat) {
  InstrumentSpec s;
  s.deadband = 0.5;
  s.heartbeat_s = 30.0;
  // Flat value: the first sample, then only heartbeats every 30 s.
  auto r = Readings(s, 100.0, Flat);
  ASSERT_EQ(r.size(), 4u);
  EXPECT_DOUBLE_EQ(r[1].time_s, 30.0);
  EXPECT_DOUBLE_EQ(r[3].time_s, 90.0);
  // Without the heartbeat a ramp of 0.01/s is sent each time it has moved
  // more than the 0.5 deadband: every 51 s.
  s.heartbeat_s = 0.0;
  r = Readings(s, 200.0, Ramp);
  ASSERT_EQ(r.size(), 4u);  // 0, 51, 102, 153
  EXPECT_DOUBLE_EQ(r[1].time_s, 51.0);
}

TEST(Instrument, DropoutsFlatlinesQualityAndSpikes) {
  InstrumentSpec s;
  s.dropouts = {TimeWindow{10.0, 20.0}};
  s.flatlines = {TimeWindow{30.0, 40.0}};
  s.quality_windows = {QualityWindow{TimeWindow{50.0, 55.0}, Quality::kBad}};
  s.spikes = {Spike{60.5, 7.0}};
  const auto r = Readings(s, 70.0, Ramp);
  int in_dropout = 0;
  for (const auto& x : r) {
    if (x.time_s >= 10.0 && x.time_s < 20.0) ++in_dropout;
    if (x.time_s >= 30.0 && x.time_s < 40.0) {
      EXPECT_DOUBLE_EQ(x.value, Ramp(29.0));  // stuck at the last value
    }
    if (x.time_s >= 50.0 && x.time_s < 55.0) {
      EXPECT_EQ(x.quality, Quality::kBad);
    }
    if (x.time_s == 61.0) {
      EXPECT_DOUBLE_EQ(x.value, Ramp(61.0) + 7.0);  // first sample at or after 60.5
    }
    if (x.time_s == 62.0) {
      EXPECT_DOUBLE_EQ(x.value, Ramp(62.0));
    }
  }
  EXPECT_EQ(in_dropout, 0);
  EXPECT_EQ(r.size(), 71u - 10u);
}

TEST(Instrument, LatencyAndJitter) {
  InstrumentSpec s;
  s.latency_s = 2.0;
  s.latency_spread_s = 1.0;
  s.jitter_s = 0.015;
  const auto r = Readings(s, 100.0, Flat);
  for (size_t i = 0; i < r.size(); ++i) {
    const double nominal = static_cast<double>(i);
    EXPECT_LE(std::fabs(r[i].time_s - nominal), 0.015 + 1e-12);
    EXPECT_GE(r[i].arrival_s, nominal + 2.0);
    EXPECT_LT(r[i].arrival_s, nominal + 3.0);
  }
}

TEST(Instrument, RandomSpikesAtTheirRate) {
  InstrumentSpec s;
  s.spike_rate_per_h = 360.0;  // one in ten samples at 1 s
  s.spike_size = 100.0;
  const auto r = Readings(s, 20000.0, Flat);
  int spikes = 0;
  for (const auto& x : r) spikes += std::fabs(x.value - 5.0) > 50.0 ? 1 : 0;
  // Binomial(20001, 0.1): mean 2000, sigma 42.
  EXPECT_NEAR(spikes, 2000, 170);
}

// The wandering error is an AR(1) process x_k = phi x_(k-1) + sqrt(1-phi^2) sigma e_k.
// Closed-form AR(1) values (Box & Jenkins 1976, ch. 3): stationary variance
// sigma^2, autocorrelation phi^k at lag k. The sampling error of the lag-one
// estimate is about sqrt((1 - phi^2) / n) (Bartlett 1946), of the variance
// about sigma^2 sqrt(2 (1 + phi^2) / ((1 - phi^2) n)); bounds are 5 of those.
TEST(Instrument, WanderIsAnAr1WithItsClosedFormStatistics) {
  const double phi = 0.95, sigma = 0.5;
  InstrumentSpec on;
  on.noise = 0.2;  // white noise stays as it was: subtracted below
  on.wander = sigma;
  on.wander_phi = phi;
  InstrumentSpec off = on;
  off.wander_phi = 0.0;
  const double duration = 199999.0;
  const auto a = Readings(on, duration, Flat, 3);
  const auto b = Readings(off, duration, Flat, 3);
  ASSERT_EQ(a.size(), b.size());
  const size_t n = a.size();
  std::vector<double> w(n);
  for (size_t i = 0; i < n; ++i) w[i] = a[i].value - b[i].value;  // the wander alone
  double mean = 0.0;
  for (double x : w) mean += x;
  mean /= static_cast<double>(n);
  auto autocov = [&](size_t lag) {
    double s = 0.0;
    for (size_t i = lag; i < n; ++i) s += (w[i] - mean) * (w[i - lag] - mean);
    return s / static_cast<double>(n);
  };
  const double c0 = autocov(0);
  const double nn = static_cast<double>(n);
  EXPECT_NEAR(c0, sigma * sigma, 5.0 * sigma * sigma * std::sqrt(2.0 * (1.0 + phi * phi) / ((1.0 - phi * phi) * nn)));
  EXPECT_NEAR(autocov(1) / c0, phi, 5.0 * std::sqrt((1.0 - phi * phi) / nn));
  // Lag 10: phi^10 = 0.5987; Bartlett's variance for an AR(1) at lag k,
  // (1 + phi^2)(1 - phi^(2k)) / (1 - phi^2) - 2 k phi^(2k), over n.
  const double r10 = std::pow(phi, 10);
  const double var10 = ((1 + phi * phi) * (1 - r10 * r10) / (1 - phi * phi) - 20.0 * r10 * r10) / nn;
  EXPECT_NEAR(autocov(10) / c0, r10, 5.0 * std::sqrt(var10));
}

TEST(Instrument, WanderOffLeavesTheReadingsAsTheyWere) {
  InstrumentSpec plain;
  plain.noise = 0.2;
  plain.jitter_s = 0.1;
  InstrumentSpec zero = plain;
  zero.wander = 3.0;  // a sigma without a phi is off
  const auto a = Readings(plain, 500.0, Ramp, 4);
  const auto b = Readings(zero, 500.0, Ramp, 4);
  ASSERT_EQ(a.size(), b.size());
  for (size_t i = 0; i < a.size(); ++i) {
    EXPECT_EQ(a[i].value, b[i].value);
    EXPECT_EQ(a[i].time_s, b[i].time_s);
  }
}

double Trickle(double t) { return t < 50.0 ? 0.4 : 20.0; }

TEST(Instrument, LowFlowCutOffReadsExactlyZero) {
  InstrumentSpec s;
  s.noise = 0.05;
  s.low_flow_cutoff = 1.0;
  const auto r = Readings(s, 99.0, Trickle);
  for (const auto& x : r) {
    if (x.time_s < 50.0) EXPECT_EQ(x.value, 0.0);
    else EXPECT_GT(x.value, 19.0);
  }
  std::string why;
  s.low_flow_cutoff = -1.0;
  EXPECT_FALSE(s.IsValid(&why));
  s.low_flow_cutoff = 0.0;
  s.wander_phi = 1.0;
  EXPECT_FALSE(s.IsValid(&why));
}

}  // namespace
}  // namespace holdfast::sim
