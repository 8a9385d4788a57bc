#include "journal.h"

#include <unistd.h>

#include <cstdio>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <string>

#include <gtest/gtest.h>

#include "tick_scheduler.h"

namespace holdfast::daemon {
namespace {

std::string TempDir(const std::string& name) {
  const std::string d = std::filesystem::temp_directory_path().string() + "/holdfast-journal-" + name + "-" +
                        std::to_string(::getpid());
  std::filesystem::remove_all(d);
  return d;
}

JournalRecord Rec(uint64_t seq) { return JournalRecord{seq, "p/events/QS-1", "{\"seq\":" + std::to_string(seq) + "}"}; }

TEST(Journal, Crc32KnownValue) {
  // The CRC-32 check value of "123456789" (from memory; the standard check value of CRC-32/IEEE).
  EXPECT_EQ(Crc32("123456789"), 0xCBF43926u);
}

TEST(Journal, AppendReopenRetireInOrder) {
  const std::string dir = TempDir("basic");
  Journal::Options o;
  o.dir = dir;
  {
    Journal j;
    std::string why;
    ASSERT_TRUE(j.Open(o, &why)) << why;
    ASSERT_TRUE(j.Append({Rec(1), Rec(2), Rec(3)}, &why)) << why;
    EXPECT_FALSE(j.Append({Rec(3)}, &why));  // not above the last
    ASSERT_TRUE(j.Retire(2, &why));           // out of order: marker stays
    EXPECT_EQ(j.acked_through(), 0u);
    EXPECT_EQ(j.pending_count(), 3u);
  }
  Journal j;
  std::string why;
  ASSERT_TRUE(j.Open(o, &why)) << why;
  ASSERT_EQ(j.pending_count(), 3u);  // the out-of-order ack was not durable: published again
  EXPECT_EQ(j.pending(0).seq, 1u);
  EXPECT_EQ(j.pending(2).payload, "{\"seq\":3}");
  ASSERT_TRUE(j.Retire(1, &why));
  ASSERT_TRUE(j.Retire(2, &why));
  EXPECT_EQ(j.acked_through(), 2u);
  EXPECT_EQ(j.pending_count(), 1u);
  Journal k;
  ASSERT_TRUE(k.Open(o, &why));
  ASSERT_EQ(k.pending_count(), 1u);
  EXPECT_EQ(k.pending(0).seq, 3u);
  EXPECT_EQ(k.max_seq(), 3u);
  std::filesystem::remove_all(dir);
}

TEST(Journal, TornAndDamagedTailsAreDropped) {
  const std::string dir = TempDir("torn");
  Journal::Options o;
  o.dir = dir;
  std::string why;
  {
    Journal j;
    ASSERT_TRUE(j.Open(o, &why));
    ASSERT_TRUE(j.Append({Rec(1), Rec(2)}, &why));
  }
  const std::string path = dir + "/events.journal";
  const auto size = std::filesystem::file_size(path);
  {
    std::ofstream f(path, std::ios::app);
    f << "J1 3 0000abcd 20 p/events/QS-1\t{\"se";  // a kill -9 in the middle of a write
  }
  {
    Journal j;
    ASSERT_TRUE(j.Open(o, &why)) << why;
    EXPECT_EQ(j.pending_count(), 2u);
    EXPECT_GT(j.dropped_tail_bytes(), 0u);
    EXPECT_EQ(std::filesystem::file_size(path), size);
    ASSERT_TRUE(j.Append({Rec(3)}, &why));
  }
  // Flip one byte of the last record's payload: its checksum fails.
  {
    std::fstream f(path, std::ios::in | std::ios::out);
    f.seekp(static_cast<std::streamoff>(std::filesystem::file_size(path) - 3));
    f.put('9');
  }
  Journal j;
  ASSERT_TRUE(j.Open(o, &why));
  EXPECT_EQ(j.pending_count(), 2u);
  EXPECT_EQ(j.max_seq(), 2u);
  std::filesystem::remove_all(dir);
}

TEST(Journal, CompactionKeepsOnlyPending) {
  const std::string dir = TempDir("compact");
  Journal::Options o;
  o.dir = dir;
  o.compact_after = 4;
  o.history_bytes = 0;  // no history: retired records leave the file
  Journal j;
  std::string why;
  ASSERT_TRUE(j.Open(o, &why));
  for (uint64_t s = 1; s <= 10; ++s) ASSERT_TRUE(j.Append({Rec(s)}, &why));
  for (uint64_t s = 1; s <= 8; ++s) ASSERT_TRUE(j.Retire(s, &why));
  EXPECT_GE(j.compactions(), 2u);
  Journal k;
  ASSERT_TRUE(k.Open(o, &why));
  ASSERT_EQ(k.pending_count(), 2u);
  EXPECT_EQ(k.pending(0).seq, 9u);
  EXPECT_EQ(k.max_seq(), 10u);
  std::filesystem::remove_all(dir);
}

TEST(Journal, HistoryKeepsRetiredRecordsForReplayBySequence) {
  const std::string dir = TempDir("history");
  Journal::Options o;
  o.dir = dir;
  o.compact_after = 2;
  o.history_s = 100.0;
  Journal j;
  std::string why;
  ASSERT_TRUE(j.Open(o, &why)) << why;
  for (uint64_t s = 1; s <= 10; ++s) {
    JournalRecord r = Rec(s);
    r.appended_s = 1000.0 + static_cast<double>(s);
    ASSERT_TRUE(j.Append({r}, &why)) << why;
  }
  for (uint64_t s = 1; s <= 8; ++s) ASSERT_TRUE(j.Retire(s, &why));
  EXPECT_EQ(j.pending_count(), 2u);
  EXPECT_EQ(j.history_count(), 8u);
  std::vector<JournalRecord> got;
  EXPECT_EQ(j.Since(5, 100, &got), 6u);  // 5..8 retired, 9..10 pending
  ASSERT_EQ(got.size(), 6u);
  EXPECT_EQ(got.front().seq, 5u);
  EXPECT_EQ(got.back().seq, 10u);
  EXPECT_EQ(got.front().payload, "{\"seq\":5}");
  got.clear();
  EXPECT_EQ(j.Since(1, 3, &got), 3u);  // at most max_count
  // From the file after a restart, history included.
  Journal k;
  ASSERT_TRUE(k.Open(o, &why)) << why;
  EXPECT_EQ(k.oldest_kept_seq(), 1u);
  EXPECT_EQ(k.pending_count(), 2u);
  // An event appended 200 s later pushes everything older than 100 s out.
  JournalRecord late = Rec(11);
  late.appended_s = 1210.0;
  ASSERT_TRUE(k.Append({late}, &why));
  ASSERT_TRUE(k.Retire(9, &why));
  EXPECT_EQ(k.history_count(), 0u);  // 1..9 appended more than 100 s before 11
  EXPECT_EQ(k.oldest_kept_seq(), 10u);
  // The byte budget: two records' worth.
  std::filesystem::remove_all(dir);
  o.history_s = 1e9;
  o.history_bytes = 2 * (Rec(1).topic.size() + Rec(1).payload.size());
  Journal b;
  ASSERT_TRUE(b.Open(o, &why)) << why;
  for (uint64_t s = 1; s <= 6; ++s) ASSERT_TRUE(b.Append({Rec(s)}, &why));
  for (uint64_t s = 1; s <= 6; ++s) ASSERT_TRUE(b.Retire(s, &why));
  EXPECT_EQ(b.history_count(), 2u);
  EXPECT_EQ(b.oldest_kept_seq(), 5u);
  std::filesystem::remove_all(dir);
}

TEST(Journal, ReadsRecordsOfTheFirstFormat) {
  const std::string dir = TempDir("j1");
  std::filesystem::create_directories(dir);
  {
    std::ofstream f(dir + "/events.journal");
    const std::string body = "p/events/QS-1\t{\"seq\":1}";
    char crc[16];
    std::snprintf(crc, sizeof crc, "%08x", Crc32(body));
    f << "J1 1 " << crc << " " << body.size() << " " << body << "\n";
  }
  Journal::Options o;
  o.dir = dir;
  Journal j;
  std::string why;
  ASSERT_TRUE(j.Open(o, &why)) << why;
  ASSERT_EQ(j.pending_count(), 1u);
  EXPECT_EQ(j.pending(0).payload, "{\"seq\":1}");
  EXPECT_EQ(j.dropped_tail_bytes(), 0u);
  std::filesystem::remove_all(dir);
}

TEST(TickScheduler, ReordersAndTicksBehindTheWatermark) {
  TickScheduler s;
  TickScheduler::Options o;
  o.tick_s = 1.0;
  o.lateness_s = 2.0;
  s.Init(o);
  std::vector<std::string> trace;
  auto feed = [&](const Reading& r) { trace.push_back("f" + std::to_string(static_cast<int>(r.time_s * 10))); };
  auto adv = [&](double t) { trace.push_back("t" + std::to_string(static_cast<int>(t * 10))); };
  Reading r;
  r.time_s = 100.5;
  s.Add(r);
  r.time_s = 100.2;  // out of order, inside the lateness
  s.Add(r);
  s.Release(feed, adv);
  EXPECT_TRUE(trace.empty());  // nothing older than the watermark yet
  r.time_s = 103.0;
  s.Add(r);
  s.Release(feed, adv);  // watermark 101: readings 100.2, 100.5, tick 101
  EXPECT_EQ(trace, (std::vector<std::string>{"f1002", "f1005", "t1010"}));
  trace.clear();
  s.Flush(feed, adv);
  EXPECT_EQ(trace, (std::vector<std::string>{"t1020", "f1030", "t1030"}));
}

TEST(TickScheduler, ResumeDropsOldReadingsAndJumpsGaps) {
  TickScheduler s;
  TickScheduler::Options o;
  o.lateness_s = 0.0;
  o.max_gap_s = 10.0;
  s.Init(o, /*resume_after_s=*/100.0);
  int ticks = 0;
  double first = 0;
  auto feed = [](const Reading&) {};
  auto adv = [&](double t) {
    if (ticks++ == 0) first = t;
  };
  Reading r;
  EXPECT_EQ(s.last_tick_s(), 100.0);  // data time resumes at the checkpointed tick
  r.time_s = 99.0;
  s.Add(r);
  EXPECT_EQ(s.dropped_before_resume(), 1u);
  r.time_s = 100.5;
  s.Add(r);
  r.time_s = 101.5;
  s.Add(r);
  s.Release(feed, adv);
  EXPECT_EQ(first, 101.0);  // the first tick after the checkpointed one
  r.time_s = 1.0e6;
  s.Add(r);
  s.Release(feed, adv);
  EXPECT_EQ(s.gaps_jumped(), 1u);
  EXPECT_LT(ticks, 20);
  EXPECT_EQ(s.last_tick_s(), 1.0e6);
}

// The lead guard: a reading stamped far ahead of data time is quarantined and
// never moves the clock; readings of two points agreeing on a new time do.
TEST(TickScheduler, LeadGuardQuarantinesAFutureReadingAndFollowsAConsensus) {
  TickScheduler s;
  TickScheduler::Options o;
  o.lateness_s = 2.0;
  o.max_lead_s = 60.0;
  o.quorum_points = 2;
  s.Init(o);
  int ticks = 0;
  auto feed = [](const Reading&) {};
  auto adv = [&](double) { ++ticks; };
  auto add = [&](int point, double t) {
    Reading r;
    r.point = point;
    r.time_s = t;
    s.Add(r);
    s.Release(feed, adv);
  };
  // Cold start: a lone first reading from a bad clock does not set the clock.
  add(0, 253402300799.0);  // 9999-12-31T23:59:59Z
  EXPECT_TRUE(std::isnan(s.newest_s()));
  add(1, 1000.0);
  add(2, 1000.2);  // two points agree: data time starts at 1000
  EXPECT_DOUBLE_EQ(s.newest_s(), 1000.2);
  for (int k = 1; k <= 100; ++k) {
    add(1, 1000.0 + k);
    add(2, 1000.0 + k);
  }
  EXPECT_DOUBLE_EQ(s.newest_s(), 1100.0);
  // One point 5 minutes ahead, one three months ahead: quarantined.
  add(1, 1400.0);
  add(2, 1100.0 + 92 * 86400.0);
  EXPECT_DOUBLE_EQ(s.newest_s(), 1100.0);
  EXPECT_EQ(s.quarantined() - s.quarantine_released(), 3u);  // with the year-9999 reading
  EXPECT_LT(ticks, 110);
  // The feed goes on; the future readings never fed, the ticks follow the feed.
  for (int k = 101; k <= 400; ++k) add(2, 1000.0 + k);
  EXPECT_DOUBLE_EQ(s.newest_s(), 1400.0);
  EXPECT_EQ(s.quarantine_released(), 2u);  // only the two readings of the cold start
  // A real jump (the feed resumes after an hour): one reading per point.
  add(1, 5000.0);
  EXPECT_DOUBLE_EQ(s.newest_s(), 1400.0);
  add(2, 5000.5);
  EXPECT_DOUBLE_EQ(s.newest_s(), 5000.5);
  EXPECT_EQ(s.clock_jumps(), 2u);
}

TEST(TickScheduler, IdleAdvanceTicksOnWithoutReadings) {
  TickScheduler s;
  TickScheduler::Options o;
  o.lateness_s = 2.0;
  s.Init(o);
  std::vector<double> ticks;
  auto feed = [](const Reading&) {};
  auto adv = [&](double t) { ticks.push_back(t); };
  s.AdvanceIdle(50.0, feed, adv);  // nothing before the first reading
  EXPECT_TRUE(ticks.empty());
  Reading r;
  r.time_s = 10.0;
  s.Add(r);
  s.Release(feed, adv);
  EXPECT_TRUE(ticks.empty());
  s.AdvanceIdle(15.0, feed, adv);
  ASSERT_EQ(ticks.size(), 6u);  // 10 .. 15
  EXPECT_DOUBLE_EQ(s.last_tick_s(), 15.0);
}

}  // namespace
}  // namespace holdfast::daemon
