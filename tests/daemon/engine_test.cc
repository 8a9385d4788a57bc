// The engine without a broker: a fake link records what would be published.
#include "engine.h"

#include <unistd.h>

#include <algorithm>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <iterator>
#include <string>
#include <vector>

#include <gtest/gtest.h>

#include "readings_csv.h"

namespace holdfast::daemon {
namespace {

const std::string kSite = std::string(HOLDFAST_SOURCE_DIR) + "/config/demo/quillfen-site.json";
const std::string kReadings = std::string(HOLDFAST_SOURCE_DIR) + "/config/demo/quillfen-readings.csv";
constexpr double kAfterLeakAlarm_s = 1773476400.0 + 1200.0;  // 2026-03-14T08:20:00Z

class FakeLink final : public Link {
 public:
  bool up = true;
  std::vector<Publication> sent;
  bool Publish(const Publication& p) override {
    if (!up) return false;
    sent.push_back(p);
    return true;
  }
  std::vector<Publication> Events() const {
    std::vector<Publication> e;
    for (const Publication& p : sent)
      if (p.journal_seq > 0) e.push_back(p);
    return e;
  }
};

DaemonOptions Options(const std::string& dir) {
  DaemonOptions o;
  o.site_file = kSite;
  o.broker_uri = "tcp://127.0.0.1:1883";
  o.topic_prefix = "holdfast/v1/quillfen";
  o.journal_dir = dir + "/journal";
  o.state_dir = dir + "/state";
  o.operators = {"alice"};
  return o;
}

std::string TempDir(const std::string& name) {
  const std::string d = std::filesystem::temp_directory_path().string() + "/holdfast-engine-" + name + "-" +
                        std::to_string(::getpid());
  std::filesystem::remove_all(d);
  return d;
}

// Feeds the demo readings up to `until` through OnReading.
void FeedUntil(Engine* e, double until) {
  ReadingsCsvReader reader;
  std::string why;
  ASSERT_TRUE(reader.Open(kReadings, e->monitor().site(), &why)) << why;
  Reading r;
  while (reader.Next(&r) && r.time_s < until) {
    e->OnReading(r);
    e->Step();
  }
}

TEST(Engine, JournalFirstPublishOnConnectRetireOnAck) {
  const std::string dir = TempDir("backlog");
  FakeLink link;
  {
    Engine e;
    std::string why;
    ASSERT_TRUE(e.Init(Options(dir), nullptr, &why)) << why;
    e.SetLink(&link);  // not connected: nothing goes out
    FeedUntil(&e, kAfterLeakAlarm_s);
    ASSERT_EQ(e.counters().events, 1u);
    EXPECT_TRUE(link.Events().empty());
    ASSERT_EQ(e.journal().pending_count(), 1u);
    EXPECT_EQ(e.journal().pending(0).seq, 1u);
    EXPECT_EQ(e.journal().pending(0).topic, "holdfast/v1/quillfen/events/QS-1");
    // Connect, but the broker never acknowledges (it dies): the record stays.
    e.OnConnected(1.0);
    ASSERT_EQ(link.Events().size(), 1u);
    e.OnDisconnected();
  }
  // A restart: the backlog goes out again with its original number, and the
  // monitor's sequence continues after it.
  link.sent.clear();
  Engine e;
  std::string why;
  ASSERT_TRUE(e.Init(Options(dir), nullptr, &why)) << why;
  e.SetLink(&link);
  EXPECT_EQ(e.monitor().next_sequence(), 2u);
  EXPECT_EQ(e.monitor().alarm(0, AlarmType::kLeak).state(), AlarmState::kUnackActive);
  e.OnConnected(2.0);
  ASSERT_EQ(link.Events().size(), 1u);
  EXPECT_EQ(link.Events()[0].journal_seq, 1u);
  EXPECT_NE(link.Events()[0].payload.find("\"seq\":1,"), std::string::npos);
  e.OnAcked(1);
  e.Poll(3.0);  // the marker is written once per poll
  EXPECT_EQ(e.journal().pending_count(), 0u);
  EXPECT_EQ(e.journal().acked_through(), 1u);
  std::filesystem::remove_all(dir);
}

TEST(Engine, SequenceSurvivesALostCheckpoint) {
  const std::string dir = TempDir("seq");
  {
    Engine e;
    std::string why;
    ASSERT_TRUE(e.Init(Options(dir), nullptr, &why)) << why;
    FeedUntil(&e, kAfterLeakAlarm_s);
    ASSERT_EQ(e.journal().max_seq(), 1u);
  }
  // A crash between the journal append and the checkpoint write.
  std::filesystem::remove(dir + "/state/checkpoint.json");
  Engine e;
  std::string why;
  ASSERT_TRUE(e.Init(Options(dir), nullptr, &why)) << why;
  EXPECT_EQ(e.monitor().next_sequence(), 2u);
  std::filesystem::remove_all(dir);
}

TEST(Engine, CommandsAreCheckedAppliedAndAnswered) {
  const std::string dir = TempDir("commands");
  FakeLink link;
  Engine e;
  std::string why;
  ASSERT_TRUE(e.Init(Options(dir), nullptr, &why)) << why;
  e.SetLink(&link);
  e.OnConnected(1.0);
  // Before any data: refused, with a reply.
  e.OnMessage("holdfast/v1/quillfen/commands/alice",
              R"({"id":"c-0","segment":"QS-1","alarm":"leak","command":"acknowledge"})", 1.0);
  ASSERT_FALSE(link.sent.empty());
  EXPECT_EQ(link.sent.back().topic, "holdfast/v1/quillfen/replies/alice");
  EXPECT_NE(link.sent.back().payload.find("\"result\":\"rejected_not_ready\""), std::string::npos);
  FeedUntil(&e, kAfterLeakAlarm_s);
  e.OnMessage("holdfast/v1/quillfen/commands/mallory",
              R"({"id":"m-1","segment":"QS-1","alarm":"leak","command":"acknowledge"})", 2.0);
  EXPECT_NE(link.sent.back().payload.find("rejected_not_authorised"), std::string::npos);
  EXPECT_EQ(e.monitor().alarm(0, AlarmType::kLeak).state(), AlarmState::kUnackActive);
  e.OnMessage("holdfast/v1/quillfen/commands/alice",
              R"({"id":"c-1","segment":"QS-1","alarm":"leak","command":"shelve","duration_s":600})", 3.0);
  EXPECT_EQ(e.monitor().alarm(0, AlarmType::kLeak).state(), AlarmState::kShelved);
  EXPECT_NE(link.sent.back().payload.find("\"ok\":true"), std::string::npos) << link.sent.back().payload;
  const auto events = link.Events();
  ASSERT_EQ(events.size(), 2u);  // the raise, then the shelve
  EXPECT_NE(events[1].payload.find("\"cause\":\"shelved\""), std::string::npos);
  EXPECT_NE(events[1].payload.find("\"user\":\"alice\""), std::string::npos);
  EXPECT_EQ(e.counters().commands_rejected, 2u);
  std::filesystem::remove_all(dir);
}

// Events as JSON payloads, in order.
std::vector<std::string> EventPayloads(const FakeLink& link) {
  std::vector<std::string> v;
  for (const Publication& p : link.Events()) v.push_back(p.payload);
  return v;
}

// Issue 11, item 1: the feed stops (a fake wall clock, no broker); the
// watchdog declares it silent after the largest point staleness (60 s on the
// demo site) and ticks on with the wall clock, so that the core raises
// balance_unavailable within staleness + 10 s of the last reading.
TEST(Engine, DeadFeedRaisesBalanceUnavailableWithinStalenessPlus10s) {
  const std::string dir = TempDir("deadfeed");
  FakeLink link;
  Engine e;
  std::string why;
  ASSERT_TRUE(e.Init(Options(dir), nullptr, &why)) << why;
  e.SetLink(&link);
  const double wall0 = 1.0e9;
  e.OnConnected(wall0);
  EXPECT_DOUBLE_EQ(e.feed_silence_s(), 60.0);  // the demo site's largest staleness_s
  FeedUntil(&e, 1773468000.0 + 600.0);        // ten minutes of data, all at wall0
  e.Poll(wall0);
  ASSERT_EQ(e.counters().events, 0u);
  double alarm_wall = -1.0, silent_wall = -1.0;
  for (double w = wall0; w <= wall0 + 120.0 && alarm_wall < 0; w += 0.25) {
    e.Poll(w);
    if (silent_wall < 0 && e.feed_silent()) silent_wall = w;
    for (const std::string& ev : EventPayloads(link))
      if (ev.find("\"type\":\"balance_unavailable\"") != std::string::npos &&
          ev.find("\"cause\":\"condition_raised\"") != std::string::npos)
        alarm_wall = w;
  }
  ASSERT_GT(alarm_wall, 0.0) << "no balance_unavailable event";
  std::printf("dead feed: declared silent after %.2f s, balance_unavailable after %.2f s (limit %.0f + 10 s)\n",
              silent_wall - wall0, alarm_wall - wall0, e.feed_silence_s());
  EXPECT_LE(alarm_wall - wall0, e.feed_silence_s() + 10.0);
  EXPECT_GT(silent_wall - wall0, e.feed_silence_s());
  const std::string status = e.StatusJson("online", alarm_wall);
  EXPECT_NE(status.find("\"detail\":\"feed silent since "), std::string::npos) << status;
  EXPECT_NE(status.find("\"state\":\"silent\""), std::string::npos) << status;
  std::filesystem::remove_all(dir);
}

// The feed never comes back after a restart: the watchdog ticks on from the
// checkpointed tick, so the monitor is not silenced either.
TEST(Engine, DeadFeedAfterARestartTicksOnFromTheCheckpoint) {
  const std::string dir = TempDir("deadrestart");
  {
    Engine e;
    std::string why;
    ASSERT_TRUE(e.Init(Options(dir), nullptr, &why)) << why;
    FeedUntil(&e, 1773468000.0 + 600.0);
    ASSERT_TRUE(e.Checkpoint(&why)) << why;
  }
  FakeLink link;
  Engine e;
  std::string why;
  ASSERT_TRUE(e.Init(Options(dir), nullptr, &why)) << why;
  e.SetLink(&link);
  const double wall0 = 2.0e9;
  e.OnConnected(wall0);
  const double resumed = e.scheduler().last_tick_s();
  double alarm_wall = -1.0;
  for (double w = wall0; w <= wall0 + 300.0 && alarm_wall < 0; w += 0.5) {
    e.Poll(w);
    for (const std::string& ev : EventPayloads(link))
      if (ev.find("\"type\":\"balance_unavailable\"") != std::string::npos) alarm_wall = w;
  }
  EXPECT_TRUE(e.feed_silent());
  EXPECT_GT(e.scheduler().last_tick_s(), resumed + 60.0);
  ASSERT_GT(alarm_wall, 0.0) << "no balance_unavailable event";
  std::printf("dead feed after a restart: balance_unavailable after %.1f s\n", alarm_wall - wall0);
  std::filesystem::remove_all(dir);
}

// Issue 11, item 2: one reading stamped 5 minutes ahead and one 3 months
// ahead change nothing: the same events, byte for byte, as without them.
TEST(Engine, FutureStampedReadingsChangeNothing) {
  std::vector<std::string> runs[2];
  for (int k = 0; k < 2; ++k) {
    const std::string dir = TempDir("future" + std::to_string(k));
    FakeLink link;
    Engine e;
    std::string why;
    ASSERT_TRUE(e.Init(Options(dir), nullptr, &why)) << why;
    e.SetLink(&link);
    e.OnConnected(1.0);
    ReadingsCsvReader reader;
    ASSERT_TRUE(reader.Open(kReadings, e.monitor().site(), &why)) << why;
    Reading r;
    bool a = false, b = false;
    while (reader.Next(&r) && r.time_s < kAfterLeakAlarm_s) {
      e.OnReading(r);
      e.Step();
      if (k == 1 && !a && r.time_s >= 1773471600.0) {  // 07:00: a reading 5 minutes ahead
        Reading f = r;
        f.time_s += 300.0;
        e.OnReading(f);
        e.Step();
        a = true;
      }
      if (k == 1 && !b && r.time_s >= 1773473400.0) {  // 07:30: one 92 days ahead
        Reading f = r;
        f.time_s += 92 * 86400.0;
        e.OnReading(f);
        e.Step();
        b = true;
      }
    }
    runs[k] = EventPayloads(link);
    if (k == 1) {
      EXPECT_EQ(e.scheduler().quarantined() - e.scheduler().quarantine_released(), 2u);
      EXPECT_NE(e.StatusJson("online", 2.0).find("\"quarantined\":2"), std::string::npos);
    }
    std::filesystem::remove_all(dir);
  }
  ASSERT_FALSE(runs[0].empty());
  EXPECT_EQ(runs[0], runs[1]);
}

// Issue 11, item 4: a retained command is never applied, a repeated id is
// applied once (also across a restart), and a flood from one user is cut
// at its rate limit without delaying another user's command.
TEST(Engine, CommandsApplyExactlyOnce) {
  const std::string dir = TempDir("once");
  const std::string shelve = R"({"id":"c-1","segment":"QS-1","alarm":"rupture","command":"shelve","duration_s":600})";
  const std::string topic = "holdfast/v1/quillfen/commands/alice";
  {
    FakeLink link;
    Engine e;
    std::string why;
    ASSERT_TRUE(e.Init(Options(dir), nullptr, &why)) << why;
    e.SetLink(&link);
    e.OnConnected(100.0);
    FeedUntil(&e, 1773468000.0 + 300.0);
    e.OnMessage(topic, shelve, 100.0, /*retained=*/true);
    EXPECT_EQ(e.monitor().alarm(0, AlarmType::kRupture).state(), AlarmState::kNormal);
    EXPECT_EQ(e.counters().commands_retained_ignored, 1u);
    e.OnMessage(topic, shelve, 101.0);
    EXPECT_EQ(e.monitor().alarm(0, AlarmType::kRupture).state(), AlarmState::kShelved);
    e.OnMessage("holdfast/v1/quillfen/commands/alice",
                R"({"id":"c-2","segment":"QS-1","alarm":"rupture","command":"unshelve"})", 102.0);
    EXPECT_EQ(e.monitor().alarm(0, AlarmType::kRupture).state(), AlarmState::kNormal);
    e.OnMessage(topic, shelve, 103.0);  // c-1 again: not applied
    EXPECT_EQ(e.monitor().alarm(0, AlarmType::kRupture).state(), AlarmState::kNormal);
    EXPECT_NE(link.sent.back().payload.find("\"result\":\"ignored_duplicate\""), std::string::npos);
    EXPECT_EQ(e.counters().commands_applied, 2u);
    EXPECT_EQ(e.counters().commands_duplicate, 1u);
    // A flood of 2000 from mallory within a second: the burst gets through
    // (and is refused: not an operator); alice's next command still applies.
    for (int i = 0; i < 2000; ++i)
      e.OnMessage("holdfast/v1/quillfen/commands/mallory",
                  R"({"id":"m-)" + std::to_string(i) + R"(","segment":"QS-1","alarm":"leak","command":"acknowledge"})",
                  104.0 + i * 1e-4);
    EXPECT_EQ(e.counters().commands_rate_limited, 2000u - 10u);  // command_burst 10
    e.OnMessage(topic, R"({"id":"c-3","segment":"QS-1","alarm":"rupture","command":"shelve","duration_s":60})", 104.5);
    EXPECT_EQ(e.monitor().alarm(0, AlarmType::kRupture).state(), AlarmState::kShelved);
    const std::string audit = [&] {
      std::ifstream f(dir + "/state/audit.jsonl");
      return std::string(std::istreambuf_iterator<char>(f), {});
    }();
    EXPECT_NE(audit.find("\"result\":\"ignored_retained\""), std::string::npos);
    EXPECT_NE(audit.find("\"result\":\"ignored_duplicate\""), std::string::npos);
    EXPECT_LT(std::count(audit.begin(), audit.end(), '\n'), 20);  // the flood is not audited line by line
    e.OnMessage(topic, R"({"id":"c-4","segment":"QS-1","alarm":"rupture","command":"unshelve"})", 105.0);
    ASSERT_TRUE(e.Checkpoint(&why)) << why;
  }
  // A restart: c-1 re-sent (e.g. redelivered) is still a duplicate.
  FakeLink link;
  Engine e;
  std::string why;
  ASSERT_TRUE(e.Init(Options(dir), nullptr, &why)) << why;
  e.SetLink(&link);
  e.OnConnected(200.0);
  e.OnMessage(topic, shelve, 200.0);
  EXPECT_EQ(e.monitor().alarm(0, AlarmType::kRupture).state(), AlarmState::kNormal);
  EXPECT_EQ(e.counters().commands_duplicate, 1u);
  std::filesystem::remove_all(dir);
}

TEST(Engine, AuditLogRotates) {
  const std::string dir = TempDir("rotate");
  DaemonOptions o = Options(dir);
  o.audit_max_bytes = 4096;
  o.audit_keep = 2;
  o.commands_per_minute = 1e6;
  o.command_burst = 1e6;
  Engine e;
  std::string why;
  ASSERT_TRUE(e.Init(o, nullptr, &why)) << why;
  for (int i = 0; i < 200; ++i)
    e.OnMessage("holdfast/v1/quillfen/commands/alice", R"({"id":"x-)" + std::to_string(i) + R"(","segment":"QS-1"})",
                1.0 + i);
  const std::string base = dir + "/state/audit.jsonl";
  EXPECT_TRUE(std::filesystem::exists(base + ".1"));
  EXPECT_TRUE(std::filesystem::exists(base + ".2"));
  EXPECT_FALSE(std::filesystem::exists(base + ".3"));
  EXPECT_LE(std::filesystem::file_size(base), 4096u);
  std::filesystem::remove_all(dir);
}

// Issue 11, item 3: events retired on PUBACK stay in the journal history;
// a replay request republishes them with their original payloads.
TEST(Engine, ReplayBySequenceFromTheJournalHistory) {
  const std::string dir = TempDir("replayseq");
  FakeLink link;
  Engine e;
  std::string why;
  ASSERT_TRUE(e.Init(Options(dir), nullptr, &why)) << why;
  e.SetLink(&link);
  e.OnConnected(10.0);
  FeedUntil(&e, kAfterLeakAlarm_s);
  e.OnMessage("holdfast/v1/quillfen/commands/alice",
              R"({"id":"c-1","segment":"QS-1","alarm":"leak","command":"acknowledge"})", 11.0);
  const auto first = EventPayloads(link);
  ASSERT_EQ(first.size(), 2u);
  e.OnAcked(1);
  e.OnAcked(2);
  e.Poll(12.0);
  EXPECT_EQ(e.journal().pending_count(), 0u);
  link.sent.clear();
  e.OnMessage("holdfast/v1/quillfen/commands/carol", R"({"id":"r-1","replay_from_seq":1})", 13.0);
  std::vector<std::string> again;
  for (const Publication& p : link.sent)
    if (p.topic == "holdfast/v1/quillfen/events/QS-1") again.push_back(p.payload);
  EXPECT_EQ(again, first);
  ASSERT_FALSE(link.sent.empty());
  EXPECT_EQ(link.sent.back().topic, "holdfast/v1/quillfen/replies/carol");
  EXPECT_NE(link.sent.back().payload.find("\"count\":2,\"first_seq\":1,\"last_seq\":2"), std::string::npos)
      << link.sent.back().payload;
  std::filesystem::remove_all(dir);
}

TEST(DaemonConfig, ValidationNamesTheField) {
  DaemonOptions o;
  std::string why;
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("site_file"), std::string::npos);
  o.site_file = "x.json";
  EXPECT_TRUE(o.IsValid(&why)) << why;
  o.broker_uri = "ssl://host:8883";
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("tls_ca_file"), std::string::npos);
  o.broker_uri = "mqtt://host";
  EXPECT_FALSE(o.IsValid(&why));
  o.broker_uri = "tcp://host:1883";
  o.topic_prefix = "a/+/b";
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("topic_prefix"), std::string::npos);
}

}  // namespace
}  // namespace holdfast::daemon
