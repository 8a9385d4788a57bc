// The daemon's topic tree, version 1 (config/DAEMON.md). Every topic starts
// with the configured prefix P (e.g. "holdfast/v1/quillfen"):
//
//   P/readings/<point>    in   one reading, or an array of readings, of one point
//   P/readings            in   a batch: array of readings, each naming its point
//   P/commands/<user>     in   alarm commands; the broker ACL lets a user
//                              publish only under its own name (%u)
//   P/events/<segment>    out  alarm events, QoS 1, journal first
//   P/alarms/<segment>    out  current alarm states of the segment, retained
//   P/status/<segment>    out  periodic segment status, retained
//   P/daemon              out  online/offline (last will) and heartbeats, retained
//   P/replies/<user>      out  answers to that user's commands, QoS 1
#pragma once

#include <string>
#include <string_view>

namespace holdfast::daemon {

enum class TopicKind : uint8_t { kUnknown, kPointReadings, kBatchReadings, kCommand };

struct TopicMatch {
  TopicKind kind = TopicKind::kUnknown;
  std::string_view arg;  // point id or user name; empty otherwise
};

class TopicTree {
 public:
  explicit TopicTree(std::string prefix) : prefix_(std::move(prefix)) {}
  const std::string& prefix() const { return prefix_; }

  std::string Readings(std::string_view point) const { return prefix_ + "/readings/" + std::string(point); }
  std::string ReadingsBatch() const { return prefix_ + "/readings"; }
  std::string Command(std::string_view user) const { return prefix_ + "/commands/" + std::string(user); }
  std::string Events(std::string_view segment) const { return prefix_ + "/events/" + std::string(segment); }
  std::string Alarms(std::string_view segment) const { return prefix_ + "/alarms/" + std::string(segment); }
  std::string Status(std::string_view segment) const { return prefix_ + "/status/" + std::string(segment); }
  std::string Daemon() const { return prefix_ + "/daemon"; }
  std::string Reply(std::string_view user) const { return prefix_ + "/replies/" + std::string(user); }

  // Subscription filters of the daemon.
  std::string ReadingsFilter() const { return prefix_ + "/readings/+"; }
  std::string CommandsFilter() const { return prefix_ + "/commands/+"; }

  // What an incoming topic is; the view points into `topic`.
  TopicMatch Classify(std::string_view topic) const;

 private:
  std::string prefix_;
};

// True when `level` can be one topic level: non-empty, at most 128 bytes, no
// '/', '+', '#' or control characters.
bool IsTopicLevel(std::string_view level);

}  // namespace holdfast::daemon
