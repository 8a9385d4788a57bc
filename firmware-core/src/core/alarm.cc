// Alarm state machine and its persistence format. See alarm.h for the
// transition table (ANSI/ISA-18.2-2016 states, as recalled).
#include "holdfast/alarm.h"

#include <algorithm>
#include <climits>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <set>
#include <utility>

#include <nlohmann/json.hpp>

namespace holdfast {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

constexpr const char* kStateNames[kAlarmStateCount] = {
    "normal", "unack_active", "ack_active", "unack_returned", "shelved", "suppressed",
    "out_of_service"};
constexpr const char* kTypeNames[kAlarmTypeCount] = {"leak", "rupture", "data_quality",
                                                     "balance_unavailable"};
constexpr const char* kPriorityNames[kAlarmPriorityCount] = {"low", "medium", "high", "urgent"};
constexpr const char* kCauseNames[kAlarmCauseCount] = {
    "condition_raised", "condition_cleared", "acknowledged",        "shelved",
    "unshelved",        "shelve_expired",    "suppressed",          "unsuppressed",
    "removed_from_service", "returned_to_service", "latched_reset"};
constexpr const char* kResultNames[] = {"applied",
                                        "no_change",
                                        "rejected_invalid_in_state",
                                        "rejected_invalid_argument",
                                        "rejected_time_reversed",
                                        "rejected_not_ready"};

template <typename E, int N>
const char* NameOf(E e, const char* const (&names)[N]) {
  const int i = static_cast<int>(e);
  return (i >= 0 && i < N) ? names[i] : "?";
}

template <typename E, int N>
bool ParseName(std::string_view name, const char* const (&names)[N], E* out) {
  for (int i = 0; i < N; ++i) {
    if (name == names[i]) {
      *out = static_cast<E>(i);
      return true;
    }
  }
  return false;
}

// Copies text into a fixed NUL-terminated buffer, truncating at a UTF-8
// character boundary.
void CopyText(std::string_view text, char* dst, std::size_t capacity) {
  std::size_t n = std::min(text.size(), capacity - 1);
  if (n < text.size()) {
    while (n > 0 && (static_cast<unsigned char>(text[n]) & 0xC0u) == 0x80u) --n;
  }
  if (n > 0) std::memcpy(dst, text.data(), n);
  std::memset(dst + n, 0, capacity - n);
}

bool ValidUser(std::string_view user) {
  if (user.empty() || user.size() >= AlarmEvent::kUserSize) return false;
  for (char ch : user) {
    const auto u = static_cast<unsigned char>(ch);
    if (u < 0x20u || u == 0x7Fu) return false;
  }
  return true;
}

bool SameNumber(double a, double b) { return (std::isnan(a) && std::isnan(b)) || a == b; }

}  // namespace

const char* AlarmStateName(AlarmState s) { return NameOf(s, kStateNames); }
const char* AlarmTypeName(AlarmType t) { return NameOf(t, kTypeNames); }
const char* AlarmPriorityName(AlarmPriority p) { return NameOf(p, kPriorityNames); }
const char* AlarmCauseName(AlarmCause c) { return NameOf(c, kCauseNames); }
const char* AlarmResultName(AlarmResult r) { return NameOf(r, kResultNames); }
bool ParseAlarmState(std::string_view name, AlarmState* out) {
  return ParseName(name, kStateNames, out);
}
bool ParseAlarmType(std::string_view name, AlarmType* out) {
  return ParseName(name, kTypeNames, out);
}
bool ParseAlarmPriority(std::string_view name, AlarmPriority* out) {
  return ParseName(name, kPriorityNames, out);
}

bool AlarmOptions::IsValid(std::string* why) const {
  auto fail = [why](const char* msg) {
    if (why) *why = msg;
    return false;
  };
  const int p = static_cast<int>(priority);
  if (p < 0 || p >= kAlarmPriorityCount) return fail("priority is not a known AlarmPriority");
  if (!std::isfinite(return_to_normal_hold_s) || return_to_normal_hold_s < 0.0) {
    return fail("return_to_normal_hold_s must be finite and >= 0");
  }
  if (!std::isfinite(max_shelve_s) || max_shelve_s <= 0.0) {
    return fail("max_shelve_s must be finite and > 0 (shelving always expires)");
  }
  return true;
}

void AlarmEvidence::SetDetail(std::string_view text) { CopyText(text, detail, kDetailSize); }

