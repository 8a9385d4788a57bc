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

#include <cmath>
#include <cstdint>
#include <cstdio>
#include <deque>
#include <unordered_map>
#include <utility>
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
  // Commands not applied: retained ones (delivered again at every connect),
  // repeats of an id within the dedup window, over a user's rate limit.
  uint64_t commands_retained_ignored = 0, commands_duplicate = 0, commands_rate_limited = 0;
  uint64_t replay_requests = 0, events_replayed = 0;
  uint64_t feed_silences = 0;  // times the dead-feed watchdog declared the feed silent
  uint64_t idle_ticks = 0;     // ticks run by the watchdog without readings
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
  // `retained`: the broker delivered it from its retained store (a command
  // so delivered is ignored and audited as such).
  void OnMessage(std::string_view topic, std::string_view payload, double now_s, bool retained = false);
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

  // Periodic work by wall clock: heartbeat, segment status, checkpoint, and
  // the dead-feed watchdog (feed_silence_s): while connected and data time
  // has not advanced for that long, the feed is silent and the monitor is
  // ticked on with the wall clock (data time = newest reading + wall time
  // since it arrived), so that the core's staleness rules raise
  // balance_unavailable and data_quality through the journal path.
  void Poll(double now_s);
  bool feed_silent() const { return feed_silent_; }
  double feed_silence_s() const { return feed_silence_s_; }
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
  std::string FeedJson() const;

 private:
  class Collector;
  void TimedAdvance(double t);
  void HandleReadings(std::string_view topic_point, std::string_view payload, double now_s);
  void HandleCommand(std::string_view user, std::string_view payload, double now_s, bool retained);
  void HandleReplayRequest(std::string_view user, std::string_view payload, double now_s);
  bool RateAllow(std::string_view user, double now_s);
  void Watchdog(double now_s);
  void NoteDataTime(double now_s);
  void LoadRecentCommands();
  void WriteAuditLine(const std::string& line);
  void FlushEvents();
  void PublishRecord(const JournalRecord& r);
  void PublishAlarmStates(const std::vector<bool>& segments);
  void Log(const char* fmt, ...) __attribute__((format(printf, 2, 3)));
  void Audit(const CommandRequest& req, std::string_view result, std::string_view error, double now_s);

  struct Bucket {
    double tokens = 0.0, last_s = 0.0;
    uint64_t dropped = 0;
  };
  struct SeenCommand {
    double wall_s = 0.0;
    std::string result;
  };

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
  // Dead-feed watchdog.
  double feed_silence_s_ = 60.0;
  double seen_newest_s_ = std::nan("");     // newest data time seen (scheduler)
  double data_moved_wall_s_ = 0.0;          // wall time data time last moved
  double connected_wall_s_ = 0.0;           // wall time of the last connect
  bool feed_silent_ = false;
  double silent_since_wall_s_ = 0.0;
  // Commands exactly once.
  std::unordered_map<std::string, Bucket> buckets_;
  std::unordered_map<std::string, SeenCommand> seen_commands_;  // "user\nid"
  std::deque<std::pair<double, std::string>> seen_order_;       // (wall_s, key), oldest first
  uint64_t audit_bytes_ = 0;
};

}  // namespace holdfast::daemon
