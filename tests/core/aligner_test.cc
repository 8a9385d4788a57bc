// The aligner: SI conversion on entry, sample-and-hold with staleness, and
// the bookkeeping of readings it will not use (out of order, duplicate, late,
// unknown, not finite, bad quality). Expected values are unit definitions
// (NIST SP 811, exact) or hand arithmetic, noted beside each check.
#include "holdfast/aligner.h"

#include <cmath>
#include <cstdint>
#include <cstdio>
#include <limits>
#include <random>
#include <string>

#include <gtest/gtest.h>

#include "holdfast/reading.h"
#include "holdfast/site.h"
#include "holdfast/units.h"

namespace holdfast {
namespace {

constexpr double kAtm_pa = 100900.0;  // a site's own atmospheric pressure, not the standard one

PointSpec MakePoint(const std::string& id, PointKind kind, const char* unit, double staleness_s) {
  PointSpec p;
  p.id = id;
  p.kind = kind;
  p.unit_name = unit;
  std::string why;
  EXPECT_TRUE(LookUpUnit(unit, &p.unit, &why)) << why;
  p.staleness_s = staleness_s;
  return p;
}

// Points: 0 flow m3/h, 1 pressure bar gauge, 2 temperature degC, 3 level mm,
// 4 mass flow t/h.
Site SmallSite() {
  Site site;
  site.name = "aligner test";
  site.atmospheric_pressure_pa = kAtm_pa;
  site.points.push_back(MakePoint("FT", PointKind::kFlow, "m3/h", 30.0));
  PointSpec pt = MakePoint("PT", PointKind::kPressure, "bar", 30.0);
  pt.gauge = true;
  pt.unit.offset = site.atmospheric_pressure_pa;  // gauge to absolute, as the config compiler does
  site.points.push_back(pt);
  site.points.push_back(MakePoint("TT", PointKind::kTemperature, "degC", 60.0));
  site.points.push_back(MakePoint("LT", PointKind::kLevel, "mm", 10.0));
  site.points.push_back(MakePoint("FTM", PointKind::kFlow, "t/h", 30.0));
  return site;
}

enum : int32_t { kFlow = 0, kPressure = 1, kTemperature = 2, kLevel = 3, kMassFlow = 4 };

Reading At(int32_t point, double t, double value, Quality q = Quality::kGood) {
  Reading r;
  r.point = point;
  r.time_s = t;
  r.value = value;
  r.quality = q;
  return r;
}

class AlignerTest : public ::testing::Test {
 protected:
  void SetUp() override {
    site_ = SmallSite();
    aligner_.Reset(site_);
  }
  Site site_;
  Aligner aligner_;
};

TEST_F(AlignerTest, StartsEmptyAndUnusable) {
  EXPECT_EQ(aligner_.point_count(), 5);
  for (int p = 0; p < aligner_.point_count(); ++p) {
    EXPECT_FALSE(aligner_.held(p).has_value);
    EXPECT_FALSE(aligner_.Usable(p, 0.0));
  }
  EXPECT_EQ(aligner_.counters().ToString(),
            "accepted=0 late=0 out_of_order=0 duplicate=0 unknown_point=0 not_finite=0 bad_quality=0 "
            "out_of_range=0 rate_of_change=0 spike=0 held_back=0");
}

TEST_F(AlignerTest, ConvertsToSiOnEntry) {
  EXPECT_EQ(aligner_.Feed(At(kFlow, 10.0, 900.0)), FeedStatus::kAccepted);
  EXPECT_EQ(aligner_.Feed(At(kPressure, 10.0, 2.5)), FeedStatus::kAccepted);
  EXPECT_EQ(aligner_.Feed(At(kTemperature, 10.0, 18.0)), FeedStatus::kAccepted);
  EXPECT_EQ(aligner_.Feed(At(kLevel, 10.0, 6543.2)), FeedStatus::kAccepted);
  EXPECT_EQ(aligner_.Feed(At(kMassFlow, 10.0, 150.0)), FeedStatus::kAccepted);
  // 900 m3/h = 900 / 3600 m3/s = 0.25 m3/s.
  EXPECT_DOUBLE_EQ(aligner_.value(kFlow), 0.25);
  // 2.5 bar gauge = 2.5e5 Pa + 100900 Pa atmospheric = 350900 Pa absolute.
  EXPECT_DOUBLE_EQ(aligner_.value(kPressure), 350900.0);
  // 18 degC = 291.15 K (exact offset 273.15).
  EXPECT_DOUBLE_EQ(aligner_.value(kTemperature), 291.15);
  // 6543.2 mm = 6.5432 m.
  EXPECT_DOUBLE_EQ(aligner_.value(kLevel), 6.5432);
  // 150 t/h = 150000 kg / 3600 s = 41.6666... kg/s.
  EXPECT_NEAR(aligner_.value(kMassFlow), 150000.0 / 3600.0, 1e-12);
  EXPECT_DOUBLE_EQ(aligner_.held(kPressure).time_s, 10.0);
  EXPECT_EQ(aligner_.counters().accepted, 5u);
  // The held value converts back to the raw unit with the same conversion.
  EXPECT_NEAR(site_.points[kPressure].unit.FromSi(aligner_.value(kPressure)), 2.5, 1e-12);
}

TEST_F(AlignerTest, HoldsUntilStale) {
  ASSERT_EQ(aligner_.Feed(At(kFlow, 100.0, 720.0)), FeedStatus::kAccepted);
  // Staleness limit 30 s: usable up to and including t = 130, not after.
  EXPECT_TRUE(aligner_.Usable(kFlow, 100.0));
  EXPECT_TRUE(aligner_.Usable(kFlow, 115.0));
  EXPECT_TRUE(aligner_.Usable(kFlow, 130.0));
  EXPECT_FALSE(aligner_.Usable(kFlow, 130.001));
  EXPECT_FALSE(aligner_.Usable(kFlow, 1000.0));
  // Stale is not forgotten: the value is still held.
  EXPECT_TRUE(aligner_.held(kFlow).has_value);
  EXPECT_DOUBLE_EQ(aligner_.value(kFlow), 0.2);  // 720 / 3600
  // A fresh reading makes it usable again; each point has its own limit.
  ASSERT_EQ(aligner_.Feed(At(kFlow, 990.0, 360.0)), FeedStatus::kAccepted);
  EXPECT_TRUE(aligner_.Usable(kFlow, 1000.0));
  EXPECT_DOUBLE_EQ(aligner_.value(kFlow), 0.1);
  ASSERT_EQ(aligner_.Feed(At(kTemperature, 990.0, 12.0)), FeedStatus::kAccepted);
  EXPECT_TRUE(aligner_.Usable(kTemperature, 1050.0));   // 60 s limit
  EXPECT_FALSE(aligner_.Usable(kTemperature, 1050.5));
  ASSERT_EQ(aligner_.Feed(At(kLevel, 990.0, 100.0)), FeedStatus::kAccepted);
  EXPECT_TRUE(aligner_.Usable(kLevel, 1000.0));          // 10 s limit
  EXPECT_FALSE(aligner_.Usable(kLevel, 1000.5));
}

TEST_F(AlignerTest, OutOfOrderIsIgnoredAndCounted) {
  ASSERT_EQ(aligner_.Feed(At(kFlow, 100.0, 900.0)), FeedStatus::kAccepted);
  EXPECT_EQ(aligner_.Feed(At(kFlow, 99.5, 1800.0)), FeedStatus::kOutOfOrder);
  EXPECT_EQ(aligner_.Feed(At(kFlow, 50.0, 0.0)), FeedStatus::kOutOfOrder);
  // The newer value stays.
  EXPECT_DOUBLE_EQ(aligner_.value(kFlow), 0.25);
  EXPECT_DOUBLE_EQ(aligner_.held(kFlow).time_s, 100.0);
  EXPECT_EQ(aligner_.counters().out_of_order, 2u);
  EXPECT_EQ(aligner_.counters().accepted, 1u);
  // Order is per point: an older time on another point is fine.
  EXPECT_EQ(aligner_.Feed(At(kPressure, 50.0, 1.0)), FeedStatus::kAccepted);
  EXPECT_EQ(aligner_.counters().out_of_order, 2u);
}

TEST_F(AlignerTest, DuplicateTimeIsIgnoredAndCounted) {
  ASSERT_EQ(aligner_.Feed(At(kPressure, 200.0, 10.0)), FeedStatus::kAccepted);
  EXPECT_EQ(aligner_.Feed(At(kPressure, 200.0, 10.0)), FeedStatus::kDuplicate);
  // Same time, different value: still a duplicate, and the first value stays.
  EXPECT_EQ(aligner_.Feed(At(kPressure, 200.0, 11.0)), FeedStatus::kDuplicate);
  EXPECT_DOUBLE_EQ(aligner_.value(kPressure), 10.0e5 + kAtm_pa);
  EXPECT_EQ(aligner_.counters().duplicate, 2u);
  EXPECT_EQ(aligner_.counters().accepted, 1u);
  EXPECT_EQ(aligner_.counters().out_of_order, 0u);
}

TEST_F(AlignerTest, LateReadingsAreAcceptedAndCounted) {
  ASSERT_EQ(aligner_.Feed(At(kFlow, 100.0, 900.0)), FeedStatus::kAccepted);
  aligner_.SetTickTime(110.0);
  // Newer than the held value but not after the last tick: late, and used.
  EXPECT_EQ(aligner_.Feed(At(kFlow, 105.0, 936.0)), FeedStatus::kLate);
  EXPECT_DOUBLE_EQ(aligner_.value(kFlow), 0.26);  // 936 / 3600
  EXPECT_DOUBLE_EQ(aligner_.held(kFlow).time_s, 105.0);
  // Exactly at the tick time is late too (time <= last tick).
  EXPECT_EQ(aligner_.Feed(At(kFlow, 110.0, 900.0)), FeedStatus::kLate);
  // A first value for a point can be late as well.
  EXPECT_EQ(aligner_.Feed(At(kTemperature, 20.0, 15.0)), FeedStatus::kLate);
  EXPECT_TRUE(aligner_.held(kTemperature).has_value);
  // After the tick time: accepted as normal.
  EXPECT_EQ(aligner_.Feed(At(kFlow, 110.5, 900.0)), FeedStatus::kAccepted);
  EXPECT_EQ(aligner_.counters().late, 3u);
  EXPECT_EQ(aligner_.counters().accepted, 2u);
  // Older than the held value: out of order even though it is also late.
  EXPECT_EQ(aligner_.Feed(At(kFlow, 104.0, 900.0)), FeedStatus::kOutOfOrder);
  EXPECT_EQ(aligner_.counters().late, 3u);
  EXPECT_EQ(aligner_.counters().out_of_order, 1u);
}

TEST_F(AlignerTest, UnknownPointIndex) {
  EXPECT_EQ(aligner_.Feed(At(-1, 10.0, 1.0)), FeedStatus::kUnknownPoint);
  EXPECT_EQ(aligner_.Feed(At(5, 10.0, 1.0)), FeedStatus::kUnknownPoint);
  EXPECT_EQ(aligner_.Feed(At(1000000, 10.0, 1.0)), FeedStatus::kUnknownPoint);
  EXPECT_EQ(aligner_.counters().unknown_point, 3u);
  EXPECT_EQ(aligner_.counters().accepted, 0u);
  for (int p = 0; p < aligner_.point_count(); ++p) EXPECT_FALSE(aligner_.held(p).has_value);
}

TEST_F(AlignerTest, NonFiniteValuesAndTimesAreRejected) {
  const double nan = std::numeric_limits<double>::quiet_NaN();
  const double inf = std::numeric_limits<double>::infinity();
  ASSERT_EQ(aligner_.Feed(At(kFlow, 100.0, 900.0)), FeedStatus::kAccepted);
  EXPECT_EQ(aligner_.Feed(At(kFlow, 101.0, nan)), FeedStatus::kNotFinite);
  EXPECT_EQ(aligner_.Feed(At(kFlow, 102.0, inf)), FeedStatus::kNotFinite);
  EXPECT_EQ(aligner_.Feed(At(kFlow, 103.0, -inf)), FeedStatus::kNotFinite);
  EXPECT_EQ(aligner_.Feed(At(kFlow, nan, 900.0)), FeedStatus::kNotFinite);
  EXPECT_EQ(aligner_.Feed(At(kFlow, inf, 900.0)), FeedStatus::kNotFinite);
  EXPECT_EQ(aligner_.counters().not_finite, 5u);
  // Nothing changed: neither the value nor its time.
  EXPECT_DOUBLE_EQ(aligner_.value(kFlow), 0.25);
  EXPECT_DOUBLE_EQ(aligner_.held(kFlow).time_s, 100.0);
  // An infinite time did not poison the ordering of later readings.
  EXPECT_EQ(aligner_.Feed(At(kFlow, 104.0, 720.0)), FeedStatus::kAccepted);
  EXPECT_DOUBLE_EQ(aligner_.value(kFlow), 0.2);
}

TEST_F(AlignerTest, BadQualityHoldsTheLastGoodValue) {
  ASSERT_EQ(aligner_.Feed(At(kPressure, 100.0, 20.0)), FeedStatus::kAccepted);
  EXPECT_TRUE(aligner_.Usable(kPressure, 100.0));
  // A bad reading is accepted (it is newer), counted and flagged, but never
  // replaces the last good value, which stays in use until it is stale: one
  // bad sample must not take a boundary meter (and so the segment) out.
  EXPECT_EQ(aligner_.Feed(At(kPressure, 102.0, 0.0, Quality::kBad)), FeedStatus::kAccepted);
  EXPECT_TRUE(aligner_.held(kPressure).has_value);
  EXPECT_EQ(aligner_.held(kPressure).quality, Quality::kBad);
  EXPECT_DOUBLE_EQ(aligner_.value(kPressure), 20.0e5 + kAtm_pa);  // still 20 bar gauge
  EXPECT_TRUE(aligner_.Usable(kPressure, 102.0));
  EXPECT_NE(aligner_.Dq(kPressure, 102.0) & kDqBadQuality, 0);
  EXPECT_EQ(aligner_.counters().bad_quality, 1u);
  EXPECT_EQ(aligner_.counters().accepted, 2u);
  // Uncertain is usable and clears the flag.
  EXPECT_EQ(aligner_.Feed(At(kPressure, 104.0, 20.1, Quality::kUncertain)), FeedStatus::kAccepted);
  EXPECT_TRUE(aligner_.Usable(kPressure, 104.0));
  EXPECT_EQ(aligner_.Dq(kPressure, 104.0), 0);
  EXPECT_EQ(aligner_.Feed(At(kPressure, 106.0, 20.2)), FeedStatus::kAccepted);
  EXPECT_TRUE(aligner_.Usable(kPressure, 106.0));
  EXPECT_EQ(aligner_.counters().bad_quality, 1u);
  // Only bad readings from then on: the held value ages out at the
  // staleness limit (30 s after the last good one, t = 106).
  aligner_.SetTickTime(120.0);
  EXPECT_EQ(aligner_.Feed(At(kPressure, 110.0, 0.0, Quality::kBad)), FeedStatus::kLate);
  EXPECT_EQ(aligner_.counters().bad_quality, 2u);
  EXPECT_EQ(aligner_.counters().late, 1u);
  EXPECT_TRUE(aligner_.Usable(kPressure, 120.0));
  EXPECT_TRUE(aligner_.Usable(kPressure, 136.0));
  EXPECT_FALSE(aligner_.Usable(kPressure, 136.5));
  EXPECT_NE(aligner_.Dq(kPressure, 136.5) & kDqStale, 0);
  EXPECT_EQ(PointDqNames(aligner_.Dq(kPressure, 136.5)), "bad_quality|stale");
}

// Frozen transmitters are found by evidence (the point's own learnt noise),
// never by a steady value: a closed meter at zero, or a quantised value that
// rarely changes, stays healthy for any length of time. The repeat count is
// the geometric-run argument (1 - p)^n < P for independent readings that
// change with probability p (hand arithmetic).
TEST_F(AlignerTest, FrozenNeedsEvidenceOfNoise) {
  double t = 0.0;
  // A noisy pressure: every reading differs (change share -> 1).
  for (int i = 0; i < 300; ++i, t += 1.0) aligner_.Feed(At(kPressure, t, 20.0 + 0.001 * (i % 7) + 0.0001 * i));
  EXPECT_EQ(aligner_.Dq(kPressure, t), 0);
  EXPECT_GT(aligner_.held(kPressure).change_share, 0.9);
  // It sticks: the default needs max(12, ln 1e-9 / ln(1 - p)) repeats, 12 here.
  for (int i = 0; i < 11; ++i, t += 1.0) aligner_.Feed(At(kPressure, t, 30.0));
  EXPECT_EQ(aligner_.Dq(kPressure, t) & kDqFlatline, 0);  // 10 repeats so far
  for (int i = 0; i < 3; ++i, t += 1.0) aligner_.Feed(At(kPressure, t, 30.0));
  EXPECT_NE(aligner_.Dq(kPressure, t) & kDqFlatline, 0);
  EXPECT_TRUE(aligner_.Usable(kPressure, t));  // flagged, still in use
  aligner_.Feed(At(kPressure, t, 30.01));
  EXPECT_EQ(aligner_.Dq(kPressure, t) & kDqFlatline, 0);  // it moved again

  // A meter that closes reads exactly zero for a day: healthy.
  double u = 0.0;
  for (int i = 0; i < 300; ++i, u += 1.0) aligner_.Feed(At(kFlow, u, 700.0 + 0.37 * (i % 11)));
  for (int i = 0; i < 86400; i += 5, u += 5.0) aligner_.Feed(At(kFlow, u, 0.0));
  EXPECT_EQ(aligner_.Dq(kFlow, u), 0);
  EXPECT_TRUE(aligner_.Usable(kFlow, u));

  // A coarse temperature that changes on one reading in ten: never frozen,
  // not even after a week of one value (it never showed it was noisy).
  double v = 0.0;
  for (int i = 0; i < 2000; ++i, v += 10.0) aligner_.Feed(At(kTemperature, v, 15.0 + (i / 10) % 2 * 0.1));
  for (int i = 0; i < 60480; ++i, v += 10.0) aligner_.Feed(At(kTemperature, v, 15.0));
  EXPECT_EQ(aligner_.Dq(kTemperature, v), 0);
}

// --- Spike check (DataQualityOptions::spike_*): one-sample confirmation. ---

// Standard normal deviates by the Marsaglia & Bray (1964) polar method from a
// fixed mt19937_64 stream, so the runs below are the same on every platform.
class Normal01 {
 public:
  explicit Normal01(uint64_t seed) : rng_(seed) {}
  double operator()() {
    if (has_spare_) {
      has_spare_ = false;
      return spare_;
    }
    double u, v, s;
    do {
      u = 2.0 * Uniform() - 1.0;
      v = 2.0 * Uniform() - 1.0;
      s = u * u + v * v;
    } while (s >= 1.0 || s == 0.0);
    const double f = std::sqrt(-2.0 * std::log(s) / s);
    spare_ = v * f;
    has_spare_ = true;
    return u * f;
  }

