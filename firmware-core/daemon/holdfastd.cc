// holdfastd: the edge daemon. Readings in over MQTT (or from a file),
// through the core Monitor, alarm events out over MQTT at QoS 1, journal
// first. config/DAEMON.md documents the config, the topic tree and the
// protocol.
//
// Threads: the Paho client's threads only push into a bounded queue; the
// main thread owns the Engine (and so the Monitor), drains the queue,
// publishes, and does the periodic work. Connection handling is an explicit
// state machine below (kDisconnected -> kConnecting -> kConnected) with a
// capped exponential reconnect backoff.
#include <dirent.h>
#include <netinet/in.h>
#include <netinet/tcp.h>
#include <signal.h>
#include <sys/socket.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cinttypes>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <string>

#include <mqtt/async_client.h>

#include "bounded_queue.h"
#include "daemon_config.h"
#include "engine.h"
#include "readings_csv.h"

namespace holdfast::daemon {
namespace {

// ---- Time constants --------------------------------------------------------
constexpr double kReconnectMin_s = 0.5;    // first retry after a lost or failed connection
constexpr double kReconnectMax_s = 10.0;   // backoff cap (doubles per failure up to this)
constexpr double kConnectTimeout_s = 10.0; // a connect attempt that takes longer has failed
constexpr double kShutdownWait_s = 3.0;    // for the offline status and the disconnect
constexpr auto kPollInterval = std::chrono::milliseconds(50);  // queue wait between periodic work

std::atomic<bool> g_stop{false};
void OnSignal(int) { g_stop = true; }

double WallNow() {
  return std::chrono::duration<double>(std::chrono::system_clock::now().time_since_epoch()).count();
}

struct Item {
  enum Kind { kMessage, kConnected, kConnectFailed, kLost, kAcked, kPublishFailed } kind = kMessage;
  std::string topic, payload;
  uint64_t seq = 0;
  bool retained = false;
};

// What a failed connect means, for the log (the Paho return code alone says
// little): MQTT 3.1.1 CONNACK codes (OASIS MQTT 3.1.1, section 3.2.2.3) and
// the Paho C client's own codes (MQTTAsync.h).
std::string ConnectFailureText(int rc, bool tls) {
  switch (rc) {
    case 1: return "the broker refused the MQTT protocol version (CONNACK 1)";
    case 2: return "the broker rejected the client id (CONNACK 2; another daemon with the same client_id?)";
    case 3: return "the broker is unavailable (CONNACK 3)";
    case 4: return "authentication failed: the broker refused the user name or password (CONNACK 4; check credentials_file)";
    case 5:
      return "not authorised: the broker refused this client's credentials (CONNACK 5: a wrong user name or "
             "password, or a user or certificate the broker does not admit; check credentials_file)";
    case -1:
      return tls ? "connection failed: TCP refused, or the TLS handshake failed (certificate, CA or host name; see "
                   "any TLS error above), or the broker closed the connection (return code -1)"
                 : "connection failed: TCP refused or closed by the broker (return code -1)";
    case -3: return "disconnected (return code -3)";
    case -13: return "TLS is not supported by this Paho build (return code -13)";
    case -14: return "bad protocol in broker_uri (return code -14)";
    default: return "return code " + std::to_string(rc);
  }
}

using Queue = BoundedQueue<Item>;

class Callbacks final : public mqtt::callback {
 public:
  explicit Callbacks(Queue* q) : q_(q) {}
  void connection_lost(const std::string& cause) override { q_->Push(Item{Item::kLost, {}, cause, 0}); }
  void message_arrived(mqtt::const_message_ptr msg) override {
    q_->Push(Item{Item::kMessage, msg->get_topic(), msg->to_string(), 0, msg->is_retained()});
  }

 private:
  Queue* q_;
};

// Completion of a journaled publish (QoS 1: on PUBACK). The sequence number
// travels as the token's user context.
class AckListener final : public mqtt::iaction_listener {
 public:
  explicit AckListener(Queue* q) : q_(q) {}
  void on_success(const mqtt::token& tok) override {
    q_->Push(Item{Item::kAcked, {}, {}, reinterpret_cast<uintptr_t>(tok.get_user_context())});
  }
  void on_failure(const mqtt::token& tok) override {
    q_->Push(Item{Item::kPublishFailed, {}, {}, reinterpret_cast<uintptr_t>(tok.get_user_context())});
  }