std::string AlarmEvent::ToString() const {
  char buf[512];
  std::snprintf(buf, sizeof buf,
                "seq=%llu t=%.3f segment=%d %s %s %s->%s (%s)%s%s condition=%s rate=%.6g kg/s "
                "location=%.6g m statistic=%.6g threshold=%.6g window=%.6g s%s%s%s",
                static_cast<unsigned long long>(seq), time_s, segment, AlarmTypeName(type),
                AlarmPriorityName(priority), AlarmStateName(from), AlarmStateName(to),
                AlarmCauseName(cause), user[0] ? " by=" : "", user,
                condition_active ? "active" : "clear", evidence.leak_rate_kg_s,
                evidence.location_m, evidence.statistic, evidence.threshold, evidence.window_s,
                evidence.detail[0] ? " detail=\"" : "", evidence.detail,
                evidence.detail[0] ? "\"" : "");
  std::string out(buf);
  if (to == AlarmState::kShelved) {
    std::snprintf(buf, sizeof buf, " until=%.3f", shelved_until_s);
    out += buf;
  }
  return out;
}

// ---- Alarm ----------------------------------------------------------------

bool Alarm::Init(int segment, AlarmType type, const AlarmOptions& options,
                 SequenceCounter* counter, AlarmEventSink* sink, std::string* why) {
  auto fail = [why](std::string msg) {
    if (why) *why = std::move(msg);
    return false;
  };
  if (segment < 0) return fail("segment must be >= 0");
  const int ti = static_cast<int>(type);
  if (ti < 0 || ti >= kAlarmTypeCount) return fail("type is not a known AlarmType");
  std::string reason;
  if (!options.IsValid(&reason)) return fail("options: " + reason);
  if (counter == nullptr || sink == nullptr) return fail("counter and sink must not be null");
  *this = Alarm();
  initialised_ = true;
  segment_ = segment;
  type_ = type;
  options_ = options;
  counter_ = counter;
  sink_ = sink;
  return true;
}

bool Alarm::Bind(SequenceCounter* counter, AlarmEventSink* sink) {
  if (!initialised_ || counter == nullptr || sink == nullptr) return false;
  counter_ = counter;
  sink_ = sink;
  return true;
}

bool Alarm::Admit(double t, AlarmResult* rejection) const {
  if (!ready()) {
    *rejection = AlarmResult::kRejectedNotReady;
  } else if (!std::isfinite(t)) {
    *rejection = AlarmResult::kRejectedInvalidArgument;
  } else if (t < last_t_) {  // false while last_t_ is NaN (no input yet)
    *rejection = AlarmResult::kRejectedTimeReversed;
  } else {
    return true;
  }
  return false;
}

void Alarm::ExpireShelve(double t, bool* applied) {
  if (state_ == AlarmState::kShelved && t >= shelved_until_s_) {
    Go(t, ExitState(), AlarmCause::kShelveExpired, {});
    *applied = true;
  }
}

void Alarm::Go(double t, AlarmState to, AlarmCause cause, std::string_view user) {
  AlarmEvent ev;
  ev.seq = counter_->Next();
  ev.time_s = t;
  ev.segment = segment_;
  ev.type = type_;
  ev.priority = options_.priority;
  ev.from = state_;
  ev.to = to;
  ev.cause = cause;
  state_ = to;
  if (to != AlarmState::kShelved) shelved_until_s_ = kNaN;
  ev.condition_active = condition_;
  ev.shelved_until_s = shelved_until_s_;
  ev.evidence = evidence_;
  CopyText(user, ev.user, AlarmEvent::kUserSize);
  sink_->OnAlarmEvent(ev);
}

namespace {
// A command's own result, merged with a shelve expiry retired on the way.
AlarmResult Merge(AlarmResult own, bool expired) {
  return (own == AlarmResult::kNoChange && expired) ? AlarmResult::kApplied : own;
}
}  // namespace