 private:
  double Uniform() { return static_cast<double>(rng_() >> 11) * 0x1.0p-53; }
  std::mt19937_64 rng_;
  double spare_ = 0.0;
  bool has_spare_ = false;
};

// A 0-100 bar gauge pressure (range in SI, as the config compiler sets it)
// with 0.02 bar of noise, as the demo line's transmitters: 8 sigma = 0.16 bar
// is below the range term 0.2 % x 100 bar = 0.2 bar, which sets the threshold.
class SpikeTest : public AlignerTest {
 protected:
  void SetUp() override {
    site_ = SmallSite();
    site_.points[kPressure].range_min = kAtm_pa;
    site_.points[kPressure].range_max = kAtm_pa + 100e5;
    aligner_.Reset(site_);
    for (int i = 0; i < 300; ++i) Next(50.0 + 0.02 * noise_());
  }
  FeedStatus Next(double bar) { return aligner_.Feed(At(kPressure, t_ += 2.0, bar)); }
  double Bar() const { return (aligner_.value(kPressure) - kAtm_pa) / 1e5; }
  double t_ = 0.0;
  Normal01 noise_{2026};
};

TEST_F(SpikeTest, SpikeIsDroppedAndFlagged) {
  const double before = Bar();
  // A 2 bar spike (the demo's fault): held back, the old value stands.
  EXPECT_EQ(Next(52.0), FeedStatus::kAccepted);
  const double spike_t = t_;
  EXPECT_DOUBLE_EQ(Bar(), before);
  EXPECT_EQ(aligner_.counters().held_back, 1u);
  EXPECT_EQ(aligner_.counters().spike, 0u);
  EXPECT_EQ(aligner_.Dq(kPressure, t_) & kDqSpike, 0);
  // The next reading is back at the old level: the spike is dropped, flagged,
  // and the point stays in use.
  Next(50.01);
  EXPECT_NEAR(Bar(), 50.01, 1e-9);
  EXPECT_EQ(aligner_.counters().spike, 1u);
  EXPECT_EQ(aligner_.Dq(kPressure, t_), kDqSpike);
  EXPECT_EQ(PointDqNames(aligner_.Dq(kPressure, t_)), "spike");
  EXPECT_TRUE(aligner_.Usable(kPressure, t_));
  EXPECT_EQ(aligner_.held(kPressure).spikes, 1u);
  EXPECT_DOUBLE_EQ(aligner_.held(kPressure).first_spike_s, spike_t);
  EXPECT_DOUBLE_EQ(aligner_.held(kPressure).last_spike_s, spike_t);
  // The flag is the latest reading's: the next one clears it.
  Next(49.99);
  EXPECT_EQ(aligner_.Dq(kPressure, t_), 0);
  // A negative spike the same way.
  Next(47.5);
  Next(50.0);
  EXPECT_EQ(aligner_.counters().spike, 2u);
  EXPECT_EQ(aligner_.counters().held_back, 2u);
}

TEST_F(SpikeTest, RealStepIsTakenOneReadingLate) {
  // A step of 3 bar: the first reading at the new level is held back ...
  Next(53.0);
  EXPECT_LT(Bar(), 50.5);
  // ... and the second confirms it: both are taken, no spike.
  Next(53.01);
  EXPECT_NEAR(Bar(), 53.01, 1e-9);
  EXPECT_EQ(aligner_.counters().held_back, 1u);
  EXPECT_EQ(aligner_.counters().spike, 0u);
  EXPECT_EQ(aligner_.Dq(kPressure, t_), 0);
  // The new level is learnt as any other: noise around it passes.
  for (int i = 0; i < 100; ++i) Next(53.0 + 0.02 * noise_());
  EXPECT_EQ(aligner_.counters().held_back, 1u);
  // A ramp of 0.5 bar a reading is taken one reading late all along.
  for (int i = 1; i <= 10; ++i) {
    Next(53.0 + 0.5 * i);
    if (i > 1) {
      EXPECT_NEAR(Bar(), 53.0 + 0.5 * (i - 1), 1e-9) << i;
    }
  }
  EXPECT_EQ(aligner_.counters().spike, 0u);
}

TEST_F(SpikeTest, ThresholdIsTheLargerOfNoiseAndRange) {
  // 0.15 bar is below the 0.2 bar range term: taken at once.
  Next(50.15);
  EXPECT_NEAR(Bar(), 50.15, 1e-9);
  Next(50.0);
  EXPECT_EQ(aligner_.counters().held_back, 0u);
  // 0.25 bar is above it: held back.
  Next(50.25);
  EXPECT_EQ(aligner_.counters().held_back, 1u);
}

TEST_F(SpikeTest, UnconfirmedJumpIsTakenAfterTheHoldLimit) {
  // A report-by-exception point may send nothing after a step: the held-back
  // reading is taken at the first tick more than spike_hold_max_s (30 s) later.
  Next(55.0);
  aligner_.SetTickTime(t_ + 20.0);
  EXPECT_LT(Bar(), 50.5);
  aligner_.SetTickTime(t_ + 31.0);
  EXPECT_NEAR(Bar(), 55.0, 1e-9);
  EXPECT_DOUBLE_EQ(aligner_.held(kPressure).time_s, t_);
  EXPECT_EQ(aligner_.counters().spike, 0u);
}

TEST_F(SpikeTest, BadQualityInBetweenLeavesTheHeldBackReading) {
  Next(52.0);
  aligner_.Feed(At(kPressure, t_ += 2.0, 0.0, Quality::kBad));
  Next(50.0);
  EXPECT_EQ(aligner_.counters().spike, 1u);
}

TEST(SpikeOptions, DefaultsAreValidAndBadValuesNamed) {
  DataQualityOptions o;
  std::string why;
  EXPECT_TRUE(o.IsValid(&why)) << why;
  o.spike_sigmas = 0.5;
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("spike_sigmas"), std::string::npos);
  o = DataQualityOptions{};
  o.spike_range_fraction = -0.1;
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("spike_range_fraction"), std::string::npos);
  o = DataQualityOptions{};
  o.spike_hold_max_s = 0.0;
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("spike_hold_max_s"), std::string::npos);
}