 private:
  Queue* q_;
};

class ConnectListener final : public mqtt::iaction_listener {
 public:
  ConnectListener(Queue* q, bool tls) : q_(q), tls_(tls) {}
  void on_success(const mqtt::token&) override { q_->Push(Item{Item::kConnected, {}, {}, 0}); }
  void on_failure(const mqtt::token& tok) override {
    q_->Push(Item{Item::kConnectFailed, {}, ConnectFailureText(tok.get_return_code(), tls_), 0});
  }

 private:
  Queue* q_;
  bool tls_;
};

class PahoLink final : public Link {
 public:
  PahoLink(mqtt::async_client* client, AckListener* acks) : client_(client), acks_(acks) {}
  bool Publish(const Publication& p) override {
    try {
      auto msg = mqtt::make_message(p.topic, p.payload, p.qos, p.retained);
      if (p.journal_seq > 0)
        client_->publish(msg, reinterpret_cast<void*>(static_cast<uintptr_t>(p.journal_seq)), *acks_);
      else
        client_->publish(msg);
      return true;
    } catch (const mqtt::exception& e) {
      return false;
    }
  }

 private:
  mqtt::async_client* client_;
  AckListener* acks_;
};

enum class LinkState { kDisconnected, kConnecting, kConnected };

// The daemon acknowledges every incoming reading (QoS 1) with a small
// packet; with Nagle's algorithm on, an alarm event published right after
// waits for the broker's delayed TCP ACK (about 40 ms on Linux). The Paho C
// client does not expose its socket or an option for TCP_NODELAY, so after
// each connect the daemon sets it on its own TCP sockets connected to the
// broker's port (found through /proc/self/fd). Best effort: nothing breaks
// without it, alarms are only slower.
int SetNoDelayToPort(int port) {
  int set = 0;
  DIR* d = ::opendir("/proc/self/fd");
  if (!d) return 0;
  while (dirent* e = ::readdir(d)) {
    const int fd = std::atoi(e->d_name);
    if (fd <= 2 || fd == ::dirfd(d)) continue;
    int type = 0;
    socklen_t len = sizeof type;
    if (::getsockopt(fd, SOL_SOCKET, SO_TYPE, &type, &len) != 0 || type != SOCK_STREAM) continue;
    sockaddr_storage peer{};
    socklen_t plen = sizeof peer;
    if (::getpeername(fd, reinterpret_cast<sockaddr*>(&peer), &plen) != 0) continue;
    int peer_port = -1;
    if (peer.ss_family == AF_INET) peer_port = ntohs(reinterpret_cast<sockaddr_in*>(&peer)->sin_port);
    else if (peer.ss_family == AF_INET6) peer_port = ntohs(reinterpret_cast<sockaddr_in6*>(&peer)->sin6_port);
    if (peer_port != port) continue;
    const int one = 1;
    if (::setsockopt(fd, IPPROTO_TCP, TCP_NODELAY, &one, sizeof one) == 0) ++set;
  }
  ::closedir(d);
  return set;
}

int UriPort(const std::string& uri) {
  const size_t colon = uri.find_last_of(':');
  if (colon == std::string::npos) return uri.rfind("ssl://", 0) == 0 ? 8883 : 1883;
  return std::atoi(uri.c_str() + colon + 1);
}

int Usage() {
  std::fprintf(stderr,
               "usage: holdfastd --config DAEMON.json [--input-csv READINGS.csv|-] [--check]\n"
               "  --config     daemon config (holdfast-daemon/1, config/DAEMON.md)\n"
               "  --input-csv  read readings from a CSV file instead of the broker; alarm events\n"
               "               go to standard output as JSON Lines (journal first)\n"
               "  --check      load and check the config, site, credentials and state, then exit\n");
  return 2;
}

int RunFile(Engine* engine, const std::string& path) {
  ReadingsCsvReader reader;
  std::string why;
  // The engine's site is the reader's site.
  if (!reader.Open(path, engine->monitor().site(), &why)) {
    std::fprintf(stderr, "holdfastd: %s\n", why.c_str());
    return 2;
  }
  engine->SetEventStream(stdout);
  Reading r;
  uint64_t n = 0;
  // A release after every reading, as `holdfast replay` and `balance` do:
  // the result depends only on the readings and their order.
  while (!g_stop && reader.Next(&r)) {
    engine->OnReading(r);
    engine->Step();
    ++n;
  }
  engine->Flush();
  if (!engine->Checkpoint(&why)) std::fprintf(stderr, "holdfastd: checkpoint failed: %s\n", why.c_str());
  std::fprintf(stderr, "holdfastd: %s: %" PRIu64 " readings, %" PRIu64 " bad rows, %" PRIu64 " alarm events\n",
               path.c_str(), reader.rows(), reader.bad_rows(), engine->counters().events);
  return 0;
}

int RunBroker(Engine* engine, const DaemonOptions& o) {
  Credentials cred;
  std::string why;
  if (!o.credentials_file.empty() && !ReadCredentialsFile(o.credentials_file, &cred, &why)) {
    std::fprintf(stderr, "holdfastd: %s\n", why.c_str());
    return 2;
  }
  Queue queue(o.queue_capacity);
  Callbacks callbacks(&queue);
  AckListener acks(&queue);
  ConnectListener connect_listener(&queue, o.broker_uri.rfind("ssl://", 0) == 0);
  mqtt::async_client client(o.broker_uri, o.client_id);
  client.set_callback(callbacks);
  PahoLink link(&client, &acks);
  engine->SetLink(&link);

  mqtt::connect_options opts;
  // A persistent session (clean session off) with QoS 1 subscriptions: the
  // broker queues the readings and commands published while the daemon is
  // disconnected or restarting and delivers them on reconnect (within the
  // broker's max_queued_messages; config/DAEMON.md). The daemon subscribes
  // again at every connect all the same (harmless, and needed when the
  // broker lost the session). Its own events do not depend on the session:
  // the journal republishes every unacknowledged one.
  opts.set_clean_session(false);
  opts.set_keep_alive_interval(static_cast<int>(o.keep_alive_s));
  opts.set_connect_timeout(static_cast<int>(kConnectTimeout_s));
  opts.set_max_inflight(1024);
  if (!cred.user.empty()) {
    opts.set_user_name(cred.user);
    opts.set_password(cred.password);
  }
  mqtt::will_options will(engine->topics().Daemon(), engine->OfflineJson("connection_lost"), 1, true);
  opts.set_will(will);
  if (o.broker_uri.rfind("ssl://", 0) == 0) {
    mqtt::ssl_options ssl;
    ssl.set_trust_store(o.tls_ca_file);
    if (!o.tls_cert_file.empty()) {
      ssl.set_key_store(o.tls_cert_file);
      ssl.set_private_key(o.tls_key_file);
    }
    ssl.set_enable_server_cert_auth(true);
    ssl.set_verify(true);  // the certificate must name the host connected to
    // OpenSSL's own words for a failed handshake (called on a Paho thread).
    ssl.set_error_handler([](const std::string& msg) {
      std::fprintf(stderr, "holdfastd: TLS error: %s\n", msg.c_str());
    });
    opts.set_ssl(ssl);
  }
  std::fprintf(stderr, "holdfastd: broker %s as client %s%s%s, topics under %s/\n", o.broker_uri.c_str(),
               o.client_id.c_str(), cred.user.empty() ? "" : ", user ", cred.user.c_str(),
               engine->topics().prefix().c_str());

  LinkState state = LinkState::kDisconnected;
  double backoff_s = kReconnectMin_s, next_attempt_s = 0.0, attempt_started_s = 0.0;
  auto schedule_retry = [&](double now, const std::string& why_text) {
    std::fprintf(stderr, "holdfastd: broker unavailable (%s); retrying in %.1f s\n", why_text.c_str(), backoff_s);
    next_attempt_s = now + backoff_s;
    backoff_s = std::min(backoff_s * 2.0, kReconnectMax_s);
    state = LinkState::kDisconnected;
  };
  while (!g_stop) {
    const double now = WallNow();
    if (state == LinkState::kDisconnected && now >= next_attempt_s) {
      try {
        client.connect(opts, nullptr, connect_listener);
        state = LinkState::kConnecting;
        attempt_started_s = now;
      } catch (const mqtt::exception& e) {
        schedule_retry(now, e.what());
      }
    } else if (state == LinkState::kConnecting && now - attempt_started_s > kConnectTimeout_s + 5.0) {
      schedule_retry(now, "connect timed out");
    }
    Item item;
    int drained = 0;
    if (queue.PopFor(&item, kPollInterval)) {
      do {
        const double t = WallNow();
        switch (item.kind) {
          case Item::kMessage: engine->OnMessage(item.topic, item.payload, t, item.retained); break;
          case Item::kConnected:
            if (state != LinkState::kConnected) {
              state = LinkState::kConnected;
              backoff_s = kReconnectMin_s;
              std::fprintf(stderr, "holdfastd: connected to %s\n", o.broker_uri.c_str());
              SetNoDelayToPort(UriPort(o.broker_uri));
              // Subscribed before the online status goes out: a client that
              // sees "online" can command at once.
              try {
                const auto wait = std::chrono::milliseconds(static_cast<int>(kConnectTimeout_s * 1000));
                for (const std::string& filter : {engine->topics().ReadingsFilter(), engine->topics().ReadingsBatch(),
                                                  engine->topics().CommandsFilter()})
                  if (!client.subscribe(filter, 1)->wait_for(wait))
                    std::fprintf(stderr, "holdfastd: no SUBACK for %s\n", filter.c_str());
              } catch (const mqtt::exception& e) {
                std::fprintf(stderr, "holdfastd: subscribe failed: %s\n", e.what());
              }
              engine->OnConnected(t);
            }
            break;
          case Item::kConnectFailed:
            if (state == LinkState::kConnecting) schedule_retry(t, item.payload);
            break;
          case Item::kLost:
            if (state == LinkState::kConnected) {
              engine->OnDisconnected();
              backoff_s = kReconnectMin_s;
              schedule_retry(t, item.payload.empty() ? std::string("connection lost")
                                                     : "connection lost: " + item.payload);
            }
            break;
          case Item::kAcked: engine->OnAcked(item.seq); break;
          case Item::kPublishFailed: engine->OnPublishFailed(item.seq); break;
        }
        // Tick as soon as a message moves data time on: an alarm waits for
        // no backlog behind it. (Cheap when the watermark has not moved.)
        ++drained;
        if (item.kind == Item::kMessage) engine->Step();
      } while (drained < 4096 && queue.TryPop(&item));
    }
    engine->Poll(WallNow());
  }
  std::fprintf(stderr, "holdfastd: stopping\n");
  engine->Poll(WallNow());
  if (!engine->Checkpoint(&why)) std::fprintf(stderr, "holdfastd: checkpoint failed: %s\n", why.c_str());
  if (state == LinkState::kConnected) {
    try {
      auto tok = client.publish(engine->topics().Daemon(), engine->OfflineJson("shutdown"), 1, true);
      tok->wait_for(std::chrono::milliseconds(static_cast<int>(kShutdownWait_s * 1000)));
    } catch (const mqtt::exception&) {
    }
  }
  queue.Close();
  try {
    if (client.is_connected())
      client.disconnect()->wait_for(std::chrono::milliseconds(static_cast<int>(kShutdownWait_s * 1000)));
  } catch (const mqtt::exception&) {
  }
  return 0;
}

}  // namespace
}  // namespace holdfast::daemon