AlarmResult Alarm::Update(double t, bool condition_active, const AlarmEvidence& evidence) {
  AlarmResult rejection{};
  if (!Admit(t, &rejection)) return rejection;
  last_t_ = t;
  evidence_ = evidence;

  // Filtered condition: raise at once, clear after a continuous hold.
  if (condition_active) {
    condition_ = true;
    clearing_since_s_ = kNaN;
  } else if (condition_) {
    if (std::isnan(clearing_since_s_)) clearing_since_s_ = t;
    if (t - clearing_since_s_ >= options_.return_to_normal_hold_s) {
      condition_ = false;
      clearing_since_s_ = kNaN;
    }
  }

  // A shelve that has run out ends in the state the condition calls for, so
  // at most one transition happens per Update.
  bool moved = false;
  ExpireShelve(t, &moved);
  if (moved) return AlarmResult::kApplied;

  AlarmState to = state_;
  AlarmCause cause = AlarmCause::kConditionRaised;
  switch (state_) {
    case AlarmState::kNormal:
    case AlarmState::kUnackReturned:
      if (condition_) to = AlarmState::kUnackActive;
      break;
    case AlarmState::kUnackActive:
      if (!condition_ && !options_.latching) {
        to = AlarmState::kUnackReturned;
        cause = AlarmCause::kConditionCleared;
      }
      break;
    case AlarmState::kAckActive:
      if (!condition_) {
        to = AlarmState::kNormal;
        cause = AlarmCause::kConditionCleared;
      }
      break;
    case AlarmState::kShelved:
    case AlarmState::kSuppressed:
    case AlarmState::kOutOfService:
      break;  // condition tracked, nothing annunciated
  }
  if (to == state_) return AlarmResult::kNoChange;
  Go(t, to, cause, {});
  return AlarmResult::kApplied;
}

// The common start of an operator or design command: admit the time, check
// the operator's name (when one is given), take the time and end a shelve
// whose time has come. False, with the rejection, when the command is refused.
bool Alarm::BeginCommand(double t, const std::string_view* user, bool* expired, AlarmResult* rejection) {
  if (!Admit(t, rejection)) return false;
  if (user != nullptr && !ValidUser(*user)) {
    *rejection = AlarmResult::kRejectedInvalidArgument;
    return false;
  }
  last_t_ = t;
  ExpireShelve(t, expired);
  return true;
}

AlarmResult Alarm::Acknowledge(double t, std::string_view user) {
  AlarmResult rejection{};
  bool expired = false;
  if (!BeginCommand(t, &user, &expired, &rejection)) return rejection;
  AlarmResult own = AlarmResult::kRejectedInvalidInState;
  switch (state_) {
    case AlarmState::kNormal:
    case AlarmState::kAckActive:
      own = AlarmResult::kNoChange;
      break;
    case AlarmState::kUnackActive:
      if (condition_) {
        Go(t, AlarmState::kAckActive, AlarmCause::kAcknowledged, user);
      } else {
        Go(t, AlarmState::kNormal,
           options_.latching ? AlarmCause::kLatchedReset : AlarmCause::kAcknowledged, user);
      }
      own = AlarmResult::kApplied;
      break;
    case AlarmState::kUnackReturned:
      Go(t, AlarmState::kNormal, AlarmCause::kAcknowledged, user);
      own = AlarmResult::kApplied;
      break;
    case AlarmState::kShelved:
    case AlarmState::kSuppressed:
    case AlarmState::kOutOfService:
      own = AlarmResult::kRejectedInvalidInState;
      break;
  }
  return Merge(own, expired);
}

AlarmResult Alarm::Shelve(double t, double duration_s, std::string_view user) {
  AlarmResult rejection{};
  if (!Admit(t, &rejection)) return rejection;
  bool expired = false;
  if (!ValidUser(user) || std::isnan(duration_s) || duration_s <= 0.0) {
    return AlarmResult::kRejectedInvalidArgument;
  }
  const double until = t + std::min(duration_s, options_.max_shelve_s);
  if (!(until > t)) return AlarmResult::kRejectedInvalidArgument;  // too short to represent
  last_t_ = t;
  ExpireShelve(t, &expired);
  AlarmResult own = AlarmResult::kRejectedInvalidInState;
  switch (state_) {
    case AlarmState::kNormal:
    case AlarmState::kUnackActive:
    case AlarmState::kAckActive:
    case AlarmState::kUnackReturned:
      shelved_until_s_ = until;
      Go(t, AlarmState::kShelved, AlarmCause::kShelved, user);
      own = AlarmResult::kApplied;
      break;
    case AlarmState::kShelved:
    case AlarmState::kSuppressed:
    case AlarmState::kOutOfService:
      own = AlarmResult::kRejectedInvalidInState;
      break;
  }
  return Merge(own, expired);
}