// Held-back readings on white Gaussian noise, against the normal tail. The
// check compares |v - last good| with k learnt sigmas; v - last good is the
// difference of two independent N(0, sigma^2) values, N(0, 2 sigma^2), so
// P(held back) = 2 Q(k / sqrt 2) = erfc(k / 2): erfc(2) = 0.0046777349810 for
// k = 4 and erfc(4) = 1.5417257900e-08 for k = 8 (Abramowitz & Stegun 1964,
// eq. 7.1.2 and table 7.1; the same from scipy.special.erfc and Python's
// math.erfc). A level in mm without a range, so only the noise term counts.
uint64_t HeldBackOnNoise(const DataQualityOptions& dq, int readings, uint64_t* spikes) {
  Site site = SmallSite();
  Aligner a;
  a.Reset(site, dq);
  Normal01 n01(20261205);
  for (int i = 0; i < readings; ++i) a.Feed(At(kLevel, 1.0 + i, 5000.0 + n01()));
  *spikes = a.counters().spike;
  return a.counters().held_back;
}

TEST(SpikeOnNoise, FalseTripRateFollowsTheNormalTail) {
  constexpr int kReadings = 1000000;
  // k = 4, long learning (so the learnt sigma is close to the true one):
  // 4677.7 expected, Poisson sd 68; 10 % allows the learnt sigma's own
  // scatter and the clipping of |d| at the threshold (about 0.2 % low).
  DataQualityOptions four;
  four.spike_sigmas = 4.0;
  four.spike_learning_readings = 5000.0;
  uint64_t spikes = 0;
  const double held = static_cast<double>(HeldBackOnNoise(four, kReadings, &spikes));
  const double expected = kReadings * 0.0046777349810;  // erfc(2)
  EXPECT_NEAR(held, expected, 0.10 * expected);
  // Default k = 8: 0.015 expected in a million readings; P(3 or more) for a
  // Poisson mean of 0.015 is 5.6e-7. Noise never trips it.
  DataQualityOptions deflt;
  const uint64_t held8 = HeldBackOnNoise(deflt, kReadings, &spikes);
  EXPECT_LE(held8, 2u);
  EXPECT_EQ(spikes, 0u);
  std::printf("held back on 1e6 Gaussian readings: k=4 %.0f (erfc(2) x 1e6 = %.1f), k=8 %llu\n", held, expected,
              static_cast<unsigned long long>(held8));
}

