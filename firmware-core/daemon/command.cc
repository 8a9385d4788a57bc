#include "command.h"

#include <algorithm>
#include <cmath>

#include <nlohmann/json.hpp>

#include "event_json.h"     // AppendJsonString
#include "readings_csv.h"   // FormatIsoUtc

namespace holdfast::daemon {

const char* CommandErrorName(CommandError e) {
  switch (e) {
    case CommandError::kNone: return "none";
    case CommandError::kOversized: return "rejected_oversized";
    case CommandError::kMalformedJson: return "rejected_malformed_json";
    case CommandError::kBadField: return "rejected_bad_field";
    case CommandError::kUnknownSegment: return "rejected_unknown_segment";
    case CommandError::kUserMismatch: return "rejected_user_mismatch";
    case CommandError::kNotAuthorised: return "rejected_not_authorised";
  }
  return "?";
}

namespace {
constexpr std::size_t kMaxCommandBytes = 4096;

bool PrintableText(const std::string& s) {
  return std::none_of(s.begin(), s.end(), [](char c) { return static_cast<unsigned char>(c) < 0x20 || c == 0x7f; });
}
}  // namespace

CommandError ParseCommand(std::string_view payload, std::string_view topic_user, const SegmentIndex& segments,
                          const std::vector<std::string>& operators, CommandRequest* req, std::string* error) {
  *req = CommandRequest{};
  req->user = std::string(topic_user);
  auto fail = [&](CommandError e, const std::string& m) {
    *error = m;
    return e;
  };
  if (payload.size() > kMaxCommandBytes)
    return fail(CommandError::kOversized, "command larger than " + std::to_string(kMaxCommandBytes) + " bytes");
  const nlohmann::json j = nlohmann::json::parse(payload.begin(), payload.end(), nullptr, false);
  if (j.is_discarded() || !j.is_object()) return fail(CommandError::kMalformedJson, "not a JSON object");
  if (j.contains("id") && j["id"].is_string()) {
    const std::string& id = j["id"].get_ref<const std::string&>();
    if (!id.empty() && id.size() <= 64 && PrintableText(id)) req->id = id;
  }
  for (auto it = j.begin(); it != j.end(); ++it) {
    const std::string& k = it.key();
    if (k != "id" && k != "segment" && k != "alarm" && k != "command" && k != "duration_s" && k != "user" &&
        k != "reason")
      return fail(CommandError::kBadField, "unknown field \"" + k.substr(0, 40) + "\"");
  }
  if (req->id.empty()) return fail(CommandError::kBadField, "id: required, a string of 1 to 64 printable characters");
  if (!operators.empty() && std::find(operators.begin(), operators.end(), req->user) == operators.end())
    return fail(CommandError::kNotAuthorised, "user \"" + req->user + "\" may not command alarms");
  if (j.contains("user")) {
    if (!j["user"].is_string()) return fail(CommandError::kBadField, "user: must be a string");
    if (j["user"].get_ref<const std::string&>() != req->user)
      return fail(CommandError::kUserMismatch, "user: must be the topic's user \"" + req->user + "\"");
  }
  if (req->user.empty() || req->user.size() >= AlarmEvent::kUserSize || !PrintableText(req->user))
    return fail(CommandError::kBadField, "user: 1 to 31 printable characters");
  if (!j.contains("segment") || !j["segment"].is_string())
    return fail(CommandError::kBadField, "segment: required, a segment id");
  req->segment_id = j["segment"].get<std::string>();
  const auto seg = segments.find(req->segment_id);
  if (seg == segments.end())
    return fail(CommandError::kUnknownSegment, "segment: no segment \"" + req->segment_id.substr(0, 64) + "\"");
  req->segment = seg->second;
  if (!j.contains("alarm") || !j["alarm"].is_string() || !ParseAlarmType(j["alarm"].get<std::string>(), &req->alarm))
    return fail(CommandError::kBadField, "alarm: required, one of leak, rupture, data_quality, balance_unavailable");
  if (!j.contains("command") || !j["command"].is_string() ||
      !ParseAlarmCommand(j["command"].get<std::string>(), &req->command) ||
      req->command == AlarmCommand::kSuppress || req->command == AlarmCommand::kUnsuppress)
    return fail(CommandError::kBadField,
                "command: required, one of acknowledge, shelve, unshelve, remove_from_service, return_to_service");
  if (req->command == AlarmCommand::kShelve) {
    if (!j.contains("duration_s") || !j["duration_s"].is_number())
      return fail(CommandError::kBadField, "duration_s: required for shelve, a number of seconds");
    req->duration_s = j["duration_s"].get<double>();
    if (!(req->duration_s > 0.0) || !std::isfinite(req->duration_s))
      return fail(CommandError::kBadField, "duration_s: must be positive and finite");
  } else if (j.contains("duration_s")) {
    return fail(CommandError::kBadField, "duration_s: only for shelve");
  }
  if (j.contains("reason")) {
    if (!j["reason"].is_string()) return fail(CommandError::kBadField, "reason: must be a string");
    req->reason = j["reason"].get<std::string>();
    if (req->reason.size() > 200 || !PrintableText(req->reason))
      return fail(CommandError::kBadField, "reason: up to 200 printable characters");
  }
  error->clear();
  return CommandError::kNone;
}

std::string ReplyJson(const CommandRequest& r, bool ok, std::string_view result, std::string_view error,
                      std::string_view state, double data_time_s) {
  std::string s = "{\"id\":";
  AppendJsonString(r.id, &s);
  s += ",\"ok\":";
  s += ok ? "true" : "false";
  s += ",\"result\":";
  AppendJsonString(result, &s);
  s += ",\"error\":";
  AppendJsonString(error, &s);
  s += ",\"user\":";
  AppendJsonString(r.user, &s);
  s += ",\"segment\":";
  AppendJsonString(r.segment_id, &s);
  s += ",\"alarm\":";
  AppendJsonString(r.segment >= 0 ? AlarmTypeName(r.alarm) : "", &s);
  s += ",\"command\":";
  AppendJsonString(r.segment >= 0 ? AlarmCommandName(r.command) : "", &s);
  s += ",\"state\":";
  AppendJsonString(state, &s);
  s += ",\"time\":";
  if (std::isfinite(data_time_s) && data_time_s > 0.0) AppendJsonString(FormatIsoUtc(data_time_s, 3), &s);
  else s += "null";
  s += "}";
  return s;
}

}  // namespace holdfast::daemon
