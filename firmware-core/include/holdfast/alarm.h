// Alarm state machine: one per (segment, alarm type). Pure and deterministic:
// no I/O, no clock (every input carries its time), no heap allocation on the
// tick path (Update and the operator commands allocate nothing).
//
// States are the alarm-management states of ANSI/ISA-18.2-2016 (as recalled;
// the names below are ours): normal, unacknowledged active, acknowledged
// active, returned to normal unacknowledged, shelved, suppressed by design,
// out of service. ISA-18.2's optional "latched" state is folded into
// kUnackActive: a latching alarm whose condition has cleared stays
// kUnackActive (still annunciated) until it is acknowledged.
//
//   holdfast::SequenceCounter seq;               // shared by all alarms of a monitor
//   holdfast::AlarmEventRing<64> ring;           // or any AlarmEventSink
//   holdfast::Alarm a;
//   a.Init(/*segment=*/0, AlarmType::kLeak, options, &seq, &ring, &why);
//   a.Update(t, leak_detected, evidence);        // every tick
//   a.Acknowledge(t, "operator-7");
//   while (ring.Pop(&event)) publish(event);
//
// The condition. The detector's raw condition enters through Update. The
// alarm keeps a filtered condition `c`: it becomes active at once (raising is
// never delayed) and becomes clear only after the raw condition has been
// clear continuously for the return-to-normal hold (measured from the first
// clear Update). While shelved, suppressed or out of service `c` is still
// tracked, so the alarm comes back in the right state.
//
// Chattering. A chattering condition gives at most one raise/clear pair per
// hold interval, because the alarm cannot return to normal before the hold
// has elapsed. There is deliberately no separate re-activation deadband: any
// time-based de-duplication of a re-raise would either delay a raise (raising
// must be immediate) or hide an active condition from the operator.
//
// Transition table. Rows: input; columns: state. `c` is the filtered
// condition after the input. A state in a cell = go there, exactly one event
// with the row's cause, result kApplied. "=" = nothing changes, no event,
// kNoChange (the input's aim already holds). "rej" = nothing changes, no
// event, kRejectedInvalidInState (the input presupposes something that is
// not so). exit = UA if c is active, N if c is clear. Every state/input pair
// has an answer; tests/core/alarm_test.cc walks them all.
//
//   N   normal                      UA  unacknowledged active
//   AA  acknowledged active         UR  returned to normal, unacknowledged
//   SH  shelved                     SU  suppressed by design
//   OOS out of service
//
//   input               | N   | UA     | AA  | UR  | SH     | SU   | OOS  | cause
//   --------------------+-----+--------+-----+-----+--------+------+------+---------------------
//   c becomes active    | UA  | =      | =   | UA  | =      | =    | =    | condition_raised
//   c clears (hold met) | =   | UR [1] | N   | =   | =      | =    | =    | condition_cleared
//   Acknowledge         | =   | AA [2] | =   | N   | rej    | rej  | rej  | acknowledged
//   Shelve              | SH  | SH     | SH  | SH  | rej    | rej  | rej  | shelved
//   Unshelve            | rej | rej    | rej | rej | exit   | rej  | rej  | unshelved
//   shelve expiry       | =   | =      | =   | =   | exit   | =    | =    | shelve_expired
//   Suppress            | SU  | SU     | SU  | SU  | SU [3] | =    | rej  | suppressed
//   Unsuppress          | =   | =      | =   | =   | =      | exit | =    | unsuppressed
//   RemoveFromService   | OOS | OOS    | OOS | OOS | OOS    | OOS  | =    | removed_from_service
//   ReturnToService     | rej | rej    | rej | rej | rej    | rej  | exit | returned_to_service
//
//   In SH, SU and OOS the condition is still tracked ("=" rows 1-2).
//   A raw clear shorter than the hold is "=" everywhere.
//   [1] Latching alarm: "=" -- it stays UA (latched, c clear) until acknowledged.
//   [2] With c clear (a latched alarm): N, cause latched_reset. (A
//       non-latching UA with c clear cannot occur; it would go to N,
//       cause acknowledged.)
//   [3] Suppression by design outranks an operator's shelve: the shelve is
//       dropped, and when the suppression lifts the alarm shows its condition.
//   A latching alarm never enters UR; the UR column is defined for it all
//   the same (the answers above).
//
// Conventions behind "=" and "rej": Suppress/Unsuppress come from design
// logic (e.g. the segment is shut in) and may be driven level-wise every
// tick, so repeating them is harmless ("="). Out of service outranks
// suppression: Suppress while out of service is rejected, and the owner
// re-asserts it after ReturnToService if the reason still holds. Shelve
// while shelved is rejected (unshelve first) so that a new duration is never
// silently ignored. Acknowledging with nothing unacknowledged (N, AA) is "=",
// so an "acknowledge all" never fails; acknowledging an alarm that is not
// annunciated (SH, SU, OOS) is rejected.
//
// Time. Inputs must come with non-decreasing times; an input with an earlier
// time (or a non-finite one) is rejected and changes nothing. A shelve ends
// at the first accepted input with t >= shelved-until (one event, cause
// shelve_expired). An Update takes in its condition first, so the shelve
// ends in the state the new condition calls for: at most one event per
// Update. A command retires the expired shelve first and then acts, so it
// can emit two events, one per transition.
#pragma once