int main(int argc, char** argv) {
  using namespace holdfast::daemon;
  std::string config, input;
  bool check = false;
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    if (a == "--config" && i + 1 < argc) config = argv[++i];
    else if (a == "--input-csv" && i + 1 < argc) input = argv[++i];
    else if (a == "--check") check = true;
    else if (a == "--help" || a == "-h") return Usage(), 0;
    else return Usage();
  }
  if (config.empty()) return Usage();
  struct sigaction sa {};
  sa.sa_handler = OnSignal;
  sigemptyset(&sa.sa_mask);
  sigaction(SIGTERM, &sa, nullptr);
  sigaction(SIGINT, &sa, nullptr);
  signal(SIGPIPE, SIG_IGN);

  DaemonOptions options;
  std::string why;
  if (!LoadDaemonConfig(config, &options, &why)) {
    std::fprintf(stderr, "holdfastd: %s\n", why.c_str());
    return 2;
  }
  if (input.empty() && options.broker_uri.empty()) {
    std::fprintf(stderr, "holdfastd: %s: no broker_uri; give --input-csv for a site without a broker\n",
                 config.c_str());
    return 2;
  }
  Engine engine;
  if (!engine.Init(options, stderr, &why)) {
    std::fprintf(stderr, "holdfastd: %s\n", why.c_str());
    return 2;
  }
  if (check) {
    Credentials c;
    if (!options.credentials_file.empty() && !ReadCredentialsFile(options.credentials_file, &c, &why)) {
      std::fprintf(stderr, "holdfastd: %s\n", why.c_str());
      return 2;
    }
    std::printf("%s: OK\n", config.c_str());
    return 0;
  }
  if (!input.empty()) return RunFile(&engine, input);
  // The dead-feed watchdog's limit, for the operator reading the log.
  std::fprintf(stderr, "holdfastd: feed declared silent after %.0f s without a reading that moves data time\n",
               engine.feed_silence_s());
  return RunBroker(&engine, options);
}
