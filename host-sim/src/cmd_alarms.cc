// `holdfast alarms watch | ack | shelve | unshelve | remove | restore`: a
// small command line for engineers to follow a holdfastd's alarm events and
// to send it alarm commands over MQTT (protocol: config/DAEMON.md).
//
//   holdfast alarms watch --broker tcp://host:1883 --prefix holdfast/v1/quillfen --credentials ~/.holdfast-cred
//   holdfast alarms ack --segment QS-1 --alarm leak --broker ... --prefix ... --credentials ...
//   holdfast alarms shelve --segment QS-1 --alarm leak --for 3600 --reason "pigging run" ...
//
// The credentials file holds the user name (line 1) and password (line 2);
// commands go to <prefix>/commands/<user> and the answer is read from
// <prefix>/replies/<user>. `watch` de-duplicates events by (segment, seq):
// after a broker outage the daemon sends its backlog again.
#include <unistd.h>

#include <chrono>
#include <cmath>
#include <condition_variable>
#include <cstdio>
#include <mutex>
#include <set>
#include <string>
#include <thread>
#include <utility>

#include <mqtt/async_client.h>
#include <nlohmann/json.hpp>

#include "cli_commands.h"
#include "credentials.h"
#include "holdfast/alarm.h"
#include "topics.h"

namespace holdfast::cli {
namespace {

constexpr double kConnectTimeout_s = 10.0;
// A shelve asked for longer than this is refused here, before sending: it is
// almost surely a unit slip (the daemon would cap it at the alarm's
// max_shelve_s anyway).
constexpr double kMaxShelveRequest_s = 30.0 * 86400.0;
// Exit status (main.cc): 1 runtime failure, 2 usage error.
constexpr int kExitRuntime = 1;
constexpr int kExitUsage = 2;

struct AlarmsArgs {
  std::string broker = "tcp://127.0.0.1:1883";
  std::string prefix = "holdfast/v1/site";
  std::string credentials, cafile, cert, key;
  std::string segment, alarm, reason;
  double duration_s = 0.0;
  double timeout_s = 15.0;
  int count = 0;  // watch: exit after this many distinct events (0 = forever)
  long long since_seq = -1;  // watch: ask the daemon for the events from this seq (replay request)
  bool json = false;
};

// The credentials file, read as holdfastd reads its own (credentials.h).
bool ReadCredentials(const std::string& path, std::string* user, std::string* password) {
  daemon::Credentials c;
  std::string why;
  if (!daemon::ReadCredentialsFile(path, &c, &why)) {
    std::fprintf(stderr, "holdfast alarms: %s\n", why.c_str());
    return false;
  }
  *user = std::move(c.user);
  *password = std::move(c.password);
  return true;
}

// A connected client with a queue of received messages.
class Session : public mqtt::callback {
 public:
  explicit Session(const AlarmsArgs& a)
      : client_(a.broker, "holdfast-alarms-" + std::to_string(::getpid())) {
    client_.set_callback(*this);
  }
  // 0 when connected; kExitUsage for an unusable credentials file;
  // kExitRuntime when the broker cannot be reached or refuses.
  int Connect(const AlarmsArgs& a, std::string* user) {
    mqtt::connect_options o;
    o.set_clean_session(true);
    o.set_connect_timeout(static_cast<int>(kConnectTimeout_s));
    std::string password;
    if (!a.credentials.empty()) {
      if (!ReadCredentials(a.credentials, user, &password)) return kExitUsage;
      o.set_user_name(*user);
      o.set_password(password);
    }
    if (a.broker.rfind("ssl://", 0) == 0) {
      mqtt::ssl_options ssl;
      if (!a.cafile.empty()) ssl.set_trust_store(a.cafile);
      if (!a.cert.empty()) {
        ssl.set_key_store(a.cert);
        ssl.set_private_key(a.key);
      }
      ssl.set_enable_server_cert_auth(true);
      ssl.set_verify(true);
      o.set_ssl(ssl);
    }
    try {
      client_.connect(o)->wait();
    } catch (const mqtt::exception& e) {
      std::fprintf(stderr, "holdfast alarms: cannot connect to %s: %s\n", a.broker.c_str(), e.what());
      return kExitRuntime;
    }
    return 0;
  }
  bool Subscribe(const std::string& filter) {
    try {
      client_.subscribe(filter, 1)->wait();
      return true;
    } catch (const mqtt::exception& e) {
      std::fprintf(stderr, "holdfast alarms: cannot subscribe to %s: %s\n", filter.c_str(), e.what());
      return false;
    }
  }
  bool Publish(const std::string& topic, const std::string& payload) {
    try {
      client_.publish(topic, payload, 1, false)->wait();
      return true;
    } catch (const mqtt::exception& e) {
      std::fprintf(stderr, "holdfast alarms: cannot publish on %s: %s\n", topic.c_str(), e.what());
      return false;
    }
  }
  // Next message within timeout_s (NaN: wait forever); false on timeout.
  bool Next(double timeout_s, std::pair<std::string, std::string>* out) {
    std::unique_lock<std::mutex> lock(mu_);
    auto ready = [&] { return !queue_.empty() || lost_; };
    if (std::isnan(timeout_s)) cv_.wait(lock, ready);
    else if (!cv_.wait_for(lock, std::chrono::duration<double>(timeout_s), ready)) return false;
    if (queue_.empty()) return false;
    *out = std::move(queue_.front());
    queue_.erase(queue_.begin());
    return true;
  }
  bool lost() const { return lost_; }
  void Disconnect() {
    try {
      if (client_.is_connected()) client_.disconnect()->wait_for(std::chrono::seconds(3));
    } catch (const mqtt::exception&) {
    }
  }
  void message_arrived(mqtt::const_message_ptr m) override {
    std::lock_guard<std::mutex> lock(mu_);
    queue_.emplace_back(m->get_topic(), m->to_string());
    cv_.notify_one();
  }
  void connection_lost(const std::string&) override {
    std::lock_guard<std::mutex> lock(mu_);
    lost_ = true;
    cv_.notify_one();
  }