#include <array>
#include <cstddef>
#include <cstdint>
#include <limits>
#include <string>
#include <string_view>
#include <vector>

namespace holdfast {

// ---- Time constants (defaults of AlarmOptions) ----------------------------
// The detector's condition must stay clear this long, continuously, before an
// active alarm returns to normal (an off-delay; raising is immediate).
constexpr double kReturnToNormalHold_s = 600.0;
// Longest shelve. Shelving always expires; longer requests are capped to it.
constexpr double kMaxShelve_s = 8.0 * 3600.0;

enum class AlarmState : uint8_t {
  kNormal,         // N
  kUnackActive,    // UA (also: latched, condition clear, awaiting acknowledgement)
  kAckActive,      // AA
  kUnackReturned,  // UR
  kShelved,        // SH: temporarily hidden by an operator, expires by itself
  kSuppressed,     // SU: hidden by design logic (e.g. segment shut in)
  kOutOfService,   // OOS: removed by an operator (e.g. instrument maintenance)
};
constexpr int kAlarmStateCount = 7;

enum class AlarmType : uint8_t {
  kLeak,                // sustained imbalance: a leak of some size
  kRupture,             // large, fast imbalance
  kDataQuality,         // inputs missing, stale or implausible
  kBalanceUnavailable,  // the segment cannot be balanced at all
};
constexpr int kAlarmTypeCount = 4;

enum class AlarmPriority : uint8_t { kLow, kMedium, kHigh, kUrgent };
constexpr int kAlarmPriorityCount = 4;

enum class AlarmCause : uint8_t {
  kConditionRaised,
  kConditionCleared,
  kAcknowledged,
  kShelved,
  kUnshelved,
  kShelveExpired,
  kSuppressed,
  kUnsuppressed,
  kRemovedFromService,
  kReturnedToService,
  kLatchedReset,
};
constexpr int kAlarmCauseCount = 11;

// What an input did. For a command that retired an expired shelve on the
// way (see "Time" above), kNoChange becomes kApplied; a rejection stays a
// rejection even though the expiry's event was emitted.
enum class AlarmResult : uint8_t {
  kApplied,                  // at least one transition, one event each
  kNoChange,                 // accepted; nothing to do, no event
  kRejectedInvalidInState,   // makes no sense in the current state; nothing changed
  kRejectedInvalidArgument,  // non-finite time, bad duration, empty or overlong user
  kRejectedTimeReversed,     // time earlier than the alarm's latest input
  kRejectedNotReady,         // not initialised, or no counter/sink bound
};

// snake_case names ("unack_active", "data_quality", ...); "?" out of range.
const char* AlarmStateName(AlarmState s);
const char* AlarmTypeName(AlarmType t);
const char* AlarmPriorityName(AlarmPriority p);
const char* AlarmCauseName(AlarmCause c);
const char* AlarmResultName(AlarmResult r);
// Inverse of the names; false (output untouched) for an unknown name.
bool ParseAlarmState(std::string_view name, AlarmState* out);
bool ParseAlarmType(std::string_view name, AlarmType* out);
bool ParseAlarmPriority(std::string_view name, AlarmPriority* out);

struct AlarmOptions {
  // Latching: once raised, the alarm stays active (annunciated) until it has
  // been acknowledged AND its condition has cleared, in either order.
  bool latching = false;
  AlarmPriority priority = AlarmPriority::kHigh;
  // Continuous clear time before an active alarm returns to normal, s (>= 0).
  double return_to_normal_hold_s = kReturnToNormalHold_s;
  // Cap on a shelve's duration, s (> 0, finite: shelving always expires).
  double max_shelve_s = kMaxShelve_s;

