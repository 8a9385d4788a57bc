#include "daemon_config.h"

#include "holdfast/json_check.h"

#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cstdint>

#include <cerrno>
#include <cmath>
#include <cstring>
#include <fstream>
#include <set>
#include <sstream>

#include <nlohmann/json.hpp>

namespace holdfast::daemon {
namespace {

std::string DirOf(const std::string& path) {
  const size_t slash = path.find_last_of('/');
  if (slash == std::string::npos) return ".";
  return slash == 0 ? "/" : path.substr(0, slash);
}

std::string Resolve(const std::string& dir, const std::string& p) {
  if (p.empty() || p[0] == '/') return p;
  return dir + "/" + p;
}

}  // namespace

bool DaemonOptions::IsValid(std::string* why) const {
  auto fail = [&](const std::string& m) {
    if (why) *why = m;
    return false;
  };
  if (site_file.empty()) return fail("site_file: required");
  if (!broker_uri.empty()) {
    const bool tls = broker_uri.rfind("ssl://", 0) == 0;
    if (!tls && broker_uri.rfind("tcp://", 0) != 0)
      return fail("broker_uri: must start with tcp:// or ssl:// (got \"" + broker_uri + "\")");
    if (tls && tls_ca_file.empty()) return fail("tls_ca_file: required with an ssl:// broker_uri");
    if (!tls && (!tls_ca_file.empty() || !tls_cert_file.empty()))
      return fail("tls_ca_file/tls_cert_file: given, but broker_uri is not ssl://");
    if (tls_cert_file.empty() != tls_key_file.empty())
      return fail("tls_cert_file and tls_key_file: give both or neither");
    if (client_id.empty() || client_id.size() > 64) return fail("client_id: 1 to 64 characters");
  }
  if (topic_prefix.empty() || topic_prefix.back() == '/' || topic_prefix.front() == '/' ||
      topic_prefix.find_first_of("+#") != std::string::npos)
    return fail("topic_prefix: non-empty, no leading or trailing '/', no wildcards (got \"" + topic_prefix + "\")");
  if (journal_dir.empty()) return fail("journal_dir: required");
  if (state_dir.empty()) return fail("state_dir: required");
  auto positive = [&](double v, const char* name) {
    if (!(v > 0.0) || !std::isfinite(v)) {
      if (why) *why = std::string(name) + ": must be a positive number of seconds";
      return false;
    }
    return true;
  };
  if (!positive(keep_alive_s, "keep_alive_s") || !positive(checkpoint_period_s, "checkpoint_period_s") ||
      !positive(status_period_s, "status_period_s") || !positive(heartbeat_period_s, "heartbeat_period_s") ||
      !positive(max_tick_gap_s, "max_tick_gap_s") || !positive(journal_history_days, "journal_history_days") ||
      !positive(command_dedup_s, "command_dedup_s"))
    return false;
  if (!(max_lead_s >= 0.0) || !std::isfinite(max_lead_s)) return fail("max_lead_s: must be >= 0 seconds (0: off)");
  if (max_lead_s > 0.0 && max_lead_s < tick_lateness_s)
    return fail("max_lead_s: must be at least tick_lateness_s (the reorder window)");
  if (lead_quorum_points < 1 || lead_quorum_points > 1000) return fail("lead_quorum_points: 1 to 1000");
  if (!(feed_silence_s >= 0.0) || !std::isfinite(feed_silence_s))
    return fail("feed_silence_s: must be >= 0 seconds (0: the largest point staleness)");
  if (journal_history_bytes > (1ull << 32)) return fail("journal_history_bytes: at most 4294967296");
  if (!(commands_per_minute > 0.0) || !std::isfinite(commands_per_minute))
    return fail("commands_per_minute: must be positive");
  if (!(command_burst >= 1.0) || !std::isfinite(command_burst)) return fail("command_burst: must be at least 1");
  if (audit_max_bytes < 4096) return fail("audit_max_bytes: at least 4096");
  if (audit_keep < 1 || audit_keep > 100) return fail("audit_keep: 1 to 100");
  if (!(tick_lateness_s >= 0.0) || !std::isfinite(tick_lateness_s))
    return fail("tick_lateness_s: must be >= 0 seconds");
  if (!(max_future_s >= 0.0) || !std::isfinite(max_future_s)) return fail("max_future_s: must be >= 0 seconds");
  if (max_payload_bytes < 64 || max_payload_bytes > (16u << 20)) return fail("max_payload_bytes: 64 to 16777216");
  if (max_batch < 1 || max_batch > 100000) return fail("max_batch: 1 to 100000");
  if (queue_capacity < 16 || queue_capacity > (1u << 24)) return fail("queue_capacity: 16 to 16777216");
  for (const std::string& o : operators)
    if (o.empty() || o.size() > 31) return fail("operators: each name 1 to 31 characters");
  return true;
}

bool LoadDaemonConfig(const std::string& path, DaemonOptions* options, std::string* why) {
  std::ifstream in(path, std::ios::binary);
  if (!in) {
    if (why) *why = path + ": cannot read the file: " + std::strerror(errno);
    return false;
  }
  std::stringstream ss;
  ss << in.rdbuf();
  // Parse errors at "file:line:column", repeated keys at their pointer
  // (json_check.h), as every other file the project reads.
  nlohmann::json doc;
  std::vector<ConfigProblem> parsed;
  if (!ParseJsonText(ss.str(), path, &doc, &parsed)) {
    std::string m;
    for (const ConfigProblem& p : parsed) {
      if (!m.empty()) m += "; ";
      m += (p.path.rfind(path, 0) == 0 ? p.path : path + ":" + p.path) + ": " + p.message;
    }
    if (why) *why = m;
    return false;
  }
  if (!doc.is_object()) {
    if (why) *why = path + ": not a JSON object";
    return false;
  }
  std::vector<std::string> problems;
  auto problem = [&](const std::string& key, const std::string& m) { problems.push_back(path + ":/" + key + ": " + m); };
  DaemonOptions o;
  const std::string dir = DirOf(path);
  if (!doc.contains("format") || doc["format"] != kDaemonConfigFormat)
    problem("format", std::string("expected \"") + kDaemonConfigFormat + "\"");
  auto get_string = [&](const char* key, std::string* out, bool is_path) {
    if (!doc.contains(key)) return;
    if (!doc[key].is_string()) return problem(key, "must be a string");
    *out = is_path ? Resolve(dir, doc[key].get<std::string>()) : doc[key].get<std::string>();
  };
  auto get_number = [&](const char* key, double* out) {
    if (!doc.contains(key)) return;
    if (!doc[key].is_number()) return problem(key, "must be a number");
    *out = doc[key].get<double>();
  };
  auto get_size = [&](const char* key, std::size_t* out) {
    if (!doc.contains(key)) return;
    if (!doc[key].is_number_unsigned()) return problem(key, "must be a non-negative integer");
    *out = doc[key].get<std::size_t>();
  };
  static const std::set<std::string> known = {
      "format", "site_file", "tuning_file", "broker_uri", "client_id", "credentials_file", "tls_ca_file",
      "tls_cert_file", "tls_key_file", "keep_alive_s", "topic_prefix", "journal_dir", "state_dir",
      "checkpoint_period_s", "status_period_s", "heartbeat_period_s", "tick_lateness_s", "max_future_s",
      "max_tick_gap_s", "max_payload_bytes", "max_batch", "queue_capacity", "operators", "comment",
      "max_lead_s", "lead_quorum_points", "feed_silence_s", "journal_history_days", "journal_history_bytes",
      "command_dedup_s", "commands_per_minute", "command_burst", "audit_max_bytes", "audit_keep"};
  for (auto it = doc.begin(); it != doc.end(); ++it)
    if (!known.count(it.key())) problem(it.key(), "unknown key");
  get_string("site_file", &o.site_file, true);
  get_string("tuning_file", &o.tuning_file, true);
  get_string("broker_uri", &o.broker_uri, false);
  get_string("client_id", &o.client_id, false);
  get_string("credentials_file", &o.credentials_file, true);
  get_string("tls_ca_file", &o.tls_ca_file, true);
  get_string("tls_cert_file", &o.tls_cert_file, true);
  get_string("tls_key_file", &o.tls_key_file, true);
  get_number("keep_alive_s", &o.keep_alive_s);
  get_string("topic_prefix", &o.topic_prefix, false);
  get_string("journal_dir", &o.journal_dir, true);
  get_string("state_dir", &o.state_dir, true);
  get_number("checkpoint_period_s", &o.checkpoint_period_s);
  get_number("status_period_s", &o.status_period_s);
  get_number("heartbeat_period_s", &o.heartbeat_period_s);
  get_number("tick_lateness_s", &o.tick_lateness_s);
  get_number("max_future_s", &o.max_future_s);
  get_number("max_tick_gap_s", &o.max_tick_gap_s);
  get_size("max_payload_bytes", &o.max_payload_bytes);
  get_size("max_batch", &o.max_batch);
  get_size("queue_capacity", &o.queue_capacity);
  get_number("max_lead_s", &o.max_lead_s);
  if (doc.contains("lead_quorum_points")) {
    if (!doc["lead_quorum_points"].is_number_unsigned()) problem("lead_quorum_points", "must be a positive integer");
    else o.lead_quorum_points = static_cast<int>(std::min<uint64_t>(doc["lead_quorum_points"].get<uint64_t>(), 100000));
  }
  get_number("feed_silence_s", &o.feed_silence_s);
  get_number("journal_history_days", &o.journal_history_days);
  get_size("journal_history_bytes", &o.journal_history_bytes);
  get_number("command_dedup_s", &o.command_dedup_s);
  get_number("commands_per_minute", &o.commands_per_minute);
  get_number("command_burst", &o.command_burst);
  get_size("audit_max_bytes", &o.audit_max_bytes);
  if (doc.contains("audit_keep")) {
    if (!doc["audit_keep"].is_number_unsigned()) problem("audit_keep", "must be a positive integer");
    else o.audit_keep = static_cast<int>(std::min<uint64_t>(doc["audit_keep"].get<uint64_t>(), 1000));
  }
  if (doc.contains("operators")) {
    if (!doc["operators"].is_array()) {
      problem("operators", "must be an array of user names");
    } else {
      for (const auto& u : doc["operators"]) {
        if (!u.is_string()) {
          problem("operators", "must be an array of user names");
          break;
        }
        o.operators.push_back(u.get<std::string>());
      }
    }
  }
  std::string reason;
  if (problems.empty() && !o.IsValid(&reason)) problems.push_back(path + ":/" + reason);
  if (!problems.empty()) {
    if (why) {
      why->clear();
      for (const std::string& p : problems) *why += (why->empty() ? "" : "\n") + p;
    }
    return false;
  }
  *options = o;
  return true;
}

}  // namespace holdfast::daemon