AlarmResult Alarm::Unshelve(double t, std::string_view user) {
  AlarmResult rejection{};
  bool expired = false;
  if (!BeginCommand(t, &user, &expired, &rejection)) return rejection;
  AlarmResult own = AlarmResult::kRejectedInvalidInState;
  if (state_ == AlarmState::kShelved) {
    Go(t, ExitState(), AlarmCause::kUnshelved, user);
    own = AlarmResult::kApplied;
  }
  return Merge(own, expired);
}

AlarmResult Alarm::Suppress(double t) {
  AlarmResult rejection{};
  bool expired = false;
  if (!BeginCommand(t, nullptr, &expired, &rejection)) return rejection;
  AlarmResult own = AlarmResult::kRejectedInvalidInState;
  switch (state_) {
    case AlarmState::kNormal:
    case AlarmState::kUnackActive:
    case AlarmState::kAckActive:
    case AlarmState::kUnackReturned:
    case AlarmState::kShelved:  // design suppression outranks a shelve; the shelve is dropped
      Go(t, AlarmState::kSuppressed, AlarmCause::kSuppressed, {});
      own = AlarmResult::kApplied;
      break;
    case AlarmState::kSuppressed:
      own = AlarmResult::kNoChange;
      break;
    case AlarmState::kOutOfService:
      own = AlarmResult::kRejectedInvalidInState;
      break;
  }
  return Merge(own, expired);
}

AlarmResult Alarm::Unsuppress(double t) {
  AlarmResult rejection{};
  bool expired = false;
  if (!BeginCommand(t, nullptr, &expired, &rejection)) return rejection;
  AlarmResult own = AlarmResult::kNoChange;
  if (state_ == AlarmState::kSuppressed) {
    Go(t, ExitState(), AlarmCause::kUnsuppressed, {});
    own = AlarmResult::kApplied;
  }
  return Merge(own, expired);
}

AlarmResult Alarm::RemoveFromService(double t, std::string_view user) {
  AlarmResult rejection{};
  bool expired = false;
  if (!BeginCommand(t, &user, &expired, &rejection)) return rejection;
  AlarmResult own = AlarmResult::kNoChange;
  if (state_ != AlarmState::kOutOfService) {
    Go(t, AlarmState::kOutOfService, AlarmCause::kRemovedFromService, user);
    own = AlarmResult::kApplied;
  }
  return Merge(own, expired);
}

AlarmResult Alarm::ReturnToService(double t, std::string_view user) {
  AlarmResult rejection{};
  bool expired = false;
  if (!BeginCommand(t, &user, &expired, &rejection)) return rejection;
  AlarmResult own = AlarmResult::kRejectedInvalidInState;
  if (state_ == AlarmState::kOutOfService) {
    Go(t, ExitState(), AlarmCause::kReturnedToService, user);
    own = AlarmResult::kApplied;
  }
  return Merge(own, expired);
}

bool Alarm::SameStateAs(const Alarm& o) const {
  const AlarmEvidence& a = evidence_;
  const AlarmEvidence& b = o.evidence_;
  return initialised_ == o.initialised_ && segment_ == o.segment_ && type_ == o.type_ &&
         options_.latching == o.options_.latching && options_.priority == o.options_.priority &&
         SameNumber(options_.return_to_normal_hold_s, o.options_.return_to_normal_hold_s) &&
         SameNumber(options_.max_shelve_s, o.options_.max_shelve_s) && state_ == o.state_ &&
         condition_ == o.condition_ && SameNumber(clearing_since_s_, o.clearing_since_s_) &&
         SameNumber(shelved_until_s_, o.shelved_until_s_) && SameNumber(last_t_, o.last_t_) &&
         SameNumber(a.leak_rate_kg_s, b.leak_rate_kg_s) && SameNumber(a.location_m, b.location_m) &&
         SameNumber(a.statistic, b.statistic) && SameNumber(a.threshold, b.threshold) &&
         SameNumber(a.window_s, b.window_s) &&
         std::strncmp(a.detail, b.detail, AlarmEvidence::kDetailSize) == 0;
}

// ---- Persistence ------------------------------------------------------------