  bool IsValid(std::string* why) const;  // false, with the reason, when unusable
};

// What the detector saw, copied into events. Fixed size: no allocation.
// NaN means "not available" for every number.
struct AlarmEvidence {
  static constexpr std::size_t kDetailSize = 64;  // bytes, including the NUL
  double leak_rate_kg_s = std::numeric_limits<double>::quiet_NaN();
  double location_m = std::numeric_limits<double>::quiet_NaN();  // chainage
  double statistic = std::numeric_limits<double>::quiet_NaN();   // detector statistic
  double threshold = std::numeric_limits<double>::quiet_NaN();   // its alarm threshold
  double window_s = std::numeric_limits<double>::quiet_NaN();    // balance window
  double leak_rate_sigma_kg_s = std::numeric_limits<double>::quiet_NaN();  // one sigma of leak_rate_kg_s
  double location_low_m = std::numeric_limits<double>::quiet_NaN();   // location band
  double location_high_m = std::numeric_limits<double>::quiet_NaN();
  double detector_target_kg_s = std::numeric_limits<double>::quiet_NaN();  // the leading detector's target size
  char detail[kDetailSize] = {};  // short free text, NUL-terminated

  // Copies at most kDetailSize - 1 bytes (truncates; never overflows).
  void SetDetail(std::string_view text);
};

struct AlarmEvent {
  static constexpr std::size_t kUserSize = 32;  // bytes, including the NUL
  uint64_t seq = 0;  // from the owner's SequenceCounter; never 0
  double time_s = 0.0;
  int segment = -1;
  AlarmType type = AlarmType::kLeak;
  AlarmPriority priority = AlarmPriority::kHigh;
  AlarmState from = AlarmState::kNormal;
  AlarmState to = AlarmState::kNormal;
  AlarmCause cause = AlarmCause::kConditionRaised;
  bool condition_active = false;  // filtered condition after the transition
  // When the shelve ends (to == kShelved); NaN otherwise.
  double shelved_until_s = std::numeric_limits<double>::quiet_NaN();
  AlarmEvidence evidence;        // the latest evidence seen by the alarm
  char user[kUserSize] = {};     // operator, for operator commands; "" otherwise

  std::string ToString() const;  // one line, for logs and test failures
};

// Where events go. Called once per transition, synchronously.
class AlarmEventSink {
 public:
  virtual ~AlarmEventSink() = default;
  virtual void OnAlarmEvent(const AlarmEvent& event) = 0;
};

// A fixed-capacity sink the caller drains. When full, the oldest event is
// overwritten and counted (the sequence numbers then show the gap).
template <std::size_t N>
class AlarmEventRing final : public AlarmEventSink {
  static_assert(N > 0, "capacity must be positive");

 public:
  void OnAlarmEvent(const AlarmEvent& event) override {
    if (count_ == N) {
      head_ = (head_ + 1) % N;
      --count_;
      ++overwritten_;
    }
    events_[(head_ + count_) % N] = event;
    ++count_;
  }
  // Oldest first; false when empty.
  bool Pop(AlarmEvent* out) {
    if (count_ == 0) return false;
    *out = events_[head_];
    head_ = (head_ + 1) % N;
    --count_;
    return true;
  }
  void Clear() { head_ = count_ = 0; overwritten_ = 0; }
  std::size_t size() const { return count_; }
  static constexpr std::size_t capacity() { return N; }
  uint64_t overwritten() const { return overwritten_; }

 private:
  std::array<AlarmEvent, N> events_{};
  std::size_t head_ = 0, count_ = 0;
  uint64_t overwritten_ = 0;
};

// Monotonically increasing event sequence numbers, shared by every alarm of
// one owner. Starts at 1; 0 is never issued. Not thread-safe (the core is
// single-threaded).
class SequenceCounter {
 public:
  explicit SequenceCounter(uint64_t next = 1) : next_(next == 0 ? 1 : next) {}
  uint64_t Next() { return next_++; }
  uint64_t peek() const { return next_; }  // the number Next() will return

 private:
  uint64_t next_;
};

class Alarm {
 public:
  Alarm() = default;  // not ready: every input is kRejectedNotReady

  // Resets to normal with the condition clear and binds the counter and the
  // sink (both must outlive the alarm's use). False, with the reason, for a
  // negative segment, an unknown type, invalid options or a null pointer.
  bool Init(int segment, AlarmType type, const AlarmOptions& options, SequenceCounter* counter,
            AlarmEventSink* sink, std::string* why);
  // Binds the counter and the sink of an alarm that came from RestoreAlarms.
  bool Bind(SequenceCounter* counter, AlarmEventSink* sink);

