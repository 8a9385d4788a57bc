#include "engine.h"

#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <cerrno>
#include <chrono>
#include <cinttypes>
#include <cmath>
#include <cstdarg>
#include <cstring>
#include <ctime>

#include <nlohmann/json.hpp>

#include "atomic_file.h"
#include "event_json.h"
#include "readings_csv.h"
#include "site_file.h"
#include "status_json.h"
#include "tuning_file.h"

namespace holdfast::daemon {

// Collects the monitor's events as they happen (the monitor's sink).
class Engine::Collector final : public AlarmEventSink {
 public:
  void OnAlarmEvent(const AlarmEvent& e) override { events.push_back(e); }
  std::vector<AlarmEvent> events;
};

Engine::Engine() : collector_(std::make_unique<Collector>()) {}
Engine::~Engine() = default;

void Engine::Log(const char* fmt, ...) {
  if (!log_) return;
  char buf[1024];
  va_list ap;
  va_start(ap, fmt);
  std::vsnprintf(buf, sizeof buf, fmt, ap);
  va_end(ap);
  // Wall-clock time with milliseconds: log lines from the monitor thread are
  // what an outage or a latency question is reconstructed from.
  timespec ts{};
  clock_gettime(CLOCK_REALTIME, &ts);
  tm utc{};
  gmtime_r(&ts.tv_sec, &utc);
  char stamp[40];
  const size_t n = std::strftime(stamp, sizeof stamp, "%Y-%m-%dT%H:%M:%S", &utc);
  std::snprintf(stamp + n, sizeof stamp - n, ".%03ldZ", ts.tv_nsec / 1000000L);
  std::fprintf(log_, "%s holdfastd: %s\n", stamp, buf);
  std::fflush(log_);
}

namespace {

// The monitor state with its sequence counter raised to at least `next_seq`
// (events journaled after the last checkpoint keep their numbers).
bool RaiseNextSeq(std::string* blob, uint64_t next_seq, std::string* why) {
  nlohmann::json doc = nlohmann::json::parse(*blob, nullptr, false);
  if (doc.is_discarded() || !doc.is_object() || !doc.contains("alarms") || !doc["alarms"].is_string()) {
    *why = "monitor state without its alarms";
    return false;
  }
  nlohmann::json alarms = nlohmann::json::parse(doc["alarms"].get<std::string>(), nullptr, false);
  if (alarms.is_discarded() || !alarms.is_object() || !alarms.contains("next_seq") ||
      !alarms["next_seq"].is_number_unsigned()) {
    *why = "monitor state with a damaged alarm document";
    return false;
  }
  if (alarms["next_seq"].get<uint64_t>() >= next_seq) return true;
  alarms["next_seq"] = next_seq;
  doc["alarms"] = alarms.dump();
  *blob = doc.dump(1);
  return true;
}

}  // namespace

bool Engine::Init(const DaemonOptions& options, std::FILE* log, std::string* why) {
  if (!options.IsValid(why)) return false;
  options_ = options;
  log_ = log;
  topics_ = TopicTree(options.topic_prefix);
  std::vector<ConfigProblem> problems;
  if (!LoadSiteFile(options.site_file, &site_, &problems)) {
    *why = problems.empty() ? options.site_file + ": cannot load" : problems.front().ToString();
    if (problems.size() > 1) *why += " (and " + std::to_string(problems.size() - 1) + " more; run holdfast check-config)";
    return false;
  }
  for (size_t i = 0; i < site_.points.size(); ++i) points_[site_.points[i].id] = static_cast<int>(i);
  for (size_t i = 0; i < site_.segments.size(); ++i) {
    segments_[site_.segments[i].id] = static_cast<int>(i);
    if (!IsTopicLevel(site_.segments[i].id)) {
      *why = options.site_file + ": segment id \"" + site_.segments[i].id + "\" cannot be a topic level";
      return false;
    }
  }
  if (!monitor_.Init(site_, why)) return false;
  monitor_.SetEventSink(collector_.get());
  limits_.max_payload_bytes = options.max_payload_bytes;
  limits_.max_batch = options.max_batch;
  limits_.max_future_s = options.max_future_s;

  Journal::Options jo;
  jo.dir = options.journal_dir;
  jo.history_s = options.journal_history_days * 86400.0;
  jo.history_bytes = options.journal_history_bytes;
  if (!journal_.Open(jo, why)) return false;
  if (journal_.dropped_tail_bytes() > 0)
    Log("journal %s: dropped a torn tail of %" PRIu64 " bytes", journal_.path().c_str(),
        journal_.dropped_tail_bytes());
  if (!MakeDirs(options.state_dir, why)) return false;
  checkpoint_path_ = options.state_dir + "/checkpoint.json";
  audit_path_ = options.state_dir + "/audit.jsonl";
  {
    struct stat st {};
    audit_bytes_ = ::stat(audit_path_.c_str(), &st) == 0 ? static_cast<uint64_t>(st.st_size) : 0;
  }
  LoadRecentCommands();
  // The dead-feed watchdog: by default the largest staleness of the points
  // (every point would be stale by then).
  feed_silence_s_ = options.feed_silence_s;
  if (!(feed_silence_s_ > 0.0)) {
    feed_silence_s_ = 0.0;
    for (const auto& p : site_.points) feed_silence_s_ = std::max(feed_silence_s_, p.staleness_s);
    if (!(feed_silence_s_ > 0.0)) feed_silence_s_ = 60.0;
  }

  TickScheduler::Options so;
  so.tick_s = site_.tick_s;
  so.lateness_s = options.tick_lateness_s;
  so.max_gap_s = std::max(options.max_tick_gap_s, site_.tick_s);
  so.max_lead_s = options.max_lead_s;
  so.quorum_points = std::max(1, std::min(options.lead_quorum_points, static_cast<int>(site_.points.size())));
  if (!so.IsValid(why)) return false;
  double resume_after = std::nan("");
  std::string content;
  if (ReadWholeFile(checkpoint_path_, &content, nullptr)) {
    const nlohmann::json doc = nlohmann::json::parse(content, nullptr, false);
    if (doc.is_discarded() || !doc.is_object() || doc.value("format", "") != kCheckpointFormat ||
        !doc.contains("monitor") || !doc["monitor"].is_string() || !doc.contains("last_tick_s")) {
      *why = checkpoint_path_ + ": not a " + kCheckpointFormat + " document; move it away to start cold";
      return false;
    }
    std::string blob = doc["monitor"].get<std::string>();
    if (!RaiseNextSeq(&blob, journal_.max_seq() + 1, why) || !monitor_.RestoreState(blob, why)) {
      *why = checkpoint_path_ + ": " + *why;
      return false;
    }
    if (doc["last_tick_s"].is_number()) resume_after = doc["last_tick_s"].get<double>();
    Log("resumed from %s: last tick %s, next seq %" PRIu64 ", %zu journal records to publish",
        checkpoint_path_.c_str(), std::isfinite(resume_after) ? FormatIsoUtc(resume_after, 3).c_str() : "none",
        monitor_.next_sequence(), journal_.pending_count());
  } else {
    if (journal_.max_seq() > 0) {
      // A journal without a checkpoint: keep the numbers unique.
      std::string blob = monitor_.SaveState();
      if (!RaiseNextSeq(&blob, journal_.max_seq() + 1, why) || !monitor_.RestoreState(blob, why)) return false;
    }
    if (!options.tuning_file.empty()) {
      TuningFile tf;
      if (!LoadTuningFile(options.tuning_file, site_, &tf, why) || !ApplyTuning(tf, &monitor_, why)) return false;
      Log("seeded from %s", options.tuning_file.c_str());
    }
    Log("cold start (no checkpoint at %s)", checkpoint_path_.c_str());
  }
  scheduler_.Init(so, resume_after);
  return true;
}

void Engine::OnMessage(std::string_view topic, std::string_view payload, double now_s, bool retained) {
  ++counters_.messages;
  last_now_s_ = now_s;
  const TopicMatch m = topics_.Classify(topic);
  switch (m.kind) {
    case TopicKind::kPointReadings: return HandleReadings(m.arg, payload, now_s);
    case TopicKind::kBatchReadings: return HandleReadings({}, payload, now_s);
    case TopicKind::kCommand: return HandleCommand(m.arg, payload, now_s, retained);
    case TopicKind::kUnknown: break;
  }
  ++counters_.readings_rejected[static_cast<int>(Reject::kUnknownTopic)];
  uint64_t held = 0;
  if (rate_log_.Allow("topic", now_s, &held))
    Log("rejected a message on an unknown topic \"%.80s\" (%" PRIu64 " more held back)", std::string(topic).c_str(),
        held);
}

void Engine::HandleReadings(std::string_view topic_point, std::string_view payload, double now_s) {
  limits_.now_s = now_s;
  scratch_.clear();
  const ParseResult r = ParseReadings(payload, topic_point, points_, limits_, &scratch_);
  counters_.readings_accepted += r.accepted;
  for (int i = 0; i < kRejectCount; ++i) counters_.readings_rejected[i] += r.rejected[i];
  if (r.rejected_total() > 0) {
    uint64_t held = 0;
    const std::string key = RejectName(r.first_reason);
    if (rate_log_.Allow(key, now_s, &held))
      Log("rejected reading(s) on %s/readings%s%.64s: %s: %s (%" PRIu64 " similar lines held back)",
          topics_.prefix().c_str(), topic_point.empty() ? "" : "/", std::string(topic_point).c_str(), key.c_str(),
          r.first_error.c_str(), held);
  }
  for (const Reading& rd : scratch_) scheduler_.Add(rd);
  NoteDataTime(now_s);
}

void Engine::NoteDataTime(double now_s) {
  const double t = scheduler_.newest_s();
  if (!std::isfinite(t) || t <= seen_newest_s_) return;
  seen_newest_s_ = t;
  data_moved_wall_s_ = now_s;
  if (feed_silent_) {
    feed_silent_ = false;
    Log("feed resumed after %.1f s of silence (data time %s)", now_s - silent_since_wall_s_,
        FormatIsoUtc(t, 3).c_str());
    last_heartbeat_s_ = last_status_s_ = -1e300;  // say so at once
  }
}

void Engine::Watchdog(double now_s) {
  if (!connected_) return;
  if (!std::isfinite(seen_newest_s_)) {
    // No reading yet in this run. After a resume from a checkpoint the
    // silence counts from the first connect, with the checkpointed tick as
    // the last data time; on a cold start there is nothing to tick.
    const double resumed = scheduler_.last_tick_s();
    if (!std::isfinite(resumed)) return;
    seen_newest_s_ = resumed;
    data_moved_wall_s_ = connected_wall_s_;
  }
  // Silence counts from the later of the last data-time advance and the last
  // connect (while disconnected the broker queues the readings).
  const double since = std::max(data_moved_wall_s_, connected_wall_s_);
  if (now_s - since <= feed_silence_s_) return;
  if (!feed_silent_) {
    feed_silent_ = true;
    silent_since_wall_s_ = data_moved_wall_s_;
    ++counters_.feed_silences;
    Log("feed silent since %s (no reading has moved data time for %.1f s, limit %.0f s; last data time %s): "
        "ticking on with the wall clock",
        FormatIsoUtc(data_moved_wall_s_, 3).c_str(), now_s - data_moved_wall_s_, feed_silence_s_,
        FormatIsoUtc(seen_newest_s_, 3).c_str());
    last_heartbeat_s_ = last_status_s_ = -1e300;  // status and heartbeat say so at once
  }
  // Data time follows the wall clock from the last reading on.
  const double target = seen_newest_s_ + (now_s - data_moved_wall_s_);
  bool ticked = false;
  scheduler_.AdvanceIdle(target, [this](const Reading& r) { monitor_.Feed(r); },
                         [this, &ticked](double t) {
                           TimedAdvance(t);
                           ++counters_.idle_ticks;
                           ticked = true;
                         });
  if (ticked) dirty_ = true;
  FlushEvents();
}

void Engine::OnReading(const Reading& r) {
  ++counters_.readings_accepted;
  scheduler_.Add(r);
  NoteDataTime(last_now_s_);
}

void Engine::TimedAdvance(double t) {
  const auto t0 = std::chrono::steady_clock::now();
  monitor_.Advance(t);
  const double ms = std::chrono::duration<double, std::milli>(std::chrono::steady_clock::now() - t0).count();
  ++counters_.ticks;
  counters_.tick_ms_sum += ms;
  if (ms > counters_.tick_ms_max) counters_.tick_ms_max = ms;
}

void Engine::Step() {
  bool ticked = false;
  scheduler_.Release([this](const Reading& r) { monitor_.Feed(r); },
                     [this, &ticked](double t) {
                       TimedAdvance(t);
                       ticked = true;
                     });
  if (ticked) dirty_ = true;
  FlushEvents();
}

void Engine::Flush() {
  bool ticked = false;
  scheduler_.Flush([this](const Reading& r) { monitor_.Feed(r); },
                   [this, &ticked](double t) {
                     TimedAdvance(t);
                     ticked = true;
                   });
  if (ticked) dirty_ = true;
  FlushEvents();
}

void Engine::FlushEvents() {
  std::vector<AlarmEvent>& events = collector_->events;
  if (events.empty()) return;
  std::vector<JournalRecord> records;
  records.reserve(events.size());
  std::vector<bool> touched(site_.segments.size(), false);
  for (const AlarmEvent& e : events) {
    JournalRecord r;
    r.seq = e.seq;
    const bool known = e.segment >= 0 && static_cast<size_t>(e.segment) < site_.segments.size();
    r.topic = topics_.Events(known ? site_.segments[static_cast<size_t>(e.segment)].id : std::string("unknown"));
    r.payload = EventJson(site_, e);
    r.appended_s = last_now_s_;
    if (known) touched[static_cast<size_t>(e.segment)] = true;
    records.push_back(std::move(r));
  }
  counters_.events += events.size();
  events.clear();
  std::string why;
  // 1. On disk before on the wire.
  if (!journal_.Append(records, &why)) {
    ++counters_.journal_failures;
    Log("JOURNAL WRITE FAILED, publishing without it: %s", why.c_str());
  }
  // 2. Out.
  for (const JournalRecord& r : records) {
    Log("alarm event %s", r.payload.c_str());
    if (event_stream_) {
      std::fprintf(event_stream_, "%s\n", r.payload.c_str());
      std::fflush(event_stream_);
      journal_.MarkAcked(r.seq);
    } else {
      PublishRecord(r);
    }
  }
  if (event_stream_ && !journal_.Commit(&why)) Log("journal retire failed: %s", why.c_str());
  PublishAlarmStates(touched);
  // 3. The state that raised them (alarm states, sequence counter), so that a
  // restart does not raise them again. Not needed before publishing: the
  // journal alone guarantees delivery, and a restart from an older
  // checkpoint numbers new events after the journal's (Init).
  if (!Checkpoint(&why)) Log("checkpoint failed: %s", why.c_str());
}

void Engine::PublishRecord(const JournalRecord& r) {
  if (!link_ || !connected_) return;
  Publication p;
  p.topic = r.topic;
  p.payload = r.payload;
  p.qos = 1;
  p.journal_seq = r.seq;
  if (link_->Publish(p)) ++counters_.events_published;
}

void Engine::PublishAlarmStates(const std::vector<bool>& segments) {
  if (!link_ || !connected_) return;
  for (size_t i = 0; i < segments.size(); ++i) {
    if (!segments[i]) continue;
    Publication p;
    p.topic = topics_.Alarms(site_.segments[i].id);
    p.payload = AlarmStateJson(monitor_, static_cast<int>(i));
    p.qos = 1;
    p.retained = true;
    link_->Publish(p);
  }
}

// Token bucket per user (commands_per_minute, command_burst): checked before
// the command is parsed, so that a flood costs neither parsing nor audit
// writes (fdatasync) and cannot delay another user's command.
bool Engine::RateAllow(std::string_view user, double now_s) {
  constexpr std::size_t kMaxUsers = 10000;  // topic levels are broker-checked; bound the map all the same
  std::string key(user);
  auto it = buckets_.find(key);
  if (it == buckets_.end()) {
    if (buckets_.size() >= kMaxUsers) buckets_.clear();
    it = buckets_.emplace(std::move(key), Bucket{options_.command_burst, now_s, 0}).first;
  }
  Bucket& b = it->second;
  b.tokens = std::min(options_.command_burst, b.tokens + (now_s - b.last_s) * options_.commands_per_minute / 60.0);
  b.last_s = now_s;
  if (b.tokens >= 1.0) {
    b.tokens -= 1.0;
    return true;
  }
  ++b.dropped;
  return false;
}

void Engine::HandleCommand(std::string_view user, std::string_view payload, double now_s, bool retained) {
  ++counters_.commands;
  if (!RateAllow(user, now_s)) {
    ++counters_.commands_rate_limited;
    uint64_t held = 0;
    if (rate_log_.Allow("command-rate:" + std::string(user.substr(0, 64)), now_s, &held))
      Log("dropped a command from user \"%.64s\": over its rate limit of %.0f per minute, burst %.0f "
          "(%" PRIu64 " more held back); neither applied nor audited one by one",
          std::string(user).c_str(), options_.commands_per_minute, options_.command_burst, held);
    return;
  }
  if (retained) {
    // A retained command is delivered again at every (re)subscription: it
    // is a stale order, never applied. Audited, not answered.
    ++counters_.commands_retained_ignored;
    CommandRequest req;
    std::string error;
    ParseCommand(payload, user, segments_, options_.operators, &req, &error);
    req.user = std::string(user);
    Audit(req, "ignored_retained",
          "a retained command is never applied (publish commands with retain off; clear it with an empty "
          "retained message)",
          now_s);
    return;
  }
  if (payload.find("\"replay_from_seq\"") != std::string_view::npos) return HandleReplayRequest(user, payload, now_s);
  CommandRequest req;
  std::string error;
  const CommandError ce = ParseCommand(payload, user, segments_, options_.operators, &req, &error);
  const double data_t = scheduler_.last_tick_s();
  std::string result, state;
  bool ok = false;
  const std::string key = std::string(user) + "\n" + req.id;
  // Forget ids older than the window.
  while (!seen_order_.empty() && now_s - seen_order_.front().first > options_.command_dedup_s) {
    auto f = seen_commands_.find(seen_order_.front().second);
    if (f != seen_commands_.end() && f->second.wall_s == seen_order_.front().first) seen_commands_.erase(f);
    seen_order_.pop_front();
  }
  const auto seen = ce == CommandError::kNone ? seen_commands_.find(key) : seen_commands_.end();
  if (ce != CommandError::kNone) {
    result = CommandErrorName(ce);
  } else if (seen != seen_commands_.end()) {
    ++counters_.commands_duplicate;
    result = "ignored_duplicate";
    ok = true;
    error = "command id \"" + req.id + "\" from " + req.user + " was already handled at " +
            FormatIsoUtc(seen->second.wall_s, 3) + " (" + seen->second.result + "); not applied again";
    state = AlarmStateName(monitor_.alarm(req.segment, req.alarm).state());
  } else if (!std::isfinite(data_t)) {
    result = AlarmResultName(AlarmResult::kRejectedNotReady);
    error = "no readings processed yet: commands apply at data time";
  } else {
    const AlarmResult ar = monitor_.Command(req.segment, req.alarm, req.command, data_t, req.duration_s, req.user);
    result = AlarmResultName(ar);
    ok = ar == AlarmResult::kApplied || ar == AlarmResult::kNoChange;
    state = AlarmStateName(monitor_.alarm(req.segment, req.alarm).state());
    if (!ok) error = "the alarm refused the command in state " + state;
    dirty_ = true;
    FlushEvents();
    constexpr std::size_t kMaxRemembered = 100000;
    if (seen_order_.size() >= kMaxRemembered) {
      seen_commands_.erase(seen_order_.front().second);
      seen_order_.pop_front();
    }
    seen_commands_[key] = SeenCommand{now_s, result};
    seen_order_.emplace_back(now_s, key);
  }
  if (ok && result != "ignored_duplicate") ++counters_.commands_applied;
  else if (!ok) ++counters_.commands_rejected;
  Audit(req, result, error, now_s);
  if (link_ && connected_ && IsTopicLevel(user)) {
    Publication p;
    p.topic = topics_.Reply(user);
    p.payload = ReplyJson(req, ok, result, error, state, data_t);
    p.qos = 1;
    link_->Publish(p);
  }
}

// {"id": "r-1", "replay_from_seq": N, "max_events": M}: every kept event
// with seq >= N (journal history and pending), republished on its events
// topic at QoS 1 exactly as first published (consumers de-duplicate by
// (segment, seq)), then a reply with what was sent.
void Engine::HandleReplayRequest(std::string_view user, std::string_view payload, double now_s) {
  ++counters_.replay_requests;
  constexpr uint64_t kMaxReplay = 10000;
  CommandRequest req;
  req.user = std::string(user);
  std::string error;
  uint64_t from = 0, max_events = 1000;
  const nlohmann::json j = nlohmann::json::parse(payload.begin(), payload.end(), nullptr, false);
  bool ok = false;
  if (payload.size() > 4096 || j.is_discarded() || !j.is_object()) {
    error = "not a JSON object";
  } else {
    if (j.contains("id") && j["id"].is_string() && !j["id"].get<std::string>().empty() &&
        j["id"].get<std::string>().size() <= 64)
      req.id = j["id"].get<std::string>();
    ok = true;
    for (auto it = j.begin(); it != j.end(); ++it)
      if (it.key() != "id" && it.key() != "replay_from_seq" && it.key() != "max_events" && it.key() != "user") {
        error = "unknown field \"" + it.key().substr(0, 40) + "\"";
        ok = false;
      }
    if (req.id.empty()) error = "id: required, a string of 1 to 64 characters", ok = false;
    if (!j.contains("replay_from_seq") || !j["replay_from_seq"].is_number_unsigned())
      error = "replay_from_seq: a sequence number >= 0", ok = false;
    else from = j["replay_from_seq"].get<uint64_t>();
    if (j.contains("max_events")) {
      if (!j["max_events"].is_number_unsigned() || j["max_events"].get<uint64_t>() < 1)
        error = "max_events: a positive integer", ok = false;
      else max_events = std::min<uint64_t>(j["max_events"].get<uint64_t>(), kMaxReplay);
    }
    if (j.contains("user") && (!j["user"].is_string() || j["user"].get<std::string>() != req.user))
      error = "user: must be the topic's user \"" + req.user + "\"", ok = false;
  }
  std::vector<JournalRecord> records;
  if (ok) journal_.Since(from, max_events, &records);
  const uint64_t oldest = journal_.oldest_kept_seq();
  if (ok && link_ && connected_) {
    for (const JournalRecord& r : records) {
      Publication p;
      p.topic = r.topic;
      p.payload = r.payload;
      p.qos = 1;
      if (link_->Publish(p)) ++counters_.events_replayed;
    }
  }
  if (ok && from > 0 && oldest > from)
    error = "the journal history starts at seq " + std::to_string(oldest) + "; older events are no longer kept";
  Audit(req, ok ? "replayed" : "rejected_bad_field", error, now_s);
  if (link_ && connected_ && IsTopicLevel(user)) {
    std::string s = "{\"id\":";
    AppendJsonString(req.id, &s);
    s += std::string(",\"ok\":") + (ok ? "true" : "false") + ",\"result\":";
    AppendJsonString(ok ? "replayed" : "rejected_bad_field", &s);
    s += ",\"error\":";
    AppendJsonString(error, &s);
    s += ",\"user\":";
    AppendJsonString(req.user, &s);
    s += ",\"replay_from_seq\":" + std::to_string(from) + ",\"count\":" + std::to_string(records.size());
    s += ",\"first_seq\":" + (records.empty() ? std::string("null") : std::to_string(records.front().seq));
    s += ",\"last_seq\":" + (records.empty() ? std::string("null") : std::to_string(records.back().seq));
    s += ",\"oldest_kept_seq\":" + std::to_string(oldest);
    s += ",\"next_seq\":" + std::to_string(monitor_.next_sequence()) + "}";
    Publication p;
    p.topic = topics_.Reply(user);
    p.payload = s;
    p.qos = 1;
    link_->Publish(p);
  }
}

// Commands handled within the dedup window before a restart (from the audit
// log), so that a command re-sent across a restart is not applied twice.
void Engine::LoadRecentCommands() {
  std::string content;
  if (!ReadWholeFile(audit_path_, &content, nullptr)) return;
  size_t pos = 0;
  while (pos < content.size()) {
    size_t nl = content.find('\n', pos);
    if (nl == std::string::npos) nl = content.size();
    const nlohmann::json j = nlohmann::json::parse(content.begin() + static_cast<long>(pos),
                                                   content.begin() + static_cast<long>(nl), nullptr, false);
    pos = nl + 1;
    if (j.is_discarded() || !j.is_object()) continue;
    if (!j.contains("result") || !j["result"].is_string()) continue;
    const std::string result = j["result"].get<std::string>();
    // Commands the alarm saw (applied, no change, or refused by its state
    // machine); malformed, unauthorised or not-ready ones never reached it.
    const bool reached = result == "applied" || result == "no_change" ||
                         (result.rfind("rejected_", 0) == 0 && result != "rejected_not_ready" &&
                          result != "rejected_bad_field" && result != "rejected_not_authorised" &&
                          result != "rejected_unknown_segment" && result != "rejected_user_mismatch" &&
                          result != "rejected_malformed_json" && result != "rejected_oversized");
    if (!reached) continue;
    double wall = 0.0;
    if (!j.contains("wall_time") || !j["wall_time"].is_string() || !ParseTime(j["wall_time"].get<std::string>(), &wall))
      continue;
    if (!j.contains("client_user") || !j["client_user"].is_string() || !j.contains("id") || !j["id"].is_string())
      continue;
    const std::string key = j["client_user"].get<std::string>() + "\n" + j["id"].get<std::string>();
    seen_commands_[key] = SeenCommand{wall, result};
    seen_order_.emplace_back(wall, key);
  }
}

void Engine::Audit(const CommandRequest& req, std::string_view result, std::string_view error, double now_s) {
  std::string line = "{\"wall_time\":";
  AppendJsonString(FormatIsoUtc(now_s, 3), &line);
  line += ",\"data_time\":";
  const double t = scheduler_.last_tick_s();
  if (std::isfinite(t)) AppendJsonString(FormatIsoUtc(t, 3), &line);
  else line += "null";
  line += ",\"client_user\":";
  AppendJsonString(req.user, &line);
  line += ",\"id\":";
  AppendJsonString(req.id, &line);
  line += ",\"segment\":";
  AppendJsonString(req.segment_id, &line);
  line += ",\"alarm\":";
  AppendJsonString(req.segment >= 0 ? AlarmTypeName(req.alarm) : "", &line);
  line += ",\"command\":";
  AppendJsonString(req.segment >= 0 ? AlarmCommandName(req.command) : "", &line);
  line += ",\"duration_s\":" + (req.duration_s > 0 ? std::to_string(req.duration_s) : std::string("null"));
  line += ",\"reason\":";
  AppendJsonString(req.reason, &line);
  line += ",\"result\":";
  AppendJsonString(result, &line);
  line += ",\"error\":";
  AppendJsonString(error, &line);
  line += "}";
  Log("audit %s", line.c_str());
  line += "\n";
  WriteAuditLine(line);
}

// Appends one line (fdatasync'ed); beyond audit_max_bytes the log is rotated
// first: audit.jsonl.(k) -> .(k+1), audit.jsonl -> .1, the oldest dropped.
void Engine::WriteAuditLine(const std::string& line) {
  if (audit_bytes_ > 0 && audit_bytes_ + line.size() > options_.audit_max_bytes) {
    for (int k = options_.audit_keep - 1; k >= 1; --k)
      ::rename((audit_path_ + "." + std::to_string(k)).c_str(), (audit_path_ + "." + std::to_string(k + 1)).c_str());
    if (::rename(audit_path_.c_str(), (audit_path_ + ".1").c_str()) != 0)
      Log("cannot rotate the audit log %s: %s", audit_path_.c_str(), std::strerror(errno));
    audit_bytes_ = 0;
  }
  const int fd = ::open(audit_path_.c_str(), O_WRONLY | O_CREAT | O_APPEND | O_CLOEXEC, 0640);
  if (fd < 0) {
    Log("cannot open the audit log %s: %s", audit_path_.c_str(), std::strerror(errno));
    return;
  }
  if (::write(fd, line.data(), line.size()) != static_cast<ssize_t>(line.size()) || ::fdatasync(fd) != 0)
    Log("cannot write the audit log %s: %s", audit_path_.c_str(), std::strerror(errno));
  else
    audit_bytes_ += line.size();
  ::close(fd);
}

void Engine::OnConnected(double now_s) {
  connected_ = true;
  connected_wall_s_ = now_s;
  last_heartbeat_s_ = -1e300;  // online status at once
  Poll(now_s);
  std::vector<bool> all(site_.segments.size(), true);
  PublishAlarmStates(all);
  const size_t n = journal_.pending_count();
  if (n > 0) Log("publishing a backlog of %zu alarm events (seq %" PRIu64 "..)", n, journal_.pending(0).seq);
  for (size_t i = 0; i < n; ++i) {
    if (journal_.pending_acked(i)) continue;
    PublishRecord(journal_.pending(i));
    ++counters_.events_republished;
  }
}

void Engine::OnDisconnected() { connected_ = false; }

void Engine::OnAcked(uint64_t seq) {
  ++counters_.events_acked;
  journal_.MarkAcked(seq);  // made durable by the next Poll (one marker write per batch)
}

void Engine::OnPublishFailed(uint64_t seq) {
  // Still in the journal: the next connect publishes it again.
  Log("publishing alarm event seq %" PRIu64 " failed; it stays in the journal", seq);
}

std::string Engine::StatusJson(std::string_view state, double now_s) const {
  std::string s = "{\"state\":";
  AppendJsonString(state, &s);
  s += ",\"client_id\":";
  AppendJsonString(options_.client_id, &s);
  s += ",\"site\":";
  AppendJsonString(site_.name, &s);
  s += ",\"wall_time\":";
  AppendJsonString(FormatIsoUtc(now_s, 3), &s);
  s += ",\"heartbeat\":" + std::to_string(heartbeat_count_);
  s += ",\"data_time\":";
  const double t = scheduler_.last_tick_s();
  if (std::isfinite(t)) AppendJsonString(FormatIsoUtc(t, 3), &s);
  else s += "null";
  s += ",\"feed\":" + FeedJson();
  if (feed_silent_) {
    s += ",\"detail\":";
    AppendJsonString("feed silent since " + FormatIsoUtc(silent_since_wall_s_, 3), &s);
  }
  s += ",\"readings_accepted\":" + std::to_string(counters_.readings_accepted);
  s += ",\"readings_rejected\":{";
  for (int i = 0; i < kRejectCount; ++i) {
    if (i) s += ',';
    s += '"';
    s += RejectName(static_cast<Reject>(i));
    s += "\":" + std::to_string(counters_.readings_rejected[i]);
  }
  const AlignerCounters& a = monitor_.counters();
  s += "},\"aligner\":{\"late\":" + std::to_string(a.late) + ",\"out_of_order\":" + std::to_string(a.out_of_order) +
       ",\"duplicate\":" + std::to_string(a.duplicate) +
       ",\"spike\":" + std::to_string(a.spike) + ",\"held_back\":" + std::to_string(a.held_back) + "}";
  s += ",\"lead_guard\":{\"max_lead_s\":" + std::to_string(options_.max_lead_s) +
       ",\"quarantined\":" + std::to_string(scheduler_.quarantined() - scheduler_.quarantine_released()) +
       ",\"released_by_consensus\":" + std::to_string(scheduler_.quarantine_released()) +
       ",\"clock_jumps\":" + std::to_string(scheduler_.clock_jumps()) + "}";
  s += ",\"events\":" + std::to_string(counters_.events);
  s += ",\"journal_pending\":" + std::to_string(journal_.pending_count());
  s += ",\"next_seq\":" + std::to_string(monitor_.next_sequence());
  s += ",\"commands\":" + std::to_string(counters_.commands);
  s += ",\"commands_rejected\":" + std::to_string(counters_.commands_rejected);
  s += ",\"commands_applied\":" + std::to_string(counters_.commands_applied);
  s += ",\"commands_retained_ignored\":" + std::to_string(counters_.commands_retained_ignored);
  s += ",\"commands_duplicate\":" + std::to_string(counters_.commands_duplicate);
  s += ",\"commands_rate_limited\":" + std::to_string(counters_.commands_rate_limited);
  s += ",\"replay_requests\":" + std::to_string(counters_.replay_requests);
  s += ",\"journal_oldest_seq\":" + std::to_string(journal_.oldest_kept_seq());
  char tick[96];
  std::snprintf(tick, sizeof tick, ",\"tick_ms_mean\":%.3f,\"tick_ms_max\":%.3f",
                counters_.ticks ? counters_.tick_ms_sum / static_cast<double>(counters_.ticks) : 0.0,
                counters_.tick_ms_max);
  s += tick;
  s += "}";
  return s;
}

// {"state": "ok"|"silent"|"waiting", "since": wall time or null, "silence_limit_s": s}
std::string Engine::FeedJson() const {
  std::string s = "{\"state\":";
  if (!std::isfinite(seen_newest_s_)) s += "\"waiting\"";
  else s += feed_silent_ ? "\"silent\"" : "\"ok\"";
  s += ",\"since\":";
  if (feed_silent_) AppendJsonString(FormatIsoUtc(silent_since_wall_s_, 3), &s);
  else s += "null";
  s += ",\"last_reading_wall_time\":";
  if (std::isfinite(seen_newest_s_)) AppendJsonString(FormatIsoUtc(data_moved_wall_s_, 3), &s);
  else s += "null";
  char lim[48];
  std::snprintf(lim, sizeof lim, ",\"silence_limit_s\":%.1f}", feed_silence_s_);
  s += lim;
  return s;
}

std::string Engine::OfflineJson(std::string_view reason) const {
  std::string s = "{\"state\":\"offline\",\"client_id\":";
  AppendJsonString(options_.client_id, &s);
  s += ",\"reason\":";
  AppendJsonString(reason, &s);
  s += "}";
  return s;
}

void Engine::Poll(double now_s) {
  last_now_s_ = now_s;
  if (started_s_ == 0.0) {
    started_s_ = now_s;
    last_checkpoint_s_ = now_s;
  }
  Step();
  Watchdog(now_s);
  std::string why;
  if (!journal_.Commit(&why)) Log("journal retire failed: %s", why.c_str());
  if (link_ && connected_) {
    if (now_s - last_heartbeat_s_ >= options_.heartbeat_period_s) {
      last_heartbeat_s_ = now_s;
      ++heartbeat_count_;
      Publication p;
      p.topic = topics_.Daemon();
      p.payload = StatusJson("online", now_s);
      p.qos = 1;
      p.retained = true;
      link_->Publish(p);
    }
    if (now_s - last_status_s_ >= options_.status_period_s && std::isfinite(scheduler_.last_tick_s())) {
      last_status_s_ = now_s;
      for (int i = 0; i < monitor_.segment_count(); ++i) {
        Publication p;
        p.topic = topics_.Status(site_.segments[static_cast<size_t>(i)].id);
        p.payload = SegmentStatusJson(monitor_, i);
        // The feed as the daemon sees it (the monitor knows only data time).
        p.payload.pop_back();
        p.payload += ",\"feed\":";
        p.payload += FeedJson();
        p.payload += '}';
        p.qos = 0;
        p.retained = true;
        link_->Publish(p);
      }
    }
  }
  if (dirty_ && now_s - last_checkpoint_s_ >= options_.checkpoint_period_s) {
    if (!Checkpoint(&why)) Log("checkpoint failed: %s", why.c_str());
  }
}

bool Engine::Checkpoint(std::string* why) {
  last_checkpoint_s_ = last_now_s_;
  const double t = scheduler_.last_tick_s();
  if (!std::isfinite(t)) return true;  // nothing computed yet
  nlohmann::json doc;
  doc["format"] = kCheckpointFormat;
  doc["site"] = site_.name;
  doc["last_tick_s"] = t;
  doc["last_tick"] = FormatIsoUtc(t, 3);
  doc["monitor"] = monitor_.SaveState();
  if (!WriteFileAtomic(checkpoint_path_, doc.dump(1) + "\n", why)) {
    ++counters_.checkpoint_failures;
    return false;
  }
  ++counters_.checkpoints;
  dirty_ = false;
  return true;
}

}  // namespace holdfast::daemon
