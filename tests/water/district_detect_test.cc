// Burst detection on synthetic districts (DistrictMonitor), local time from
// the tz database and POSIX rules (io/time_zone.h).
#include <cmath>
#include <string>
#include <vector>

#include <gtest/gtest.h>

#include "holdfast/water.h"
#include "time_zone.h"

namespace holdfast {
namespace {

double Utc(int64_t y, unsigned m, unsigned d, int hh, int mm) {
  return static_cast<double>(DaysFromCivil(y, m, d)) * 86400.0 + hh * 3600.0 + mm * 60.0;
}

// EU summer time (Directive 2000/84/EC): from 01:00 UTC on the last Sunday
// of March to 01:00 UTC on the last Sunday of October. In 2026: 29 March and
// 25 October.
TEST(TimeZone, LondonFromTheTzDatabaseAndFromAPosixRule) {
  water::UtcOffsetSchedule tzdb, posix;
  std::string why;
  ASSERT_TRUE(BuildOffsetSchedule("Europe/London", Utc(2026, 1, 1, 0, 0), Utc(2027, 1, 1, 0, 0), &tzdb, &why)) << why;
  ASSERT_TRUE(BuildOffsetSchedule("GMT0BST,M3.5.0/1,M10.5.0", Utc(2026, 1, 1, 0, 0), Utc(2027, 1, 1, 0, 0), &posix, &why))
      << why;
  for (const water::UtcOffsetSchedule* s : {&tzdb, &posix}) {
    EXPECT_EQ(s->OffsetAt(Utc(2026, 3, 29, 0, 59)), 0.0);
    EXPECT_EQ(s->OffsetAt(Utc(2026, 3, 29, 1, 0)), 3600.0);
    EXPECT_EQ(s->OffsetAt(Utc(2026, 10, 25, 0, 59)), 3600.0);
    EXPECT_EQ(s->OffsetAt(Utc(2026, 10, 25, 1, 0)), 0.0);
    EXPECT_EQ(s->OffsetAt(Utc(2026, 7, 1, 12, 0)), 3600.0);
  }
  // Central European Time: the same instants, offsets one hour more.
  water::UtcOffsetSchedule cet;
  ASSERT_TRUE(PosixTzSchedule("CET-1CEST,M3.5.0,M10.5.0/3", Utc(2026, 1, 1, 0, 0), Utc(2027, 1, 1, 0, 0), &cet, &why));
  EXPECT_EQ(cet.OffsetAt(Utc(2026, 3, 29, 0, 59)), 3600.0);
  EXPECT_EQ(cet.OffsetAt(Utc(2026, 3, 29, 1, 0)), 7200.0);
  // Southern hemisphere (New South Wales, from memory: summer time ends on
  // the first Sunday of April at 03:00 summer time, 5 April 2026 = 4 April
  // 16:00 UTC, and starts on the first Sunday of October at 02:00).
  water::UtcOffsetSchedule syd;
  ASSERT_TRUE(PosixTzSchedule("AEST-10AEDT,M10.1.0,M4.1.0/3", Utc(2026, 1, 1, 0, 0), Utc(2027, 1, 1, 0, 0), &syd, &why));
  EXPECT_EQ(syd.OffsetAt(Utc(2026, 4, 4, 15, 59)), 11.0 * 3600.0);
  EXPECT_EQ(syd.OffsetAt(Utc(2026, 4, 4, 16, 0)), 10.0 * 3600.0);
  EXPECT_EQ(syd.OffsetAt(Utc(2026, 10, 3, 16, 0)), 11.0 * 3600.0);
  // Bad rules and unknown zones are refused with the zone named.
  EXPECT_FALSE(BuildOffsetSchedule("Europe/Nowhere", 0, 1e9, &syd, &why));
  EXPECT_NE(why.find("Europe/Nowhere"), std::string::npos) << why;
  EXPECT_FALSE(BuildOffsetSchedule("XYZ", 0, 1e9, &syd, &why));
  EXPECT_FALSE(BuildOffsetSchedule("GMT0BST", 0, 1e9, &syd, &why));
  EXPECT_FALSE(BuildOffsetSchedule("../etc/passwd", 0, 1e9, &syd, &why));
}

TEST(TimeZone, WeekdaysAndLocalDays) {
  EXPECT_EQ(water::WeekdayOf(0), 4);                              // 1970-01-01: Thursday
  EXPECT_EQ(water::WeekdayOf(DaysFromCivil(2026, 3, 29)), 0);     // a Sunday
  EXPECT_EQ(water::LocalDayOf(-1.0), -1);
}

// A noise-free district without customer meters: a day pattern of demand,
// night flow 3 m3/h plus leakage, one tick a minute.
struct Synthetic {
  water::DistrictMonitor m;
  SequenceCounter seq;
  AlarmEventRing<16> ring;
  std::vector<water::BurstReport> bursts;
  std::vector<water::DistrictNight> nights;
  void Run(double t0, int days, double leak_m3_h, double step_at_s, double step_m3_h) {
    for (int k = 0; k < days * 1440; ++k) {
      const double t = t0 + 60.0 * k;
      const double h = std::fmod((t - t0) / 3600.0, 24.0);
      const double demand = h < 5.0 ? 3.0 : 3.0 + 40.0 * std::sin(M_PI * (h - 5.0) / 19.0);
      const double q = demand + leak_m3_h + (t >= step_at_s ? step_m3_h : 0.0);
      m.Step(t, 60.0, true, q / 3600.0, 0.0, 500.0);
      if (m.burst_raised()) bursts.push_back(m.last_burst());
      if (m.night_done()) nights.push_back(m.night());
    }
  }
};

TEST(DistrictMonitor, NightStepAlarmsOnTheFirstNightWithSizeAndChangeInterval) {
  Synthetic s;
  water::DistrictMonitorOptions o;
  o.alarm.latching = false;
  std::string why;
  ASSERT_TRUE(s.m.Init(0, o, false, &s.seq, &s.ring, &why)) << why;
  const double t0 = static_cast<double>(DaysFromCivil(2026, 3, 2)) * 86400.0;
  const double step_at = t0 + 12.0 * 86400.0 + 15.0 * 3600.0;  // day 12, 15:00
  s.Run(t0, 16, 4.0, step_at, 1.5);
  ASSERT_EQ(s.bursts.size(), 1u);
  const water::BurstReport& b = s.bursts[0];
  EXPECT_EQ(b.path, water::BurstPath::kNight);
  EXPECT_NEAR(b.size_m3_h, 1.5, 0.05);
  // Reported after the following night's quiet hours (04:00 plus the block
  // decision), within 30 h of the step.
  EXPECT_GT(b.time_s, step_at);
  EXPECT_LT(b.time_s - step_at, 14.0 * 3600.0);
  EXPECT_LE(std::fabs(step_at - b.change_s), b.change_ci_s);
  // The alarm machinery raised it once.
  AlarmEvent e;
  int raised = 0;
  while (s.ring.Pop(&e)) raised += e.cause == AlarmCause::kConditionRaised ? 1 : 0;
  EXPECT_EQ(raised, 1);
}

TEST(DistrictMonitor, BurstInTheLearningPeriodIsReportedWhenTheBaselineForms) {
  Synthetic s;
  water::DistrictMonitorOptions o;
  std::string why;
  ASSERT_TRUE(s.m.Init(0, o, false, &s.seq, &s.ring, &why)) << why;
  const double t0 = static_cast<double>(DaysFromCivil(2026, 3, 2)) * 86400.0;
  const double step_at = t0 + 2.0 * 86400.0 + 10.0 * 3600.0;  // day 2, 10:00: inside the learning nights
  s.Run(t0, 12, 4.0, step_at, 2.0);
  ASSERT_EQ(s.bursts.size(), 1u) << (s.bursts.empty() ? "" : s.bursts[0].ToString());
  EXPECT_EQ(s.bursts[0].path, water::BurstPath::kLearning);
  EXPECT_NEAR(s.bursts[0].size_m3_h, 2.0, 0.05);
  EXPECT_LE(std::fabs(step_at - s.bursts[0].change_s), s.bursts[0].change_ci_s);
}

TEST(DistrictMonitor, LargeDaytimeBurstTakesTheFastPath) {
  Synthetic s;
  water::DistrictMonitorOptions o;
  std::string why;
  ASSERT_TRUE(s.m.Init(0, o, false, &s.seq, &s.ring, &why)) << why;
  const double t0 = static_cast<double>(DaysFromCivil(2026, 3, 2)) * 86400.0;
  const double step_at = t0 + 10.0 * 86400.0 + 9.0 * 3600.0;  // day 10, 09:00
  s.Run(t0, 12, 4.0, step_at, 6.0);
  ASSERT_GE(s.bursts.size(), 1u);
  EXPECT_EQ(s.bursts[0].path, water::BurstPath::kDay);
  EXPECT_LT(s.bursts[0].time_s - step_at, 6.0 * 3600.0);
  EXPECT_NEAR(s.bursts[0].size_m3_h, 6.0, 0.6);  // the first block holds part of the step
  // The following night re-measures the step rather than alarming again.
  EXPECT_EQ(s.bursts.size(), 1u);
}

TEST(DistrictMonitor, CustomerIntervalVolumesArePlacedInTheirBlocks) {
  water::DistrictMonitor m;
  SequenceCounter seq;
  AlarmEventRing<4> ring;
  water::DistrictMonitorOptions o;
  std::string why;
  ASSERT_TRUE(m.Init(0, o, true, &seq, &ring, &why)) << why;
  const double t0 = static_cast<double>(DaysFromCivil(2026, 3, 2)) * 86400.0;
  std::vector<water::DistrictBlock> blocks;
  // Zone 10 m3/h, customers 7 m3/h reported as hourly totals at hour ends:
  // the residual is 3 m3/h once the filter has settled.
  for (int k = 1; k <= 6 * 60; ++k) {
    const double t = t0 + 60.0 * k;
    if (k % 60 == 0) m.AddCustomerVolume(t - 3600.0, t, 7.0);
    m.Step(t, 60.0, true, 10.0 / 3600.0, 0.0, 100.0);
    for (int i = 0; i < m.new_blocks(); ++i) blocks.push_back(m.block(i));
  }
  ASSERT_GE(blocks.size(), 3u);
  EXPECT_NEAR(blocks[2].residual_m3_h, 3.0, 1e-3) << blocks[2].ToString();
  EXPECT_TRUE(blocks[2].ok);
}

}  // namespace
}  // namespace holdfast
