// The district monitor's day path: an hourly CUSUM against the time-of-day
// profile with its threshold from a declared false-alarm budget.
#include <cmath>
#include <cstdint>
#include <random>
#include <string>
#include <vector>

#include <gtest/gtest.h>

#include "holdfast/water.h"
#include "time_zone.h"

namespace holdfast {
namespace {

// Siegmund's (1985) approximation of the one-sided CUSUM's in-control ARL,
// written out here from its published form (Montgomery, Introduction to
// Statistical Quality Control, CUSUM chapter; from memory):
//   ARL0 = (exp(2 k b) - 2 k b - 1) / (2 k^2),  b = h + 1.166.
double SiegmundArl0(double h, double k) {
  const double b = h + 1.166;
  return (std::exp(2.0 * k * b) - 2.0 * k * b - 1.0) / (2.0 * k * k);
}

TEST(DistrictDayPath, ThresholdFromTheBudgetMatchesSiegmundsApproximation) {
  // The declared budget: 3650 days between false day-path alarms, hourly
  // blocks, so the in-control ARL is 87 600 blocks.
  for (double k : {0.5, 1.0, 1.5, 2.5}) {
    const double h = water::DayPathThreshold(3650.0, 24.0, k);
    ASSERT_TRUE(std::isfinite(h)) << k;
    EXPECT_NEAR(SiegmundArl0(h, k) / 87600.0, 1.0, 1e-6) << "k " << k << " h " << h;
  }
  // Against a published table: the two-sided tabular CUSUM with k = 1/2 and
  // h = 4 has ARL0 = 168 (Montgomery, table of ARLs for k = 1/2, h = 4; from
  // memory), so each one-sided half about 336 samples. A budget of 336
  // hourly blocks (14 days) must give h close to 4.
  EXPECT_NEAR(water::DayPathThreshold(14.0, 24.0, 0.5), 4.0, 0.05);
  // A longer budget asks for a higher threshold; bad input gives NaN.
  EXPECT_GT(water::DayPathThreshold(3650.0, 24.0, 1.0), water::DayPathThreshold(365.0, 24.0, 1.0));
  EXPECT_TRUE(std::isnan(water::DayPathThreshold(0.0, 24.0, 1.0)));
  EXPECT_TRUE(std::isnan(water::DayPathThreshold(3650.0, 24.0, -1.0)));
}

// A district without customer meters whose zone flow is a day pattern of
// demand with AR(1) noise (about 3 % of demand, 90-minute correlation), plus
// leakage 4 m3/h and an optional burst. Invented numbers, one tick a minute.
struct NoisyDistrict {
  water::DistrictMonitor m;
  SequenceCounter seq;
  AlarmEventRing<16> ring;
  std::vector<water::BurstReport> bursts;
  void Run(double t0, int days, double step_at_s, double step_m3_h, uint64_t seed) {
    std::mt19937_64 rng(seed);
    auto normal = [&] {  // Box-Muller, so the series is the same everywhere
      const double u1 = (static_cast<double>(rng() >> 11) + 0.5) / 9007199254740992.0;
      const double u2 = static_cast<double>(rng() >> 11) / 9007199254740992.0;
      return std::sqrt(-2.0 * std::log(u1)) * std::cos(2.0 * M_PI * u2);
    };
    const double rho = std::exp(-60.0 / 5400.0);
    double n = 0.0;
    for (int k = 0; k < days * 1440; ++k) {
      const double t = t0 + 60.0 * k;
      const double h = std::fmod((t - t0) / 3600.0, 24.0);
      const double demand = h < 5.0 ? 3.0 : 3.0 + 40.0 * std::sin(M_PI * (h - 5.0) / 19.0);
      n = rho * n + std::sqrt(1.0 - rho * rho) * normal();
      const double q = demand * (1.0 + 0.03 * n) + 4.0 + (t >= step_at_s ? step_m3_h : 0.0);
      m.Step(t, 60.0, true, q / 3600.0, 0.0, 500.0);
      if (m.burst_raised()) bursts.push_back(m.last_burst());
    }
  }
};

TEST(DistrictDayPath, SixCubicMetrePerHourDaytimeBurstIsAlarmedWithinHours) {
  NoisyDistrict s;
  water::DistrictMonitorOptions o;
  std::string why;
  ASSERT_TRUE(s.m.Init(0, o, false, &s.seq, &s.ring, &why)) << why;
  const double t0 = static_cast<double>(DaysFromCivil(2026, 3, 2)) * 86400.0;
  const double step_at = t0 + 24.0 * 86400.0 + 10.0 * 3600.0 + 20.0 * 60.0;  // day 24, 10:20
  s.Run(t0, 26, step_at, 6.0, 7);
  ASSERT_GE(s.bursts.size(), 1u);
  const water::BurstReport& b = s.bursts[0];
  EXPECT_EQ(b.path, water::BurstPath::kDay) << b.ToString();
  EXPECT_GT(b.time_s, step_at);
  EXPECT_LT(b.time_s - step_at, 6.0 * 3600.0) << b.ToString();
  EXPECT_NEAR(b.size_m3_h, 6.0, 2.0) << b.ToString();
  EXPECT_GT(b.statistic, b.threshold);
  // The threshold came from the budget at the learnt reference.
  EXPECT_NEAR(b.threshold, 2.0 * s.m.day_k() * water::DayPathThreshold(o.false_alarm_interval_days, 24.0, s.m.day_k()),
              0.05 * b.threshold);
  // One burst, one alarm: neither the next night nor the day path reports it again.
  EXPECT_EQ(s.bursts.size(), 1u) << s.bursts.back().ToString();
}

TEST(DistrictDayPath, NoAlarmOnABurstFreeSeries) {
  for (uint64_t seed : {11u, 12u}) {
    NoisyDistrict s;
    water::DistrictMonitorOptions o;
    std::string why;
    ASSERT_TRUE(s.m.Init(0, o, false, &s.seq, &s.ring, &why)) << why;
    const double t0 = static_cast<double>(DaysFromCivil(2026, 3, 2)) * 86400.0;
    s.Run(t0, 40, 1e300, 0.0, seed);
    EXPECT_TRUE(s.bursts.empty()) << "seed " << seed << ": " << s.bursts[0].ToString();
    EXPECT_TRUE(std::isfinite(s.m.day_h())) << "the day path never formed";
  }
}

TEST(DistrictDayPath, OptionsAreChecked) {
  water::DistrictMonitorOptions o;
  std::string why;
  EXPECT_TRUE(o.IsValid(&why)) << why;
  o.day_step_m3_h = 0.0;
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("day step"), std::string::npos) << why;
  o = water::DistrictMonitorOptions{};
  o.false_alarm_interval_days = 0.5;
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("false-alarm"), std::string::npos) << why;
}

}  // namespace
}  // namespace holdfast