namespace {

using Json = nlohmann::json;
using OrderedJson = nlohmann::ordered_json;

OrderedJson Number(double v) { return std::isfinite(v) ? OrderedJson(v) : OrderedJson(nullptr); }

// Checks that `j` is an object with exactly these keys.
bool ExactKeys(const Json& j, std::initializer_list<const char*> keys, const std::string& path,
               std::string* error) {
  if (!j.is_object()) {
    *error = path + ": must be an object";
    return false;
  }
  for (const char* k : keys) {
    if (!j.contains(k)) {
      *error = path + ": missing field '" + k + "'";
      return false;
    }
  }
  for (auto it = j.begin(); it != j.end(); ++it) {
    bool known = false;
    for (const char* k : keys) known = known || it.key() == k;
    if (!known) {
      *error = path + ": unknown field '" + it.key() + "'";
      return false;
    }
  }
  return true;
}

// A number, or null for NaN ("not available" / "none").
bool NumberOrNull(const Json& j, const std::string& path, double* out, std::string* error) {
  if (j.is_null()) {
    *out = kNaN;
    return true;
  }
  if (!j.is_number()) {
    *error = path + ": must be a number or null";
    return false;
  }
  *out = j.get<double>();
  return true;
}

bool Bool(const Json& j, const std::string& path, bool* out, std::string* error) {
  if (!j.is_boolean()) {
    *error = path + ": must be true or false";
    return false;
  }
  *out = j.get<bool>();
  return true;
}

template <typename E>
bool Enum(const Json& j, const std::string& path, bool (*parse)(std::string_view, E*), E* out,
          const char* what, std::string* error) {
  if (!j.is_string() || !parse(j.get_ref<const std::string&>(), out)) {
    *error = path + ": not a known " + what;
    if (j.is_string()) *error += " '" + j.get<std::string>() + "'";
    return false;
  }
  return true;
}

// One alarm's fields, read and checked.
struct AlarmParts {
  int segment = -1;
  AlarmType type = AlarmType::kLeak;
  AlarmOptions options;
  AlarmState state = AlarmState::kNormal;
  bool condition = false;
  double clearing_since_s = kNaN, shelved_until_s = kNaN, last_time_s = kNaN;
  AlarmEvidence evidence;
};

bool RestoreOne(const Json& j, const std::string& path, AlarmParts* out, std::string* error) {
  if (!ExactKeys(j,
                 {"segment", "type", "options", "state", "condition_active", "clearing_since_s",
                  "shelved_until_s", "last_time_s", "evidence"},
                 path, error)) {
    return false;
  }
  const Json& seg = j["segment"];
  if (!seg.is_number_integer() ||
      (seg.is_number_unsigned() ? seg.get<uint64_t>() > static_cast<uint64_t>(INT_MAX)
                                : seg.get<int64_t>() < 0)) {
    *error = path + ".segment: must be an integer in [0, " + std::to_string(INT_MAX) + "]";
    return false;
  }
  int segment = static_cast<int>(seg.get<int64_t>());
  AlarmType type{};
  if (!Enum(j["type"], path + ".type", &ParseAlarmType, &type, "alarm type", error)) return false;

  const Json& jo = j["options"];
  const std::string op = path + ".options";
  if (!ExactKeys(jo, {"latching", "priority", "return_to_normal_hold_s", "max_shelve_s"}, op,
                 error)) {
    return false;
  }
  AlarmOptions options;
  if (!Bool(jo["latching"], op + ".latching", &options.latching, error)) return false;
  if (!Enum(jo["priority"], op + ".priority", &ParseAlarmPriority, &options.priority,
            "priority", error)) {
    return false;
  }
  if (!NumberOrNull(jo["return_to_normal_hold_s"], op + ".return_to_normal_hold_s",
                    &options.return_to_normal_hold_s, error) ||
      !NumberOrNull(jo["max_shelve_s"], op + ".max_shelve_s", &options.max_shelve_s, error)) {
    return false;
  }
  std::string reason;
  if (!options.IsValid(&reason)) {
    *error = op + ": " + reason;
    return false;
  }

  AlarmState state{};
  if (!Enum(j["state"], path + ".state", &ParseAlarmState, &state, "alarm state", error)) {
    return false;
  }
  bool condition = false;
  double clearing = kNaN, until = kNaN, last = kNaN;
  if (!Bool(j["condition_active"], path + ".condition_active", &condition, error) ||
      !NumberOrNull(j["clearing_since_s"], path + ".clearing_since_s", &clearing, error) ||
      !NumberOrNull(j["shelved_until_s"], path + ".shelved_until_s", &until, error) ||
      !NumberOrNull(j["last_time_s"], path + ".last_time_s", &last, error)) {
    return false;
  }

  const Json& je = j["evidence"];
  const std::string ep = path + ".evidence";
  if (!ExactKeys(je,
                 {"leak_rate_kg_s", "location_m", "statistic", "threshold", "window_s", "detail"},
                 ep, error)) {
    return false;
  }
  AlarmEvidence ev;
  if (!NumberOrNull(je["leak_rate_kg_s"], ep + ".leak_rate_kg_s", &ev.leak_rate_kg_s, error) ||
      !NumberOrNull(je["location_m"], ep + ".location_m", &ev.location_m, error) ||
      !NumberOrNull(je["statistic"], ep + ".statistic", &ev.statistic, error) ||
      !NumberOrNull(je["threshold"], ep + ".threshold", &ev.threshold, error) ||
      !NumberOrNull(je["window_s"], ep + ".window_s", &ev.window_s, error)) {
    return false;
  }
  const Json& jd = je["detail"];
  if (!jd.is_string() || jd.get_ref<const std::string&>().size() >= AlarmEvidence::kDetailSize ||
      jd.get_ref<const std::string&>().find('\0') != std::string::npos) {
    *error = ep + ".detail: must be a string of at most " +
             std::to_string(AlarmEvidence::kDetailSize - 1) + " bytes without NUL";
    return false;
  }
  ev.SetDetail(jd.get_ref<const std::string&>());

  // Consistency: only states the machine can reach are accepted.
  auto inconsistent = [&](const char* msg) {
    *error = path + ": inconsistent state: " + msg;
    return false;
  };
  if (std::isnan(last) && (state != AlarmState::kNormal || condition || !std::isnan(clearing))) {
    return inconsistent("no input seen (last_time_s null) but not a fresh normal alarm");
  }
  if (!std::isnan(clearing) && (!condition || clearing > last)) {
    return inconsistent("clearing_since_s set but condition not active or after last_time_s");
  }
  switch (state) {
    case AlarmState::kNormal:
    case AlarmState::kUnackReturned:
      if (condition) return inconsistent("normal/unack_returned with the condition active");
      if (state == AlarmState::kUnackReturned && options.latching) {
        return inconsistent("a latching alarm is never unack_returned");
      }
      break;
    case AlarmState::kAckActive:
      if (!condition) return inconsistent("ack_active with the condition clear");
      break;
    case AlarmState::kUnackActive:
      if (!condition && !options.latching) {
        return inconsistent("non-latching unack_active with the condition clear");
      }
      break;
    case AlarmState::kShelved:
    case AlarmState::kSuppressed:
    case AlarmState::kOutOfService:
      break;
  }
  if (state == AlarmState::kShelved) {
    // After any input at last_time_s a live shelve ends later, and never
    // later than max_shelve_s after it (t + d <= last + max, as rounded).
    if (std::isnan(until) || !(until > last) || !(until <= last + options.max_shelve_s)) {
      return inconsistent(
          "shelved_until_s must be after last_time_s and within max_shelve_s of it");
    }
  } else if (!std::isnan(until)) {
    return inconsistent("shelved_until_s set but not shelved");
  }

  out->segment = segment;
  out->type = type;
  out->options = options;
  out->state = state;
  out->condition = condition;
  out->clearing_since_s = clearing;
  out->shelved_until_s = until;
  out->last_time_s = last;
  out->evidence = ev;
  return true;
}

}  // namespace