  // Every tick: the detector's raw condition and its evidence.
  AlarmResult Update(double t, bool condition_active, const AlarmEvidence& evidence);

  // Operator commands. `user` names the operator: 1 to 31 bytes, no control
  // characters. Shelve's duration must be > 0 (NaN rejected; t + duration
  // must be representably later than t) and is capped at
  // options().max_shelve_s. Arguments are checked before anything happens.
  AlarmResult Acknowledge(double t, std::string_view user);
  AlarmResult Shelve(double t, double duration_s, std::string_view user);
  AlarmResult Unshelve(double t, std::string_view user);
  AlarmResult RemoveFromService(double t, std::string_view user);
  AlarmResult ReturnToService(double t, std::string_view user);
  // Design suppression (e.g. the segment is shut in). No user.
  AlarmResult Suppress(double t);
  AlarmResult Unsuppress(double t);

  bool initialised() const { return initialised_; }
  bool ready() const { return initialised_ && counter_ != nullptr && sink_ != nullptr; }
  int segment() const { return segment_; }
  AlarmType type() const { return type_; }
  const AlarmOptions& options() const { return options_; }
  AlarmState state() const { return state_; }
  bool condition_active() const { return condition_; }  // filtered
  // Time the raw condition went clear while c is still active; NaN otherwise.
  double clearing_since_s() const { return clearing_since_s_; }
  double shelved_until_s() const { return shelved_until_s_; }  // NaN unless shelved
  double last_time_s() const { return last_t_; }               // NaN before any input
  const AlarmEvidence& evidence() const { return evidence_; }

  // Same identity, options and state (NaN equals NaN); bindings not compared.
  bool SameStateAs(const Alarm& other) const;

 private:
  friend std::string SerializeAlarms(const std::vector<Alarm>& alarms, uint64_t next_seq);
  friend bool RestoreAlarms(const std::string& blob, std::vector<Alarm>* alarms,
                            uint64_t* next_seq, std::string* why);

  // False, with the rejection, when not ready or t is non-finite or earlier
  // than the latest input.
  bool Admit(double t, AlarmResult* rejection) const;
  // Ends a shelve whose time has come (one event); sets *expired if so.
  void ExpireShelve(double t, bool* expired);
  bool BeginCommand(double t, const std::string_view* user, bool* expired, AlarmResult* rejection);
  void Go(double t, AlarmState to, AlarmCause cause, std::string_view user);
  // The state a shelve/suppression/out-of-service ends in.
  AlarmState ExitState() const {
    return condition_ ? AlarmState::kUnackActive : AlarmState::kNormal;
  }

  bool initialised_ = false;
  int segment_ = -1;
  AlarmType type_ = AlarmType::kLeak;
  AlarmOptions options_;
  SequenceCounter* counter_ = nullptr;
  AlarmEventSink* sink_ = nullptr;

  AlarmState state_ = AlarmState::kNormal;
  bool condition_ = false;
  double clearing_since_s_ = std::numeric_limits<double>::quiet_NaN();
  double shelved_until_s_ = std::numeric_limits<double>::quiet_NaN();
  double last_t_ = std::numeric_limits<double>::quiet_NaN();
  AlarmEvidence evidence_;
};

// Persistence format (no file I/O here). JSON:
//   {"format": "holdfast-alarms/1", "next_seq": <uint >= 1>,
//    "alarms": [{"segment", "type", "options": {...}, "state",
//                "condition_active", "clearing_since_s", "shelved_until_s",
//                "last_time_s", "evidence": {...}}, ...]}
// Non-finite numbers are written as null and read back as NaN (so an
// infinite evidence value comes back as NaN). Every field is required;
// unknown fields, a wrong format string, wrong types, values out of range,
// inconsistent states (e.g. normal with the condition active, a shelve
// beyond max_shelve_s), duplicate (segment, type) pairs, or a truncated or
// corrupt blob are errors with the reason. On error the outputs are
// untouched. Restored alarms are initialised but unbound: call Bind.
inline constexpr const char* kAlarmsFormat = "holdfast-alarms/1";
std::string SerializeAlarms(const std::vector<Alarm>& alarms, uint64_t next_seq);
bool RestoreAlarms(const std::string& blob, std::vector<Alarm>* alarms, uint64_t* next_seq,
                   std::string* why);

}  // namespace holdfast
