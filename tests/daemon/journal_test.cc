#include "journal.h"

#include <unistd.h>

#include <cstdio>
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

JournalRecord Rec(uint64_t seq) { return JournalRecord{seq, "p/events/KR-1", "{\"seq\":" + std::to_string(seq) + "}"}; }

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
    f << "J1 3 0000abcd 20 p/events/KR-1\t{\"se";  // a kill -9 in the middle of a write
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

}  // namespace
}  // namespace holdfast::daemon