std::string SerializeAlarms(const std::vector<Alarm>& alarms, uint64_t next_seq) {
  OrderedJson doc;
  doc["format"] = kAlarmsFormat;
  doc["next_seq"] = next_seq;
  OrderedJson list = OrderedJson::array();
  for (const Alarm& a : alarms) {
    OrderedJson j;
    j["segment"] = a.segment_;
    j["type"] = AlarmTypeName(a.type_);
    j["options"] = {{"latching", a.options_.latching},
                    {"priority", AlarmPriorityName(a.options_.priority)},
                    {"return_to_normal_hold_s", Number(a.options_.return_to_normal_hold_s)},
                    {"max_shelve_s", Number(a.options_.max_shelve_s)}};
    j["state"] = AlarmStateName(a.state_);
    j["condition_active"] = a.condition_;
    j["clearing_since_s"] = Number(a.clearing_since_s_);
    j["shelved_until_s"] = Number(a.shelved_until_s_);
    j["last_time_s"] = Number(a.last_t_);
    const AlarmEvidence& e = a.evidence_;
    const void* nul = std::memchr(e.detail, 0, AlarmEvidence::kDetailSize);
    const std::size_t n = nul ? static_cast<std::size_t>(static_cast<const char*>(nul) - e.detail)
                              : AlarmEvidence::kDetailSize;
    j["evidence"] = {{"leak_rate_kg_s", Number(e.leak_rate_kg_s)},
                     {"location_m", Number(e.location_m)},
                     {"statistic", Number(e.statistic)},
                     {"threshold", Number(e.threshold)},
                     {"window_s", Number(e.window_s)},
                     {"detail", std::string(e.detail, n)}};
    list.push_back(std::move(j));
  }
  doc["alarms"] = std::move(list);
  // Invalid UTF-8 in a detail text is dropped rather than thrown about.
  return doc.dump(1, ' ', false, OrderedJson::error_handler_t::ignore) + "\n";
}

