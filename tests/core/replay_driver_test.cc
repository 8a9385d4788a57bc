// The shared tick loop (replay_driver.h): tick alignment, which tick a reading
// belongs to, start/until, stopping from the callback, events delivered in
// order right after their tick, the same results as the loop `holdfast
// balance` used to run, and the CSV reader as a source.
#include "replay_driver.h"

#include <unistd.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <string>
#include <utility>
#include <vector>

#include <gtest/gtest.h>

#include "holdfast/monitor.h"
#include "readings_csv.h"
#include "test_site.h"

namespace holdfast {
namespace {

using testing::GenericLiquid;
using testing::Steel;
using testing::TwoEndSite;

class VectorSource final : public ReadingSource {
 public:
  explicit VectorSource(std::vector<Reading> readings) : readings_(std::move(readings)) {}
  bool Next(Reading* r) override {
    if (next_ >= readings_.size()) return false;
    *r = readings_[next_++];
    return true;
  }
  uint64_t bytes_read() const override { return next_; }
  size_t consumed() const { return next_; }

 private:
  std::vector<Reading> readings_;
  size_t next_ = 0;
};

struct Line {
  Site site;
  int in = -1, out = -1, p0 = -1, pl = -1, t0 = -1, tl = -1;
};

Line MakeLine() {
  Line l;
  l.site = TwoEndSite(GenericLiquid(1000.0, 2.2e9, 2.1e-4), {Steel(10000.0, 0.3239, 0.0079)}, 500.0);
  for (auto& p : l.site.points) p.staleness_s = 30.0;
  l.in = l.site.FindPoint("in");
  l.out = l.site.FindPoint("out");
  l.p0 = l.site.FindPoint("p0");
  l.pl = l.site.FindPoint("pL");
  l.t0 = l.site.FindPoint("t0");
  l.tl = l.site.FindPoint("tL");
  return l;
}

// One full set of readings at time t (inflow q_in, the outlet only if alive).
void AddSet(const Line& l, double t, double q_in, bool out_alive, std::vector<Reading>* v) {
  v->push_back({l.in, t, q_in, Quality::kGood});
  if (out_alive) v->push_back({l.out, t, 100.0, Quality::kGood});
  v->push_back({l.p0, t, 40e5, Quality::kGood});
  v->push_back({l.pl, t, 38e5, Quality::kGood});
  v->push_back({l.t0, t, 288.15, Quality::kGood});
  v->push_back({l.tl, t, 288.15, Quality::kGood});
}

TEST(ReplayDriver, FirstTickIsTheCeilingAndAReadingBelongsToTheFirstTickAtOrAfterIt) {
  const Line l = MakeLine();
  Monitor m;
  ASSERT_TRUE(m.Init(l.site, nullptr));
  std::vector<Reading> v;
  AddSet(l, 100.3, 100.0, true, &v);
  v.push_back({l.in, 100.7, 110.0, Quality::kGood});  // -> tick 101
  v.push_back({l.in, 101.0, 120.0, Quality::kGood});  // exactly on a tick -> tick 101
  v.push_back({l.in, 101.2, 130.0, Quality::kGood});  // -> tick 102
  v.push_back({l.in, 104.5, 140.0, Quality::kGood});  // -> tick 105, but it is the last reading
  VectorSource source(v);
  std::vector<std::pair<double, double>> seen;  // tick time, inflow the tick used
  ReplayOptions options;
  options.on_tick = [&](double t) {
    EXPECT_EQ(m.segment(0).time_s, t);
    seen.emplace_back(t, m.segment(0).inflow_kg_s);
    return true;
  };
  const ReplayResult r = RunReplay(&m, &source, 1.0, options);
  // Ticks 101..104: the grid starts at ceil(100.3) and stops at the last
  // tick at or before the latest reading (104.5); no tick covers 104.5.
  ASSERT_EQ(seen.size(), 4u) << r.ToString();
  EXPECT_EQ(seen[0], std::make_pair(101.0, 120.0));
  EXPECT_EQ(seen[1], std::make_pair(102.0, 130.0));
  EXPECT_EQ(seen[2], std::make_pair(103.0, 130.0));
  EXPECT_EQ(seen[3], std::make_pair(104.0, 130.0));
  EXPECT_EQ(r.ticks, 4u);
  EXPECT_EQ(r.readings_fed, v.size());
  EXPECT_EQ(r.first_tick_s, 101.0);
  EXPECT_EQ(r.last_tick_s, 104.0);
  EXPECT_FALSE(r.reached_until);
  EXPECT_FALSE(r.stopped);
  EXPECT_EQ(m.tick_count(), 4u);
}

TEST(ReplayDriver, ReadingOnTheFirstTickIsSeenByIt) {
  const Line l = MakeLine();
  Monitor m;
  ASSERT_TRUE(m.Init(l.site, nullptr));
  std::vector<Reading> v;
  AddSet(l, 200.0, 100.0, true, &v);
  AddSet(l, 201.0, 150.0, true, &v);
  VectorSource source(v);
  std::vector<std::pair<double, double>> seen;
  ReplayOptions options;
  options.on_tick = [&](double t) {
    seen.emplace_back(t, m.segment(0).inflow_kg_s);
    return true;
  };
  RunReplay(&m, &source, 1.0, options);
  ASSERT_EQ(seen.size(), 2u);
  EXPECT_EQ(seen[0], std::make_pair(200.0, 100.0));
  EXPECT_EQ(seen[1], std::make_pair(201.0, 150.0));  // the trailing tick at the last reading
}

TEST(ReplayDriver, TickGridDoesNotDriftForAnInexactTick) {
  const Line l = MakeLine();
  Monitor m;
  ASSERT_TRUE(m.Init(l.site, nullptr));
  std::vector<Reading> v;
  for (int k = 0; k <= 1000; ++k) AddSet(l, 1000.0 + k, 100.0, true, &v);
  VectorSource source(v);
  double last = 0.0;
  uint64_t n = 0;
  ReplayOptions options;
  options.on_tick = [&](double t) {
    // Tick k is ceil(1000 / 0.1) * 0.1 + k * 0.1, computed afresh each time.
    EXPECT_EQ(t, std::ceil(1000.0 / 0.1) * 0.1 + static_cast<double>(n) * 0.1);
    last = t;
    ++n;
    return true;
  };
  const ReplayResult r = RunReplay(&m, &source, 0.1, options);
  EXPECT_EQ(r.ticks, 10001u);  // 1000.0, 1000.1, ..., 2000.0
  EXPECT_NEAR(last, 2000.0, 1e-9);
}

TEST(ReplayDriver, StartSkipsAndUntilStopsReading) {
  const Line l = MakeLine();
  Monitor m;
  ASSERT_TRUE(m.Init(l.site, nullptr));
  std::vector<Reading> v;
  for (int k = 0; k <= 20; ++k) AddSet(l, 100.0 + 0.5 * k, 100.0 + k, true, &v);  // 100.0 .. 110.0
  VectorSource source(v);
  std::vector<double> ticks;
  ReplayOptions options;
  options.start_s = 103.2;
  options.until_s = 106.0;
  options.on_tick = [&](double t) {
    ticks.push_back(t);
    return true;
  };
  ASSERT_TRUE(options.IsValid(nullptr));
  const ReplayResult r = RunReplay(&m, &source, 1.0, options);
  // Fed: the sets at 103.5 .. 106.0 (6 sets of 6); skipped: 100.0 .. 103.0 (7 sets).
  EXPECT_EQ(r.readings_before_start, 7u * 6u);
  EXPECT_EQ(r.readings_fed, 6u * 6u);
  EXPECT_TRUE(r.reached_until);
  // Reading stopped at the first reading after until: nothing more consumed.
  EXPECT_EQ(source.consumed(), 13u * 6u + 1u);
  // First tick aligned on the first reading fed (103.5), last at 106.
  EXPECT_EQ(ticks, (std::vector<double>{104.0, 105.0, 106.0}));
  // The inflow at the last tick is the reading at 106.0 (k = 12), which is fed.
  EXPECT_EQ(m.segment(0).inflow_kg_s, 112.0);
}

TEST(ReplayDriver, OptionsSayWhatIsWrong) {
  ReplayOptions o;
  std::string why;
  EXPECT_TRUE(o.IsValid(&why));
  o.start_s = 200.0;
  o.until_s = 100.0;
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("before start_s"), std::string::npos) << why;
  o.until_s = INFINITY;
  EXPECT_FALSE(o.IsValid(&why));
  // Invalid options or tick: nothing runs.
  const Line l = MakeLine();
  Monitor m;
  ASSERT_TRUE(m.Init(l.site, nullptr));
  std::vector<Reading> v;
  AddSet(l, 100.0, 100.0, true, &v);
  VectorSource source(v);
  o.start_s = 200.0;
  o.until_s = 100.0;
  EXPECT_EQ(RunReplay(&m, &source, 1.0, o).ticks, 0u);
  EXPECT_EQ(RunReplay(&m, &source, 0.0, ReplayOptions{}).ticks, 0u);
  EXPECT_EQ(RunReplay(&m, &source, NAN, ReplayOptions{}).ticks, 0u);
  EXPECT_EQ(source.consumed(), 0u);
}

TEST(ReplayDriver, EmptySourceRunsNoTick) {
  const Line l = MakeLine();
  Monitor m;
  ASSERT_TRUE(m.Init(l.site, nullptr));
  VectorSource source({});
  const ReplayResult r = RunReplay(&m, &source, 1.0, ReplayOptions{});
  EXPECT_EQ(r.ticks, 0u);
  EXPECT_TRUE(std::isnan(r.first_tick_s));
  EXPECT_TRUE(std::isnan(r.last_tick_s));
}

TEST(ReplayDriver, OnTickFalseStopsTheRun) {
  const Line l = MakeLine();
  Monitor m;
  ASSERT_TRUE(m.Init(l.site, nullptr));
  std::vector<Reading> v;
  for (int k = 0; k < 100; ++k) AddSet(l, 100.0 + k, 100.0, true, &v);
  VectorSource source(v);
  int n = 0;
  ReplayOptions options;
  options.on_tick = [&](double) { return ++n < 3; };
  const ReplayResult r = RunReplay(&m, &source, 1.0, options);
  EXPECT_EQ(r.ticks, 3u);
  EXPECT_TRUE(r.stopped);
  EXPECT_EQ(m.tick_count(), 3u);
  EXPECT_LT(source.consumed(), v.size());
}

// A meter drops out and comes back: balance-unavailable and data-quality
// alarms rise and return. Events arrive oldest first, numbered without gaps,
// each before the on_tick of the tick that raised it, and the run matches
// the hand-written loop `holdfast balance` ran before the driver existed.
std::vector<Reading> DropoutReadings(const Line& l) {
  std::vector<Reading> v;
  for (int k = 0; k < 2000; ++k) AddSet(l, 1000.0 + k + 0.25, 100.0, k < 300 || k >= 500, &v);
  return v;
}

TEST(ReplayDriver, EventsArriveInOrderRightAfterTheirTick) {
  const Line l = MakeLine();
  Monitor m;
  ASSERT_TRUE(m.Init(l.site, nullptr));
  VectorSource source(DropoutReadings(l));
  std::vector<AlarmEvent> events;
  std::vector<std::pair<char, double>> log;  // 'E' event time, 'T' tick time
  ReplayOptions options;
  options.on_event = [&](const AlarmEvent& e) {
    events.push_back(e);
    log.emplace_back('E', e.time_s);
  };
  options.on_tick = [&](double t) {
    log.emplace_back('T', t);
    return true;
  };
  const ReplayResult r = RunReplay(&m, &source, 1.0, options);
  ASSERT_GE(events.size(), 4u) << r.ToString();  // two alarms raised, two returned
  EXPECT_EQ(r.events, events.size());
  for (size_t i = 0; i < events.size(); ++i) {
    EXPECT_EQ(events[i].seq, i + 1) << events[i].ToString();
    if (i > 0) {
      EXPECT_GE(events[i].time_s, events[i - 1].time_s);
    }
  }
  bool raised_unavailable = false, raised_dq = false;
  for (const AlarmEvent& e : events) {
    if (e.cause != AlarmCause::kConditionRaised) continue;
    raised_unavailable = raised_unavailable || e.type == AlarmType::kBalanceUnavailable;
    raised_dq = raised_dq || e.type == AlarmType::kDataQuality;
    EXPECT_GT(e.time_s, 1300.0);  // not before the meter went quiet
  }
  EXPECT_TRUE(raised_unavailable);
  EXPECT_TRUE(raised_dq);
  // Every event is followed by the on_tick of its own tick.
  for (size_t i = 0; i < log.size(); ++i) {
    if (log[i].first != 'E') continue;
    size_t j = i + 1;
    while (j < log.size() && log[j].first == 'E') ++j;
    ASSERT_LT(j, log.size());
    EXPECT_EQ(log[j].second, log[i].second);
  }

  // The loop of `holdfast balance` before the driver, written out by hand.
  Monitor ref;
  ASSERT_TRUE(ref.Init(l.site, nullptr));
  std::vector<AlarmEvent> ref_events;
  std::vector<double> ref_ticks;
  const std::vector<Reading> readings = DropoutReadings(l);
  double next_tick = 0.0, last_time = 0.0;
  bool started = false;
  auto do_tick = [&](double t) {
    ref.Advance(t);
    AlarmEvent e;
    while (ref.PopEvent(&e)) ref_events.push_back(e);
    ref_ticks.push_back(t);
  };
  for (const Reading& rd : readings) {
    if (!started) {
      next_tick = std::ceil(rd.time_s / 1.0) * 1.0;
      started = true;
    }
    while (rd.time_s > next_tick) {
      do_tick(next_tick);
      next_tick += 1.0;
    }
    ref.Feed(rd);
    if (rd.time_s > last_time) last_time = rd.time_s;
  }
  while (next_tick <= last_time + 1e-9) {
    do_tick(next_tick);
    next_tick += 1.0;
  }
  EXPECT_EQ(r.ticks, ref_ticks.size());
  EXPECT_EQ(r.first_tick_s, ref_ticks.front());
  EXPECT_EQ(r.last_tick_s, ref_ticks.back());
  ASSERT_EQ(events.size(), ref_events.size());
  for (size_t i = 0; i < events.size(); ++i) EXPECT_EQ(events[i].ToString(), ref_events[i].ToString());
  EXPECT_EQ(m.segment(0).ToString(), ref.segment(0).ToString());
}

TEST(ReplayDriver, CsvReaderAsSource) {
  const Line l = MakeLine();
  const std::filesystem::path path =
      std::filesystem::temp_directory_path() / ("holdfast_replay_driver_test_" + std::to_string(::getpid()) + ".csv");
  {
    std::ofstream f(path);
    f << "time,point,value,quality\n";
    for (int k = 0; k < 10; ++k) {
      const std::string t = FormatIsoUtc(1773468000.0 + k + 0.5, 3);
      f << t << ",in," << 100 + k << ",good\n" << t << ",out,100,good\n" << t << ",p0,4000000,\n"
        << t << ",pL,3800000,\n" << t << ",t0,288.15,\n" << t << ",tL,288.15,\n";
    }
  }
  ReadingsCsvReader reader;
  std::string why;
  ASSERT_TRUE(reader.Open(path.string(), l.site, &why)) << why;
  CsvReadingSource source(&reader);
  Monitor m;
  ASSERT_TRUE(m.Init(l.site, nullptr));
  const ReplayResult r = RunReplay(&m, &source, 1.0, ReplayOptions{});
  EXPECT_EQ(r.readings_fed, 60u);
  EXPECT_EQ(r.first_tick_s, 1773468001.0);
  EXPECT_EQ(r.last_tick_s, 1773468009.0);
  EXPECT_EQ(r.ticks, 9u);
  EXPECT_EQ(m.segment(0).inflow_kg_s, 108.0);  // the reading at :08.5 is the newest at :09
  EXPECT_EQ(source.bytes_read(), std::filesystem::file_size(path));
  std::filesystem::remove(path);
}

// With a reorder window (the daemon's scheduler): in-order readings give what
// the plain loop gives; readings out of order within the window give the same
// ticks as in order; a row stamped in year 9999 is quarantined by the lead
// guard and costs no tick (issue 11: it used to tick through every second).
TEST(ReplayDriver, ReorderWindowAndLeadGuard) {
  const Line l = MakeLine();
  std::vector<Reading> in_order;
  for (int k = 0; k < 200; ++k) AddSet(l, 1000.0 + k, k >= 100 ? 105.0 : 100.0, true, &in_order);
  auto run = [&](std::vector<Reading> v, double window, double lead, std::vector<double>* residuals) {
    Monitor m;
    EXPECT_TRUE(m.Init(l.site, nullptr));
    VectorSource src(std::move(v));
    ReplayOptions o;
    o.reorder_window_s = window;
    o.max_lead_s = lead;
    o.on_tick = [&](double) {
      residuals->push_back(m.segment(0).residual_kg_s);
      return true;
    };
    return RunReplay(&m, &src, 1.0, o);
  };
  std::vector<double> plain, sched, shuffled, future;
  const ReplayResult a = run(in_order, kNaN, 0.0, &plain);
  const ReplayResult b = run(in_order, 2.0, 60.0, &sched);
  EXPECT_EQ(a.ticks, b.ticks);
  EXPECT_EQ(a.readings_fed, b.readings_fed);
  EXPECT_EQ(plain, sched);
  // Swap neighbouring sets (1 s apart): within the 2 s window.
  std::vector<Reading> swapped = in_order;
  for (size_t i = 0; i + 12 <= swapped.size(); i += 12)
    std::rotate(swapped.begin() + static_cast<long>(i), swapped.begin() + static_cast<long>(i + 6),
                swapped.begin() + static_cast<long>(i + 12));
  run(swapped, 2.0, 60.0, &shuffled);
  EXPECT_EQ(shuffled, sched);
  // A year-9999 reading in the middle: quarantined, nothing else changes.
  std::vector<Reading> with_future = in_order;
  with_future.insert(with_future.begin() + 600, Reading{l.in, 253402300799.0, 100.0, Quality::kGood});
  const ReplayResult f = run(with_future, 2.0, 60.0, &future);
  EXPECT_EQ(f.quarantined, 1u);
  EXPECT_EQ(f.ticks, b.ticks);
  EXPECT_EQ(future, sched);
  EXPECT_NE(f.ToString().find("1 quarantined"), std::string::npos) << f.ToString();
}

}  // namespace
}  // namespace holdfast
