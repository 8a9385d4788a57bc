// Alarm commands as they arrive on P/commands/<user> (config/DAEMON.md):
//
//   {"id": "c-17", "segment": "QS-1", "alarm": "leak", "command": "shelve",
//    "duration_s": 3600, "user": "alice", "reason": "pigging run"}
//
//   id          required, 1-64 characters, echoed in the reply
//   segment     segment id from the site file
//   alarm       leak | rupture | data_quality | balance_unavailable
//   command     acknowledge | shelve | unshelve | remove_from_service | return_to_service
//   duration_s  shelve only, required: seconds, > 0 (capped by the alarm's maximum)
//   user        optional; if given it must be the <user> of the topic
//   reason      optional free text (up to 200 characters), kept in the audit log
//
// The user of record is the topic's <user>: the broker's ACL lets a client
// publish only under its own user name, so it is the client's identity.
// Suppression is design logic, not an operator command, and is refused.
#pragma once

#include <string>
#include <string_view>
#include <unordered_map>
#include <vector>

#include "holdfast/alarm.h"
#include "holdfast/monitor.h"

namespace holdfast::daemon {

enum class CommandError : uint8_t {
  kNone,
  kOversized,
  kMalformedJson,
  kBadField,        // missing, wrong type, out of range, unknown field
  kUnknownSegment,
  kUserMismatch,    // payload user differs from the topic's user
  kNotAuthorised,   // user not in the daemon's operator list
};
const char* CommandErrorName(CommandError e);

struct CommandRequest {
  std::string id;
  std::string user;  // identity: the topic's user
  int segment = -1;
  std::string segment_id;
  AlarmType alarm = AlarmType::kLeak;
  AlarmCommand command = AlarmCommand::kAcknowledge;
  double duration_s = 0.0;
  std::string reason;
};

using SegmentIndex = std::unordered_map<std::string, int>;

// Parses and checks one command. On failure *error holds a message naming
// the field, and request->id is set when the payload had a usable id.
CommandError ParseCommand(std::string_view payload, std::string_view topic_user, const SegmentIndex& segments,
                          const std::vector<std::string>& operators, CommandRequest* request, std::string* error);

// The reply as one JSON object: {"id", "ok", "result", "error", "segment",
// "alarm", "command", "state", "time"}. `result` is an AlarmResult name, or
// a CommandError name when the command never reached the alarm.
std::string ReplyJson(const CommandRequest& request, bool ok, std::string_view result, std::string_view error,
                      std::string_view state, double data_time_s);

}  // namespace holdfast::daemon