bool RestoreAlarms(const std::string& blob, std::vector<Alarm>* alarms, uint64_t* next_seq,
                   std::string* why) {
  auto fail = [why](std::string msg) {
    if (why) *why = "alarm state: " + std::move(msg);
    return false;
  };
  if (alarms == nullptr || next_seq == nullptr) return fail("null output");

  // The parser keeps the last of duplicate keys; a callback finds them.
  std::vector<std::set<std::string>> open_objects;
  std::string duplicate;
  Json::parser_callback_t watch = [&](int, Json::parse_event_t event, Json& parsed) {
    switch (event) {
      case Json::parse_event_t::object_start:
        open_objects.emplace_back();
        break;
      case Json::parse_event_t::object_end:
        if (!open_objects.empty()) open_objects.pop_back();
        break;
      case Json::parse_event_t::key:
        if (!open_objects.empty() && parsed.is_string() &&
            !open_objects.back().insert(parsed.get<std::string>()).second && duplicate.empty()) {
          duplicate = parsed.get<std::string>();
        }
        break;
      default:
        break;
    }
    return true;
  };
  Json doc;
  try {
    doc = Json::parse(blob, watch);
  } catch (const std::exception& e) {
    return fail(std::string("not valid JSON (truncated or corrupt): ") + e.what());
  }
  if (!duplicate.empty()) return fail("corrupt: duplicate field '" + duplicate + "'");

  std::string error;
  try {
    if (!doc.is_object() || !doc.contains("format")) {
      return fail("not a holdfast alarm state (no \"format\" field)");
    }
    const Json& format = doc["format"];
    if (!format.is_string() || format.get_ref<const std::string&>() != kAlarmsFormat) {
      return fail("unsupported format " + format.dump() + " (expected \"" + kAlarmsFormat +
                  "\")");
    }
    if (!ExactKeys(doc, {"format", "next_seq", "alarms"}, "document", &error)) {
      return fail(error);
    }
    const Json& seq = doc["next_seq"];
    if (!seq.is_number_unsigned() || seq.get<uint64_t>() == 0) {
      return fail("next_seq: must be an integer >= 1");
    }
    const Json& list = doc["alarms"];
    if (!list.is_array()) return fail("alarms: must be an array");
    std::vector<Alarm> out(list.size());
    std::set<std::pair<int, int>> seen;
    for (std::size_t i = 0; i < list.size(); ++i) {
      const std::string path = "alarms[" + std::to_string(i) + "]";
      AlarmParts p;
      if (!RestoreOne(list[i], path, &p, &error)) return fail(error);
      if (!seen.insert({p.segment, static_cast<int>(p.type)}).second) {
        return fail(path + ": duplicate alarm for segment " + std::to_string(p.segment) +
                    " type " + AlarmTypeName(p.type));
      }
      Alarm& a = out[i];
      a.initialised_ = true;
      a.segment_ = p.segment;
      a.type_ = p.type;
      a.options_ = p.options;
      a.state_ = p.state;
      a.condition_ = p.condition;
      a.clearing_since_s_ = p.clearing_since_s;
      a.shelved_until_s_ = p.shelved_until_s;
      a.last_t_ = p.last_time_s;
      a.evidence_ = p.evidence;
    }
    *alarms = std::move(out);
    *next_seq = seq.get<uint64_t>();
  } catch (const std::exception& e) {  // not expected: every access is type-checked first
    return fail(std::string("unexpected: ") + e.what());
  }
  return true;
}

}  // namespace holdfast