 private:
  mqtt::async_client client_;
  std::mutex mu_;
  std::condition_variable cv_;
  std::vector<std::pair<std::string, std::string>> queue_;
  bool lost_ = false;
};

std::string Str(const nlohmann::json& j, const char* key) {
  return j.contains(key) && j[key].is_string() ? j[key].get<std::string>() : std::string("-");
}

int Watch(const AlarmsArgs& a) {
  Session s(a);
  std::string user;
  if (const int rc = s.Connect(a, &user)) return rc;
  const daemon::TopicTree topics(a.prefix);
  if (!s.Subscribe(topics.Events("#"))) return kExitRuntime;
  std::fprintf(stderr, "holdfast alarms: watching %s/events/# on %s\n", a.prefix.c_str(), a.broker.c_str());
  if (a.since_seq >= 0) {
    // Catch up: the daemon republishes every event it still keeps from this
    // seq on (config/DAEMON.md, "Replay by sequence number"); duplicates of
    // what arrives live are dropped below by (segment, seq).
    if (user.empty()) {
      std::fprintf(stderr, "holdfast alarms watch: --since-seq needs --credentials (the request goes out under your user)\n");
      return 2;
    }
    const std::string req = "{\"id\":\"watch-" + std::to_string(::getpid()) + "\",\"replay_from_seq\":" +
                            std::to_string(a.since_seq) + "}";
    if (!s.Publish(topics.Command(user), req)) return 1;
    std::fprintf(stderr, "holdfast alarms: asked for the events from seq %lld\n", a.since_seq);
  }
  std::set<std::pair<std::string, uint64_t>> seen;
  int shown = 0;
  const double wait = a.count > 0 ? a.timeout_s : std::nan("");
  std::pair<std::string, std::string> m;
  while (a.count == 0 || shown < a.count) {
    if (!s.Next(wait, &m)) {
      if (s.lost()) {
        std::fprintf(stderr, "holdfast alarms: connection lost\n");
        return 1;
      }
      std::fprintf(stderr, "holdfast alarms: %d of %d events within %.0f s\n", shown, a.count, a.timeout_s);
      return 1;
    }
    const nlohmann::json e = nlohmann::json::parse(m.second, nullptr, false);
    if (e.is_discarded() || !e.is_object() || !e.contains("seq") || !e["seq"].is_number_unsigned()) {
      std::fprintf(stderr, "holdfast alarms: ignored a malformed message on %s\n", m.first.c_str());
      continue;
    }
    if (!seen.insert({Str(e, "segment"), e["seq"].get<uint64_t>()}).second) continue;  // a re-sent backlog
    ++shown;
    if (a.json) {
      std::printf("%s\n", m.second.c_str());
    } else {
      std::string evidence;
      if (e.contains("leak_rate_kg_s") && e["leak_rate_kg_s"].is_number()) {
        char buf[96];
        std::snprintf(buf, sizeof buf, "  leak %.2f kg/s", e["leak_rate_kg_s"].get<double>());
        evidence += buf;
        if (e.contains("location_m") && e["location_m"].is_number()) {
          std::snprintf(buf, sizeof buf, " at km %.1f", e["location_m"].get<double>() / 1000.0);
          evidence += buf;
        }
      }
      const std::string by = Str(e, "user");
      std::printf("%s  %-8s %-20s %-15s -> %-15s %-21s seq %llu%s%s\n", Str(e, "time").c_str(),
                  Str(e, "segment").c_str(), Str(e, "type").c_str(), Str(e, "from").c_str(), Str(e, "state").c_str(),
                  Str(e, "cause").c_str(), static_cast<unsigned long long>(e["seq"].get<uint64_t>()),
                  by.empty() || by == "-" ? "" : ("  by " + by).c_str(), evidence.c_str());
    }
    std::fflush(stdout);
  }
  s.Disconnect();
  return 0;
}

int SendCommand(const AlarmsArgs& a, const std::string& command) {
  if (a.segment.empty()) {
    std::fprintf(stderr, "holdfast alarms %s: --segment is required\n", command.c_str());
    return 2;
  }
  AlarmType type;
  if (!ParseAlarmType(a.alarm, &type)) {
    std::fprintf(stderr, "holdfast alarms %s: --alarm: unknown alarm '%s'; one of: leak, rupture, data_quality, "
                 "balance_unavailable\n", command.c_str(), a.alarm.c_str());
    return kExitUsage;
  }
  if (command == "shelve" && !(std::isfinite(a.duration_s) && a.duration_s > 0.0 &&
                               a.duration_s <= kMaxShelveRequest_s)) {
    std::fprintf(stderr, "holdfast alarms shelve: --for: the duration must be a number of seconds above 0 and at "
                 "most %.0f (30 days; got %g); the daemon caps it at the alarm's max_shelve_s\n",
                 kMaxShelveRequest_s, a.duration_s);
    return kExitUsage;
  }
  if (a.credentials.empty()) {
    std::fprintf(stderr, "holdfast alarms %s: --credentials is required (the daemon acts on your user name)\n",
                 command.c_str());
    return 2;
  }
  Session s(a);
  std::string user;
  if (const int rc = s.Connect(a, &user)) return rc;
  const daemon::TopicTree topics(a.prefix);
  if (!s.Subscribe(topics.Reply(user))) return kExitRuntime;
  nlohmann::json c;
  const std::string id = "cli-" + std::to_string(::getpid()) + "-" +
                         std::to_string(std::chrono::system_clock::now().time_since_epoch().count() % 1000000);
  c["id"] = id;
  c["segment"] = a.segment;
  c["alarm"] = a.alarm;
  c["command"] = command;
  c["user"] = user;
  if (command == "shelve") c["duration_s"] = a.duration_s;
  if (!a.reason.empty()) c["reason"] = a.reason;
  if (!s.Publish(topics.Command(user), c.dump())) return kExitRuntime;
  const auto deadline = std::chrono::steady_clock::now() + std::chrono::duration<double>(a.timeout_s);
  std::pair<std::string, std::string> m;
  while (std::chrono::steady_clock::now() < deadline) {
    const double left = std::chrono::duration<double>(deadline - std::chrono::steady_clock::now()).count();
    if (!s.Next(std::max(0.0, left), &m)) break;
    const nlohmann::json r = nlohmann::json::parse(m.second, nullptr, false);
    if (r.is_discarded() || !r.is_object() || Str(r, "id") != id) continue;
    const bool ok = r.contains("ok") && r["ok"].is_boolean() && r["ok"].get<bool>();
    std::printf("%s %s %s %s: %s%s%s\n", command.c_str(), a.segment.c_str(), a.alarm.c_str(),
                ok ? "done" : "REFUSED", Str(r, "result").c_str(),
                Str(r, "state") == "" || Str(r, "state") == "-" ? "" : (", state " + Str(r, "state")).c_str(),
                Str(r, "error") == "" || Str(r, "error") == "-" ? "" : (" (" + Str(r, "error") + ")").c_str());
    s.Disconnect();
    return ok ? 0 : 1;
  }
  std::fprintf(stderr,
               "holdfast alarms %s: no reply within %.0f s (is holdfastd running, and may %s publish on %s/commands/%s?)\n",
               command.c_str(), a.timeout_s, user.c_str(), a.prefix.c_str(), user.c_str());
  s.Disconnect();
  return 1;
}

void AddCommon(CLI::App* c, AlarmsArgs* a) {
  c->add_option("--broker", a->broker, "broker URI (tcp://host:port or ssl://host:port)")->capture_default_str();
  c->add_option("--prefix", a->prefix, "the daemon's topic prefix")->capture_default_str();
  c->add_option("--credentials", a->credentials, "file: user name on line 1, password on line 2 (mode 600)");
  c->add_option("--cafile", a->cafile, "CA certificate for ssl://");
  c->add_option("--cert", a->cert, "client certificate for ssl://");
  c->add_option("--key", a->key, "client key for ssl://");
  c->add_option("--timeout", a->timeout_s, "seconds to wait for a reply (or, with --count, for the events)")
      ->capture_default_str();
}

void AddTarget(CLI::App* c, AlarmsArgs* a) {
  c->add_option("--segment", a->segment, "segment id")->required();
  c->add_option("--alarm", a->alarm, "which alarm: leak | rupture | data_quality | balance_unavailable (required)")
      ->required();
  c->add_option("--reason", a->reason, "free text for the audit log");
}

void Register(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<AlarmsArgs>();
  CLI::App* alarms = app.add_subcommand("alarms", "follow a holdfastd's alarm events and send it alarm commands");
  alarms->require_subcommand(1);
  CLI::App* watch = alarms->add_subcommand("watch", "print alarm events as they arrive (de-duplicated by segment, seq)");
  AddCommon(watch, args.get());
  watch->add_option("--count", args->count, "exit after this many events (0: run until interrupted)");
  watch->add_option("--since-seq", args->since_seq,
                    "first ask the daemon for every event it keeps from this sequence number on (catch-up)")
      ->check(CLI::NonNegativeNumber);
  watch->add_flag("--json", args->json, "print the events as JSON Lines");
  watch->callback([args, exit_code] { *exit_code = Watch(*args); });
  const std::pair<const char*, const char*> commands[] = {
      {"ack", "acknowledge"}, {"shelve", "shelve"}, {"unshelve", "unshelve"},
      {"remove", "remove_from_service"}, {"restore", "return_to_service"}};
  for (const auto& [name, command] : commands) {
    CLI::App* c = alarms->add_subcommand(name, std::string("send ") + command + " and print the daemon's answer");
    AddCommon(c, args.get());
    AddTarget(c, args.get());
    if (std::string(name) == "shelve")
      c->add_option("--for", args->duration_s, "shelve duration, s (capped by the alarm's maximum)")->required();
    const std::string cmd = command;
    c->callback([args, exit_code, cmd] { *exit_code = SendCommand(*args, cmd); });
  }
}

HOLDFAST_REGISTER_COMMAND(Register);

}  // namespace
}  // namespace holdfast::cli
