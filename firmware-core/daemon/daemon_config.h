// The daemon's own configuration file ("holdfast-daemon/1"): which site it
// monitors, which broker it talks to and how, where it keeps its journal and
// checkpoints, and its periods and input limits. Documented in config/DAEMON.md.
#pragma once

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

struct Credentials {
  std::string user;
  std::string password;  // never logged
};

// Reads a credentials file: line 1 the user name, line 2 the password.
// Refuses (false, with the reason, never the content) a file that is not a
// regular file or that group or others can read, write or execute.
bool ReadCredentialsFile(const std::string& path, Credentials* out, std::string* why);

}  // namespace holdfast::daemon
