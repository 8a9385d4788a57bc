// The engine without a broker: a fake link records what would be published.
#include "engine.h"

#include <unistd.h>

#include <filesystem>
#include <string>
#include <vector>

#include <gtest/gtest.h>

#include "readings_csv.h"

namespace holdfast::daemon {
namespace {

const std::string kSite = std::string(HOLDFAST_SOURCE_DIR) + "/config/demo/kestrel-site.json";
const std::string kReadings = std::string(HOLDFAST_SOURCE_DIR) + "/config/demo/kestrel-readings.csv";
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
  o.topic_prefix = "holdfast/v1/kestrel";
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
    EXPECT_EQ(e.journal().pending(0).topic, "holdfast/v1/kestrel/events/KR-1");
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
  e.OnMessage("holdfast/v1/kestrel/commands/alice",
              R"({"id":"c-0","segment":"KR-1","alarm":"leak","command":"acknowledge"})", 1.0);
  ASSERT_FALSE(link.sent.empty());
  EXPECT_EQ(link.sent.back().topic, "holdfast/v1/kestrel/replies/alice");
  EXPECT_NE(link.sent.back().payload.find("\"result\":\"rejected_not_ready\""), std::string::npos);
  FeedUntil(&e, kAfterLeakAlarm_s);
  e.OnMessage("holdfast/v1/kestrel/commands/mallory",
              R"({"id":"m-1","segment":"KR-1","alarm":"leak","command":"acknowledge"})", 2.0);
  EXPECT_NE(link.sent.back().payload.find("rejected_not_authorised"), std::string::npos);
  EXPECT_EQ(e.monitor().alarm(0, AlarmType::kLeak).state(), AlarmState::kUnackActive);
  e.OnMessage("holdfast/v1/kestrel/commands/alice",
              R"({"id":"c-1","segment":"KR-1","alarm":"leak","command":"shelve","duration_s":600})", 3.0);
  EXPECT_EQ(e.monitor().alarm(0, AlarmType::kLeak).state(), AlarmState::kShelved);
  EXPECT_NE(link.sent.back().payload.find("\"ok\":true"), std::string::npos) << link.sent.back().payload;
  const auto events = link.Events();
  ASSERT_EQ(events.size(), 2u);  // the raise, then the shelve
  EXPECT_NE(events[1].payload.find("\"cause\":\"shelved\""), std::string::npos);
  EXPECT_NE(events[1].payload.find("\"user\":\"alice\""), std::string::npos);
  EXPECT_EQ(e.counters().commands_rejected, 2u);
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
