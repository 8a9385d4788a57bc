// The daemon's engine: everything holdfastd does except talking to the
// broker, so that it runs and is tested without one. It owns the Monitor and
// is used from one thread only (the monitor thread); the MQTT link feeds it
// messages, acknowledgements and connection changes, and it hands the link
// what to publish through the Link interface.
//
// The path of an alarm event: the monitor raises it during a tick (data
// time) -> it is appended to the journal and fsync'ed -> the checkpoint is
// written atomically -> it is published at QoS 1 -> the broker's PUBACK
// retires it from the journal. After a reconnect or a restart every
// unretired record is published again, oldest first, with its original
// sequence number (consumers de-duplicate by (segment, seq)).
#pragma once

#include <cstdint>
#include <cstdio>
#include <memory>
#include <string>
#include <string_view>
#include <vector>

#include "command.h"
#include "daemon_config.h"
#include "holdfast/monitor.h"
#include "holdfast/site.h"
#include "journal.h"
#include "payload.h"
#include "rate_log.h"
#include "tick_scheduler.h"
#include "topics.h"

namespace holdfast::daemon {

inline constexpr const char* kCheckpointFormat = "holdfastd-checkpoint/1";

struct Publication {
  std::string topic;
  std::string payload;
  int qos = 1;
  bool retained = false;
  uint64_t journal_seq = 0;  // > 0: an alarm event; retire it on PUBACK
};

// What the engine needs from the MQTT link.
class Link {
 public:
  virtual ~Link() = default;
  // False when the message could not be handed to the client (not
  // connected): a journaled event then waits for the next connect.
  virtual bool Publish(const Publication& p) = 0;
};

struct EngineCounters {
  uint64_t messages = 0;
  uint64_t readings_accepted = 0;
  std::array<uint64_t, kRejectCount> readings_rejected{};
  uint64_t commands = 0, commands_applied = 0, commands_rejected = 0;
  uint64_t events = 0, events_published = 0, events_acked = 0, events_republished = 0;
  uint64_t checkpoints = 0, checkpoint_failures = 0, journal_failures = 0;
  // Wall time of Monitor::Advance (one tick of every segment: the decision
  // itself), for the heartbeat and the load bench.
  uint64_t ticks = 0;
  double tick_ms_sum = 0.0, tick_ms_max = 0.0;
};

class Engine {
 public:
  Engine();
  ~Engine();
  Engine(const Engine&) = delete;
  Engine& operator=(const Engine&) = delete;

  // Loads the site (and tuning), opens the journal, restores the checkpoint.
  // `log` receives log lines (stderr in the daemon). False with the reason.
  bool Init(const DaemonOptions& options, std::FILE* log, std::string* why);

  void SetLink(Link* link) { link_ = link; }

  // An MQTT message on one of the daemon's subscriptions; now_s is wall time.
  void OnMessage(std::string_view topic, std::string_view payload, double now_s);
  // Readings from a file source (already resolved to point indexes).
  void OnReading(const Reading& r);
  // Runs the ticks the watermark allows and flushes their events.
  void Step();
  // End of a file input: every buffered reading and tick.
  void Flush();

  // Link state. On connect the engine publishes its online status, every
  // segment's retained alarm state, and every unretired journal record.
  void OnConnected(double now_s);
  void OnDisconnected();
  void OnAcked(uint64_t seq);
  void OnPublishFailed(uint64_t seq);
  // The last-will document (retained on P/daemon when the link drops).
  std::string OfflineJson(std::string_view reason) const;

  // Periodic work by wall clock: heartbeat, segment status, checkpoint.
  void Poll(double now_s);
  // Checkpoint now (on shutdown).
  bool Checkpoint(std::string* why);
  // Without a broker: events are written here (JSON Lines) and retired.
  void SetEventStream(std::FILE* out) { event_stream_ = out; }

  const TopicTree& topics() const { return topics_; }
  const Monitor& monitor() const { return monitor_; }
  const Journal& journal() const { return journal_; }
  const EngineCounters& counters() const { return counters_; }
  const TickScheduler& scheduler() const { return scheduler_; }
  const PointIndex& points() const { return points_; }
  std::string StatusJson(std::string_view state, double now_s) const;

 private:
  class Collector;
  void TimedAdvance(double t);
  void HandleReadings(std::string_view topic_point, std::string_view payload, double now_s);
  void HandleCommand(std::string_view user, std::string_view payload, double now_s);
  void FlushEvents();
  void PublishRecord(const JournalRecord& r);
  void PublishAlarmStates(const std::vector<bool>& segments);
  void Log(const char* fmt, ...) __attribute__((format(printf, 2, 3)));
  void Audit(const CommandRequest& req, std::string_view result, std::string_view error, double now_s);

  DaemonOptions options_;
  std::FILE* log_ = nullptr;
  std::FILE* event_stream_ = nullptr;
  Site site_;
  Monitor monitor_;
  std::unique_ptr<Collector> collector_;
  TickScheduler scheduler_;
  Journal journal_;
  TopicTree topics_{"holdfast/v1/site"};
  PointIndex points_;
  SegmentIndex segments_;
  PayloadLimits limits_;
  Link* link_ = nullptr;
  bool connected_ = false;
  EngineCounters counters_;
  RateLimitedLog rate_log_;
  std::vector<Reading> scratch_;
  std::string checkpoint_path_, audit_path_;
  double started_s_ = 0.0, last_heartbeat_s_ = -1e300, last_status_s_ = -1e300, last_checkpoint_s_ = 0.0;
  double last_now_s_ = 0.0;
  uint64_t heartbeat_count_ = 0;
  bool dirty_ = false;  // ticks since the last checkpoint
};

}  // namespace holdfast::daemon
