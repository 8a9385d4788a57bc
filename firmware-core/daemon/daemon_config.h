// The daemon's own configuration file ("holdfast-daemon/1"): which site it
// monitors, which broker it talks to and how, where it keeps its journal and
// checkpoints, and its periods and input limits. Documented in config/DAEMON.md.
#pragma once

#include "credentials.h"  // Credentials, ReadCredentialsFile (shared with `holdfast alarms`)

#include <string>
#include <vector>

namespace holdfast::daemon {

inline constexpr const char* kDaemonConfigFormat = "holdfast-daemon/1";

// Defaults are the documented ones (config/DAEMON.md).
struct DaemonOptions {
  // Site file ("holdfast-site/1"); relative paths are taken from the daemon
  // config file's directory.
  std::string site_file;
  // Optional tuning file ("holdfast-tuning/1") that seeds the decision stage
  // on a cold start (no checkpoint yet).
  std::string tuning_file;

  // Broker. Empty URI: no broker (file input only; events go to standard
  // output as JSON Lines). "tcp://host:port" plain, "ssl://host:port" TLS.
  std::string broker_uri;
  std::string client_id = "holdfastd";
  // File with two lines, user name then password; must not be readable by
  // group or others. Empty: connect without credentials.
  std::string credentials_file;
  // TLS (ssl:// URIs): CA bundle that signs the broker's certificate
  // (required for ssl://), optional client certificate and key.
  std::string tls_ca_file;
  std::string tls_cert_file;
  std::string tls_key_file;
  double keep_alive_s = 20.0;

  // Topic prefix: every topic is "<prefix>/..." (config/DAEMON.md). One
  // daemon per prefix; a fleet gives each daemon its own prefix.
  std::string topic_prefix = "holdfast/v1/site";

  // Alarm journal and checkpoint directories (created if missing).
  std::string journal_dir = "journal";
  std::string state_dir = "state";

  // Wall-clock periods, s.
  double checkpoint_period_s = 60.0;  // plus a checkpoint after every tick that raised events
  double status_period_s = 10.0;      // retained segment status
  double heartbeat_period_s = 30.0;   // retained daemon status (online)

  // Data time. Readings wait this long (data time, behind the newest
  // reading seen) in a reorder buffer before their tick is computed, so that
  // readings of one second from different sources arrive in any order.
  double tick_lateness_s = 2.0;
  // A reading more than this far ahead of the daemon's wall clock is absurd
  // (rejected, counted). 0 disables the check.
  double max_future_s = 600.0;
  // A jump of data time beyond this is not stepped tick by tick: the monitor
  // jumps to the new time (one tick) so that a bad clock cannot stall it.
  double max_tick_gap_s = 6.0 * 3600.0;
  // Lead guard (io/replay_driver.h, TickScheduler): a reading stamped more
  // than this ahead of data time is quarantined and counted and never moves
  // the clock, unless lead_quorum_points different points agree on the new
  // time. 0 disables the guard.
  double max_lead_s = 60.0;
  int lead_quorum_points = 2;
  // Dead-feed watchdog (wall clock): when data time has not advanced for
  // this long while connected, the feed is declared silent (status and
  // heartbeat say since when) and the monitor is ticked on with the wall
  // clock, so that its staleness rules raise balance_unavailable and
  // data_quality. 0: the largest staleness_s of the site's points.
  double feed_silence_s = 0.0;

  // Journal history: acknowledged events stay this long (wall clock, days)
  // and within this many bytes, for replay-by-sequence requests.
  double journal_history_days = 7.0;
  std::size_t journal_history_bytes = 16u << 20;

  // Commands: a command id seen from the same user within this window is
  // not applied again (answered as a duplicate); each user may send this
  // many commands per minute, with bursts up to command_burst (more are
  // dropped and counted, without an audit write each).
  double command_dedup_s = 3600.0;
  double commands_per_minute = 30.0;
  double command_burst = 10.0;
  // Audit log rotation: audit.jsonl is moved to audit.jsonl.1 (.1 to .2, ...)
  // beyond this size; audit_keep rotated files are kept.
  std::size_t audit_max_bytes = 1u << 20;
  int audit_keep = 3;

  // Input limits.
  std::size_t max_payload_bytes = 64 * 1024;
  std::size_t max_batch = 1000;
  std::size_t queue_capacity = 65536;  // messages between the MQTT callbacks and the monitor thread

  // Users allowed to command alarms (on top of the broker's ACL). Empty: any
  // user the broker lets publish on the command topic.
  std::vector<std::string> operators;

  bool IsValid(std::string* why) const;
};

// Reads, parses and checks the file; relative paths in it are resolved
// against the file's directory. False with every problem, each naming the
// file and the field ("daemon.json:/status_period_s: must be positive").
bool LoadDaemonConfig(const std::string& path, DaemonOptions* options, std::string* why);



}  // namespace holdfast::daemon