TEST_F(AlignerTest, ResetForgetsEverything) {
  ASSERT_EQ(aligner_.Feed(At(kFlow, 100.0, 900.0)), FeedStatus::kAccepted);
  aligner_.Feed(At(kFlow, 90.0, 900.0));
  aligner_.SetTickTime(200.0);
  aligner_.Reset(site_);
  EXPECT_FALSE(aligner_.held(kFlow).has_value);
  EXPECT_EQ(aligner_.counters().accepted, 0u);
  EXPECT_EQ(aligner_.counters().out_of_order, 0u);
  // The tick time is forgotten too: an early reading is not late.
  EXPECT_EQ(aligner_.Feed(At(kFlow, 50.0, 900.0)), FeedStatus::kAccepted);
}

TEST(AlignerNames, StatusAndQualityNames) {
  EXPECT_STREQ(FeedStatusName(FeedStatus::kAccepted), "accepted");
  EXPECT_STREQ(FeedStatusName(FeedStatus::kLate), "late");
  EXPECT_STREQ(FeedStatusName(FeedStatus::kOutOfOrder), "out_of_order");
  EXPECT_STREQ(FeedStatusName(FeedStatus::kDuplicate), "duplicate");
  EXPECT_STREQ(FeedStatusName(FeedStatus::kUnknownPoint), "unknown_point");
  EXPECT_STREQ(FeedStatusName(FeedStatus::kNotFinite), "not_finite");
  EXPECT_STREQ(QualityName(Quality::kGood), "good");
  EXPECT_STREQ(QualityName(Quality::kUncertain), "uncertain");
  EXPECT_STREQ(QualityName(Quality::kBad), "bad");
}

}  // namespace
}  // namespace holdfast
