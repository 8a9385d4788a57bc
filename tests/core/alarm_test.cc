// Alarm state machine: every (state, input) pair, hysteresis, latching,
// shelving, sequence numbers, persistence, and no allocation on the tick path.
//
// Source of the expected state model: ANSI/ISA-18.2-2016, "Management of
// Alarm Systems for the Process Industries", alarm state transition diagram
// (normal; unacknowledged; acknowledged; returned to normal unacknowledged;
// shelved; suppressed by design; out of service) -- as recalled, not looked
// up. The choices the standard leaves open (what "=" and "rej" mean, where a
// latched alarm lives, suppression outranking a shelve) are Holdfast's own
// and are documented in alarm.h.
#include "holdfast/alarm.h"

#include <atomic>
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <cstring>
#include <limits>
#include <new>
#include <string>
#include <vector>

#include <gtest/gtest.h>

// ---- Allocation counter ----------------------------------------------------
// Replaces the global operator new/delete for this test executable only; the
// count is read around the code under test, so GoogleTest's own allocations
// elsewhere do not matter.
namespace {
std::atomic<uint64_t> g_allocations{0};
}
// noinline keeps GCC from pairing the inlined malloc/free with new/delete
// expressions (-Wmismatched-new-delete).
[[gnu::noinline]] void* operator new(std::size_t n) {
  g_allocations.fetch_add(1, std::memory_order_relaxed);
  if (void* p = std::malloc(n ? n : 1)) return p;
  throw std::bad_alloc();
}
[[gnu::noinline]] void* operator new[](std::size_t n) { return operator new(n); }
[[gnu::noinline]] void operator delete(void* p) noexcept { std::free(p); }
[[gnu::noinline]] void operator delete[](void* p) noexcept { std::free(p); }
[[gnu::noinline]] void operator delete(void* p, std::size_t) noexcept { std::free(p); }
[[gnu::noinline]] void operator delete[](void* p, std::size_t) noexcept { std::free(p); }

namespace holdfast {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr double kHold_s = 60.0;
constexpr double kMaxShelveTest_s = 3600.0;

class Recorder : public AlarmEventSink {
 public:
  void OnAlarmEvent(const AlarmEvent& e) override { events.push_back(e); }
  std::vector<AlarmEvent> events;
};

AlarmOptions TestOptions(bool latching) {
  AlarmOptions o;
  o.latching = latching;
  o.priority = AlarmPriority::kHigh;
  o.return_to_normal_hold_s = kHold_s;
  o.max_shelve_s = kMaxShelveTest_s;
  return o;
}

AlarmEvidence Evidence(double rate_kg_s) {
  AlarmEvidence e;
  e.leak_rate_kg_s = rate_kg_s;
  e.location_m = 12500.0;
  e.statistic = 7.5;
  e.threshold = 5.0;
  e.window_s = 3600.0;
  e.SetDetail("window 3600 s");
  return e;
}

// ---- The table -------------------------------------------------------------
// The same layout as the table in alarm.h: rows are inputs, columns start
// states. A trailing + on a start state means the filtered condition is
// active, - that it is clear. Cells: "=" nothing changes, no event,
// kNoChange; "rej" nothing changes, no event, kRejectedInvalidInState; a
// state = one event to that state with the row's cause, kApplied; "X:cause"
// the same with another cause.
enum Input {
  kUpdActive,      // Update(raw active)
  kUpdClearShort,  // raw clear for half the hold (two Updates)
  kUpdClearHeld,   // raw clear for the full hold (two Updates)
  kAck,
  kShelveIn,
  kUnshelveIn,
  kExpiry,  // Update (raw unchanged) past any shelve's end
  kSuppressIn,
  kUnsuppressIn,
  kRemove,
  kReturn,
  kInputCount
};
constexpr const char* kInputNames[kInputCount] = {
    "update(active)", "update(clear < hold)", "update(clear >= hold)", "acknowledge",
    "shelve",         "unshelve",             "shelve expiry",         "suppress",
    "unsuppress",     "remove_from_service",  "return_to_service"};
constexpr const char* kRowCause[kInputCount] = {
    "condition_raised", "-",          "condition_cleared", "acknowledged",
    "shelved",          "unshelved",  "shelve_expired",    "suppressed",
    "unsuppressed",     "removed_from_service", "returned_to_service"};

constexpr int kColumns = 10;
struct Table {
  const char* starts[kColumns];
  const char* cells[kInputCount][kColumns];
};

// Non-latching alarm. (A non-latching UA with the condition clear cannot be
// reached, so it has no column.)
const Table kNonLatching = {
    {"N", "UA+", "AA+", "UR-", "SH+", "SH-", "SU+", "SU-", "OOS+", "OOS-"},
    {
        // N     UA+    AA+    UR-    SH+    SH-    SU+    SU-    OOS+   OOS-
        {"UA",  "=",   "=",   "UA",  "=",   "=",   "=",   "=",   "=",   "="},    // c active
        {"=",   "=",   "=",   "=",   "=",   "=",   "=",   "=",   "=",   "="},    // clear < hold
        {"=",   "UR",  "N",   "=",   "=",   "=",   "=",   "=",   "=",   "="},    // clear, hold met
        {"=",   "AA",  "=",   "N",   "rej", "rej", "rej", "rej", "rej", "rej"},  // Acknowledge
        {"SH",  "SH",  "SH",  "SH",  "rej", "rej", "rej", "rej", "rej", "rej"},  // Shelve
        {"rej", "rej", "rej", "rej", "UA",  "N",   "rej", "rej", "rej", "rej"},  // Unshelve
        {"=",   "=",   "=",   "=",   "UA",  "N",   "=",   "=",   "=",   "="},    // shelve expiry
        {"SU",  "SU",  "SU",  "SU",  "SU",  "SU",  "=",   "=",   "rej", "rej"},  // Suppress
        {"=",   "=",   "=",   "=",   "=",   "=",   "UA",  "N",   "=",   "="},    // Unsuppress
        {"OOS", "OOS", "OOS", "OOS", "OOS", "OOS", "OOS", "OOS", "=",   "="},    // Remove
        {"rej", "rej", "rej", "rej", "rej", "rej", "rej", "rej", "UA",  "N"},    // Return
    }};

// Latching alarm. UA- is the latched state (condition clear, awaiting
// acknowledgement). A latching alarm never reaches UR, so it has no column;
// its code path there is the non-latching one.
const Table kLatching = {
    {"N", "UA+", "UA-", "AA+", "SH+", "SH-", "SU+", "SU-", "OOS+", "OOS-"},
    {
        // N     UA+    UA-                AA+    SH+    SH-    SU+    SU-    OOS+   OOS-
        {"UA",  "=",   "=",               "=",   "=",   "=",   "=",   "=",   "=",   "="},
        {"=",   "=",   "=",               "=",   "=",   "=",   "=",   "=",   "=",   "="},
        {"=",   "=",   "=",               "N",   "=",   "=",   "=",   "=",   "=",   "="},
        {"=",   "AA",  "N:latched_reset", "=",   "rej", "rej", "rej", "rej", "rej", "rej"},
        {"SH",  "SH",  "SH",              "SH",  "rej", "rej", "rej", "rej", "rej", "rej"},
        {"rej", "rej", "rej",             "rej", "UA",  "N",   "rej", "rej", "rej", "rej"},
        {"=",   "=",   "=",               "=",   "UA",  "N",   "=",   "=",   "=",   "="},
        {"SU",  "SU",  "SU",              "SU",  "SU",  "SU",  "=",   "=",   "rej", "rej"},
        {"=",   "=",   "=",               "=",   "=",   "=",   "UA",  "N",   "=",   "="},
        {"OOS", "OOS", "OOS",             "OOS", "OOS", "OOS", "OOS", "OOS", "=",   "="},
        {"rej", "rej", "rej",             "rej", "rej", "rej", "rej", "rej", "UA",  "N"},
    }};

AlarmState StateFromAbbrev(const std::string& s) {
  if (s == "N") return AlarmState::kNormal;
  if (s == "UA") return AlarmState::kUnackActive;
  if (s == "AA") return AlarmState::kAckActive;
  if (s == "UR") return AlarmState::kUnackReturned;
  if (s == "SH") return AlarmState::kShelved;
  if (s == "SU") return AlarmState::kSuppressed;
  if (s == "OOS") return AlarmState::kOutOfService;
  ADD_FAILURE() << "bad abbreviation " << s;
  return AlarmState::kNormal;
}

AlarmCause CauseFromName(const std::string& s) {
  for (int i = 0; i < kAlarmCauseCount; ++i) {
    if (s == AlarmCauseName(static_cast<AlarmCause>(i))) return static_cast<AlarmCause>(i);
  }
  ADD_FAILURE() << "bad cause " << s;
  return AlarmCause::kConditionRaised;
}

struct Rig {
  SequenceCounter seq;
  Recorder rec;
  Alarm alarm;
  double t = 1000.0;
  bool raw = false;  // the raw condition last fed

  explicit Rig(bool latching) {
    std::string why;
    EXPECT_TRUE(alarm.Init(3, AlarmType::kLeak, TestOptions(latching), &seq, &rec, &why)) << why;
  }
  AlarmResult Feed(double dt, bool active) {
    t += dt;
    raw = active;
    return alarm.Update(t, active, Evidence(active ? 2.5 : 0.0));
  }
};

// Drives a fresh alarm into the row's start state through public inputs only.
void Reach(Rig* r, const std::string& start) {
  const std::string base = start.substr(0, start.find_first_of("+-"));
  const bool active = start.back() == '+';
  if (active) r->Feed(1.0, true);
  if (base == "UA" && !active) {  // latched: raised, then clear for the full hold
    r->Feed(1.0, true);
    r->Feed(1.0, false);
    r->Feed(kHold_s, false);
  } else if (base == "AA") {
    r->alarm.Acknowledge(r->t, "op");
  } else if (base == "UR") {
    r->Feed(1.0, true);
    r->Feed(1.0, false);
    r->Feed(kHold_s, false);
  } else if (base == "SH") {
    r->alarm.Shelve(r->t, 1000.0, "op");
  } else if (base == "SU") {
    r->alarm.Suppress(r->t);
  } else if (base == "OOS") {
    r->alarm.RemoveFromService(r->t, "op");
  }
  ASSERT_EQ(r->alarm.state(), StateFromAbbrev(base)) << "could not reach " << start;
  ASSERT_EQ(r->alarm.condition_active(), active) << "could not reach " << start;
  r->rec.events.clear();
}

AlarmResult Apply(Rig* r, Input in) {
  r->t += 1.0;
  switch (in) {
    case kUpdActive:
      return r->Feed(0.0, true);
    case kUpdClearShort:
      r->Feed(0.0, false);
      return r->Feed(kHold_s / 2, false);
    case kUpdClearHeld:
      r->Feed(0.0, false);
      return r->Feed(kHold_s, false);
    case kAck:
      return r->alarm.Acknowledge(r->t, "op");
    case kShelveIn:
      return r->alarm.Shelve(r->t, 600.0, "op");
    case kUnshelveIn:
      return r->alarm.Unshelve(r->t, "op");
    case kExpiry:
      return r->Feed(5000.0, r->raw);
    case kSuppressIn:
      return r->alarm.Suppress(r->t);
    case kUnsuppressIn:
      return r->alarm.Unsuppress(r->t);
    case kRemove:
      return r->alarm.RemoveFromService(r->t, "op");
    case kReturn:
      return r->alarm.ReturnToService(r->t, "op");
    case kInputCount:
      break;
  }
  return AlarmResult::kRejectedInvalidArgument;
}

void WalkTable(const Table& table, bool latching, int* cells_checked) {
  for (int col = 0; col < kColumns; ++col) {
    for (int in = 0; in < kInputCount; ++in) {
      const std::string cell = table.cells[in][col];
      SCOPED_TRACE(std::string(latching ? "latching " : "non-latching ") + table.starts[col] +
                   " x " + kInputNames[in] + " -> " + cell);
      Rig r(latching);
      ASSERT_NO_FATAL_FAILURE(Reach(&r, table.starts[col]));
      const AlarmState before = r.alarm.state();
      const AlarmResult result = Apply(&r, static_cast<Input>(in));
      if (cell == "=" || cell == "rej") {
        EXPECT_EQ(AlarmResultName(result),
                  std::string(cell == "=" ? "no_change" : "rejected_invalid_in_state"));
        EXPECT_EQ(r.alarm.state(), before);
        EXPECT_TRUE(r.rec.events.empty()) << r.rec.events.front().ToString();
      } else {
        const std::size_t colon = cell.find(':');
        const AlarmState to = StateFromAbbrev(cell.substr(0, colon));
        const std::string cause =
            colon == std::string::npos ? kRowCause[in] : cell.substr(colon + 1);
        EXPECT_EQ(AlarmResultName(result), std::string("applied"));
        EXPECT_EQ(AlarmStateName(r.alarm.state()), std::string(AlarmStateName(to)));
        ASSERT_EQ(r.rec.events.size(), 1u);
        const AlarmEvent& e = r.rec.events[0];
        EXPECT_EQ(e.from, before);
        EXPECT_EQ(e.to, to);
        EXPECT_EQ(e.cause, CauseFromName(cause));
        EXPECT_EQ(e.segment, 3);
        EXPECT_EQ(e.type, AlarmType::kLeak);
        EXPECT_EQ(e.time_s, r.t);
        EXPECT_GT(e.seq, 0u);
        EXPECT_EQ(e.condition_active, r.alarm.condition_active());
      }
      // The filtered condition follows the raw one (with the hold) in every state.
      if (in == kUpdActive) {
        EXPECT_TRUE(r.alarm.condition_active());
      }
      if (in == kUpdClearHeld) {
        EXPECT_FALSE(r.alarm.condition_active());
      }
      ++*cells_checked;
    }
  }
}

TEST(AlarmTable, EveryStateAndInputNonLatching) {
  int cells = 0;
  WalkTable(kNonLatching, false, &cells);
  EXPECT_EQ(cells, kColumns * kInputCount);
}

TEST(AlarmTable, EveryStateAndInputLatching) {
  int cells = 0;
  WalkTable(kLatching, true, &cells);
  EXPECT_EQ(cells, kColumns * kInputCount);
}

// Every AlarmState appears as a start state in the tables (UR only for the
// non-latching alarm, which is the only one that can reach it).
TEST(AlarmTable, CoversEveryState) {
  bool seen[kAlarmStateCount] = {};
  for (const char* start : kNonLatching.starts) {
    const std::string s = start;
    seen[static_cast<int>(StateFromAbbrev(s.substr(0, s.find_first_of("+-"))))] = true;
  }
  for (int i = 0; i < kAlarmStateCount; ++i) EXPECT_TRUE(seen[i]) << i;
}

// ---- Hysteresis --------------------------------------------------------------

TEST(Alarm, ClearShorterThanHoldDoesNotReturnToNormal) {
  Rig r(false);
  r.Feed(0.0, true);
  ASSERT_EQ(r.alarm.state(), AlarmState::kUnackActive);
  // Clear for just under the hold, three times over, with blips between.
  for (int k = 0; k < 3; ++k) {
    r.Feed(1.0, false);
    r.Feed(kHold_s - 1.5, false);  // clear for hold - 1.5 s
    EXPECT_EQ(r.alarm.state(), AlarmState::kUnackActive);
    EXPECT_TRUE(r.alarm.condition_active());
    r.Feed(1.0, true);  // back before the hold is met: the hold restarts
  }
  EXPECT_EQ(r.rec.events.size(), 1u);  // the raise only
  // Now clear for the full hold, measured from the first clear Update.
  r.Feed(1.0, false);
  const double first_clear = r.t;
  EXPECT_EQ(r.alarm.clearing_since_s(), first_clear);
  r.Feed(kHold_s - 0.001, false);
  EXPECT_EQ(r.alarm.state(), AlarmState::kUnackActive);
  r.Feed(0.001, false);
  EXPECT_EQ(r.alarm.state(), AlarmState::kUnackReturned);
  ASSERT_EQ(r.rec.events.size(), 2u);
  EXPECT_EQ(r.rec.events[1].cause, AlarmCause::kConditionCleared);
  EXPECT_EQ(r.rec.events[1].time_s, first_clear + kHold_s);
  EXPECT_TRUE(std::isnan(r.alarm.clearing_since_s()));
}

TEST(Alarm, RaisingIsImmediateAndRepeatedActiveUpdatesEmitNothing) {
  Rig r(false);
  EXPECT_EQ(r.Feed(1.0, true), AlarmResult::kApplied);
  for (int k = 0; k < 100; ++k) EXPECT_EQ(r.Feed(1.0, true), AlarmResult::kNoChange);
  EXPECT_EQ(r.rec.events.size(), 1u);
  // Evidence of the raising tick is in the event.
  EXPECT_DOUBLE_EQ(r.rec.events[0].evidence.leak_rate_kg_s, 2.5);
  EXPECT_STREQ(r.rec.events[0].evidence.detail, "window 3600 s");
}

TEST(Alarm, ZeroHoldClearsOnFirstClearUpdate) {
  SequenceCounter seq;
  Recorder rec;
  Alarm a;
  AlarmOptions o = TestOptions(false);
  o.return_to_normal_hold_s = 0.0;
  ASSERT_TRUE(a.Init(0, AlarmType::kRupture, o, &seq, &rec, nullptr));
  a.Update(1.0, true, Evidence(1.0));
  a.Update(2.0, false, Evidence(0.0));
  EXPECT_EQ(a.state(), AlarmState::kUnackReturned);
}

// ---- Latching ------------------------------------------------------------------

TEST(Alarm, LatchingNeedsAcknowledgeAndClearInEitherOrder) {
  {  // cleared first, then acknowledged
    Rig r(true);
    r.Feed(0.0, true);
    r.Feed(1.0, false);
    r.Feed(10.0 * kHold_s, false);
    EXPECT_EQ(r.alarm.state(), AlarmState::kUnackActive);
    EXPECT_FALSE(r.alarm.condition_active());
    EXPECT_EQ(r.rec.events.size(), 1u);
    EXPECT_EQ(r.alarm.Acknowledge(r.t + 1.0, "op"), AlarmResult::kApplied);
    EXPECT_EQ(r.alarm.state(), AlarmState::kNormal);
    ASSERT_EQ(r.rec.events.size(), 2u);
    EXPECT_EQ(r.rec.events[1].cause, AlarmCause::kLatchedReset);
    EXPECT_STREQ(r.rec.events[1].user, "op");
  }
  {  // acknowledged first, then cleared
    Rig r(true);
    r.Feed(0.0, true);
    EXPECT_EQ(r.alarm.Acknowledge(r.t + 1.0, "op"), AlarmResult::kApplied);
    EXPECT_EQ(r.alarm.state(), AlarmState::kAckActive);
    r.Feed(2.0, false);
    EXPECT_EQ(r.alarm.state(), AlarmState::kAckActive);
    r.Feed(kHold_s, false);
    EXPECT_EQ(r.alarm.state(), AlarmState::kNormal);
    ASSERT_EQ(r.rec.events.size(), 3u);
    EXPECT_EQ(r.rec.events[2].cause, AlarmCause::kConditionCleared);
  }
  {  // latched and the condition returns: still one unacknowledged alarm, no new event
    Rig r(true);
    r.Feed(0.0, true);
    r.Feed(1.0, false);
    r.Feed(kHold_s, false);
    r.Feed(1.0, true);
    EXPECT_EQ(r.alarm.state(), AlarmState::kUnackActive);
    EXPECT_EQ(r.rec.events.size(), 1u);
    r.alarm.Acknowledge(r.t, "op");
    EXPECT_EQ(r.alarm.state(), AlarmState::kAckActive);
  }
}

// ---- Shelving -------------------------------------------------------------------

TEST(Alarm, ShelveExpiresByItselfWithAnEvent) {
  Rig r(false);
  r.Feed(0.0, true);  // t = 1000
  ASSERT_EQ(r.alarm.Shelve(1010.0, 100.0, "night-shift"), AlarmResult::kApplied);
  EXPECT_EQ(r.alarm.shelved_until_s(), 1110.0);
  ASSERT_EQ(r.rec.events.size(), 2u);
  EXPECT_EQ(r.rec.events[1].shelved_until_s, 1110.0);
  EXPECT_STREQ(r.rec.events[1].user, "night-shift");
  // The condition is tracked while shelved: it clears (after the hold) ...
  r.alarm.Update(1020.0, false, Evidence(0.0));
  r.alarm.Update(1020.0 + kHold_s, false, Evidence(0.0));
  EXPECT_FALSE(r.alarm.condition_active());
  // ... and comes back; nothing is annunciated.
  r.alarm.Update(1100.0, true, Evidence(3.0));
  EXPECT_EQ(r.alarm.Update(1109.999, true, Evidence(3.0)), AlarmResult::kNoChange);
  EXPECT_EQ(r.alarm.state(), AlarmState::kShelved);
  EXPECT_EQ(r.rec.events.size(), 2u);
  // At the expiry time, the shelve ends in the state the condition calls for.
  EXPECT_EQ(r.alarm.Update(1110.0, true, Evidence(3.0)), AlarmResult::kApplied);
  EXPECT_EQ(r.alarm.state(), AlarmState::kUnackActive);
  ASSERT_EQ(r.rec.events.size(), 3u);
  EXPECT_EQ(r.rec.events[2].cause, AlarmCause::kShelveExpired);
  EXPECT_EQ(r.rec.events[2].time_s, 1110.0);
  EXPECT_TRUE(std::isnan(r.alarm.shelved_until_s()));
  EXPECT_TRUE(std::isnan(r.rec.events[2].shelved_until_s));
}

TEST(Alarm, ShelveIsCappedAtTheMaximum) {
  Rig r(false);
  ASSERT_EQ(r.alarm.Shelve(r.t, 1e12, "op"), AlarmResult::kApplied);
  EXPECT_EQ(r.alarm.shelved_until_s(), r.t + kMaxShelveTest_s);
  Rig r2(false);
  ASSERT_EQ(r2.alarm.Shelve(r2.t, std::numeric_limits<double>::infinity(), "op"),
            AlarmResult::kApplied);
  EXPECT_EQ(r2.alarm.shelved_until_s(), r2.t + kMaxShelveTest_s);
  // The documented default: 8 h.
  EXPECT_EQ(AlarmOptions().max_shelve_s, 8.0 * 3600.0);
}

TEST(Alarm, CommandAfterExpiryRetiresTheShelveFirst) {
  Rig r(false);
  r.Feed(0.0, true);
  r.alarm.Shelve(r.t, 100.0, "op");
  r.rec.events.clear();
  // No Update between: the acknowledge at a later time first expires the
  // shelve (UA), then acknowledges (AA): two transitions, two events.
  EXPECT_EQ(r.alarm.Acknowledge(r.t + 200.0, "op"), AlarmResult::kApplied);
  ASSERT_EQ(r.rec.events.size(), 2u);
  EXPECT_EQ(r.rec.events[0].cause, AlarmCause::kShelveExpired);
  EXPECT_EQ(r.rec.events[1].cause, AlarmCause::kAcknowledged);
  EXPECT_EQ(r.alarm.state(), AlarmState::kAckActive);
  // An unshelve after expiry is rejected (nothing is shelved), but the
  // expiry's own event is still emitted.
  Rig q(false);
  q.alarm.Shelve(q.t, 100.0, "op");
  q.rec.events.clear();
  EXPECT_EQ(q.alarm.Unshelve(q.t + 100.0, "op"), AlarmResult::kRejectedInvalidInState);
  ASSERT_EQ(q.rec.events.size(), 1u);
  EXPECT_EQ(q.rec.events[0].cause, AlarmCause::kShelveExpired);
}

TEST(Alarm, SuppressionDropsAShelve) {
  Rig r(false);
  r.Feed(0.0, true);
  r.alarm.Shelve(r.t, 100.0, "op");
  EXPECT_EQ(r.alarm.Suppress(r.t + 1.0), AlarmResult::kApplied);
  EXPECT_TRUE(std::isnan(r.alarm.shelved_until_s()));
  // Past the old shelve's end nothing happens; the suppression holds.
  EXPECT_EQ(r.alarm.Update(r.t + 500.0, true, Evidence(1.0)), AlarmResult::kNoChange);
  EXPECT_EQ(r.alarm.Unsuppress(r.t + 501.0), AlarmResult::kApplied);
  EXPECT_EQ(r.alarm.state(), AlarmState::kUnackActive);
}

// ---- Arguments, time and readiness -----------------------------------------------

TEST(Alarm, BadInputsAreRejectedAndChangeNothing) {
  Rig r(false);
  r.Feed(0.0, true);
  const double t = r.t;
  const std::size_t n = r.rec.events.size();
  EXPECT_EQ(r.alarm.Update(kNaN, false, Evidence(0)), AlarmResult::kRejectedInvalidArgument);
  EXPECT_EQ(r.alarm.Update(std::numeric_limits<double>::infinity(), false, Evidence(0)),
            AlarmResult::kRejectedInvalidArgument);
  EXPECT_EQ(r.alarm.Update(t - 1.0, false, Evidence(0)), AlarmResult::kRejectedTimeReversed);
  EXPECT_EQ(r.alarm.Acknowledge(t - 1.0, "op"), AlarmResult::kRejectedTimeReversed);
  EXPECT_EQ(r.alarm.Acknowledge(t, ""), AlarmResult::kRejectedInvalidArgument);
  EXPECT_EQ(r.alarm.Acknowledge(t, std::string(32, 'x')), AlarmResult::kRejectedInvalidArgument);
  EXPECT_EQ(r.alarm.Acknowledge(t, "bad\nname"), AlarmResult::kRejectedInvalidArgument);
  EXPECT_EQ(r.alarm.Shelve(t, kNaN, "op"), AlarmResult::kRejectedInvalidArgument);
  EXPECT_EQ(r.alarm.Shelve(t, 0.0, "op"), AlarmResult::kRejectedInvalidArgument);
  EXPECT_EQ(r.alarm.Shelve(t, -5.0, "op"), AlarmResult::kRejectedInvalidArgument);
  EXPECT_EQ(r.alarm.Shelve(t, 1e-300, "op"), AlarmResult::kRejectedInvalidArgument);
  EXPECT_EQ(r.alarm.Suppress(kNaN), AlarmResult::kRejectedInvalidArgument);
  EXPECT_EQ(r.alarm.RemoveFromService(t, ""), AlarmResult::kRejectedInvalidArgument);
  EXPECT_EQ(r.alarm.state(), AlarmState::kUnackActive);
  EXPECT_EQ(r.alarm.last_time_s(), t);
  EXPECT_EQ(r.rec.events.size(), n);
  // Equal times are fine (several inputs in one tick); a 31-byte name fits.
  EXPECT_EQ(r.alarm.Acknowledge(t, std::string(31, 'x')), AlarmResult::kApplied);
  EXPECT_EQ(std::strlen(r.rec.events.back().user), 31u);
}

TEST(Alarm, NotReadyAlarmRejectsEverything) {
  Alarm a;
  EXPECT_FALSE(a.ready());
  EXPECT_EQ(a.Update(1.0, true, Evidence(1)), AlarmResult::kRejectedNotReady);
  EXPECT_EQ(a.Acknowledge(1.0, "op"), AlarmResult::kRejectedNotReady);
  EXPECT_EQ(a.Shelve(1.0, 10.0, "op"), AlarmResult::kRejectedNotReady);
  EXPECT_EQ(a.Unshelve(1.0, "op"), AlarmResult::kRejectedNotReady);
  EXPECT_EQ(a.Suppress(1.0), AlarmResult::kRejectedNotReady);
  EXPECT_EQ(a.Unsuppress(1.0), AlarmResult::kRejectedNotReady);
  EXPECT_EQ(a.RemoveFromService(1.0, "op"), AlarmResult::kRejectedNotReady);
  EXPECT_EQ(a.ReturnToService(1.0, "op"), AlarmResult::kRejectedNotReady);
  EXPECT_FALSE(a.Bind(nullptr, nullptr));
}

TEST(Alarm, InitAndOptionsValidation) {
  SequenceCounter seq;
  Recorder rec;
  Alarm a;
  std::string why;
  AlarmOptions o;
  EXPECT_TRUE(o.IsValid(&why));
  EXPECT_EQ(o.return_to_normal_hold_s, kReturnToNormalHold_s);
  EXPECT_FALSE(a.Init(-1, AlarmType::kLeak, o, &seq, &rec, &why));
  EXPECT_NE(why.find("segment"), std::string::npos);
  EXPECT_FALSE(a.Init(0, static_cast<AlarmType>(9), o, &seq, &rec, &why));
  EXPECT_FALSE(a.Init(0, AlarmType::kLeak, o, nullptr, &rec, &why));
  EXPECT_FALSE(a.Init(0, AlarmType::kLeak, o, &seq, nullptr, &why));
  o.return_to_normal_hold_s = -1.0;
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("return_to_normal_hold_s"), std::string::npos);
  EXPECT_FALSE(a.Init(0, AlarmType::kLeak, o, &seq, &rec, &why));
  EXPECT_NE(why.find("options"), std::string::npos);
  o = AlarmOptions();
  o.max_shelve_s = std::numeric_limits<double>::infinity();
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_NE(why.find("max_shelve_s"), std::string::npos);
  o.max_shelve_s = 0.0;
  EXPECT_FALSE(o.IsValid(&why));
  o = AlarmOptions();
  o.priority = static_cast<AlarmPriority>(7);
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_FALSE(a.ready());
}

TEST(Alarm, NamesRoundTrip) {
  for (int i = 0; i < kAlarmStateCount; ++i) {
    AlarmState s{};
    ASSERT_TRUE(ParseAlarmState(AlarmStateName(static_cast<AlarmState>(i)), &s));
    EXPECT_EQ(static_cast<int>(s), i);
  }
  for (int i = 0; i < kAlarmTypeCount; ++i) {
    AlarmType t{};
    ASSERT_TRUE(ParseAlarmType(AlarmTypeName(static_cast<AlarmType>(i)), &t));
    EXPECT_EQ(static_cast<int>(t), i);
  }
  for (int i = 0; i < kAlarmPriorityCount; ++i) {
    AlarmPriority p{};
    ASSERT_TRUE(ParseAlarmPriority(AlarmPriorityName(static_cast<AlarmPriority>(i)), &p));
    EXPECT_EQ(static_cast<int>(p), i);
  }
  EXPECT_STREQ(AlarmTypeName(AlarmType::kBalanceUnavailable), "balance_unavailable");
  EXPECT_STREQ(AlarmStateName(AlarmState::kUnackReturned), "unack_returned");
  EXPECT_STREQ(AlarmCauseName(AlarmCause::kRemovedFromService), "removed_from_service");
  EXPECT_STREQ(AlarmStateName(static_cast<AlarmState>(99)), "?");
  AlarmState s = AlarmState::kShelved;
  EXPECT_FALSE(ParseAlarmState("Normal", &s));
  EXPECT_EQ(s, AlarmState::kShelved);
}

TEST(Alarm, DetailIsTruncatedSafely) {
  AlarmEvidence e;
  e.SetDetail(std::string(200, 'a'));
  EXPECT_EQ(std::strlen(e.detail), AlarmEvidence::kDetailSize - 1);
  // A two-byte UTF-8 character straddling the limit is dropped whole.
  std::string s(62, 'b');
  s += "\xC3\xA9";  // e-acute
  e.SetDetail(s);
  EXPECT_EQ(std::strlen(e.detail), 62u);
}

TEST(Alarm, EventToStringReadsAsOneLine) {
  Rig r(false);
  r.Feed(0.0, true);
  r.alarm.Shelve(r.t, 100.0, "op");
  const std::string line = r.rec.events[1].ToString();
  EXPECT_NE(line.find("leak high unack_active->shelved (shelved) by=op"), std::string::npos)
      << line;
  EXPECT_NE(line.find("until=1100.000"), std::string::npos) << line;
  EXPECT_EQ(line.find('\n'), std::string::npos);
}

// ---- Sequence numbers ------------------------------------------------------------

TEST(Alarm, SequenceNumbersStrictlyIncreaseAcrossAlarmsSharingACounter) {
  SequenceCounter seq(41);
  Recorder rec;
  std::vector<Alarm> alarms(6);
  for (int i = 0; i < 6; ++i) {
    ASSERT_TRUE(alarms[static_cast<std::size_t>(i)].Init(
        i / 2, static_cast<AlarmType>(i % kAlarmTypeCount), TestOptions(i % 3 == 0), &seq, &rec,
        nullptr));
  }
  // A deterministic pseudo-random mix of ticks and commands (LCG, Knuth MMIX).
  uint64_t x = 12345;
  auto next = [&x](uint64_t n) {
    x = x * 6364136223846793005ull + 1442695040888963407ull;
    return (x >> 33) % n;
  };
  double t = 0.0;
  for (int step = 0; step < 5000; ++step) {
    t += 5.0;
    for (Alarm& a : alarms) {
      switch (next(12)) {
        case 0: a.Acknowledge(t, "op"); break;
        case 1: a.Shelve(t, static_cast<double>(next(400)) + 1.0, "op"); break;
        case 2: a.Unshelve(t, "op"); break;
        case 3: a.Suppress(t); break;
        case 4: a.Unsuppress(t); break;
        case 5: a.RemoveFromService(t, "op"); break;
        case 6: a.ReturnToService(t, "op"); break;
        default: a.Update(t, next(3) == 0, Evidence(1.0)); break;
      }
    }
  }
  ASSERT_GT(rec.events.size(), 1000u);
  EXPECT_EQ(rec.events.front().seq, 41u);
  for (std::size_t i = 1; i < rec.events.size(); ++i) {
    ASSERT_EQ(rec.events[i].seq, rec.events[i - 1].seq + 1) << i;
    ASSERT_NE(rec.events[i].from, rec.events[i].to) << rec.events[i].ToString();
    ASSERT_GE(rec.events[i].time_s, rec.events[i - 1].time_s);
  }
  EXPECT_EQ(seq.peek(), rec.events.back().seq + 1);
  // Per alarm, each event starts where the previous one ended.
  for (const Alarm& a : alarms) {
    AlarmState at = AlarmState::kNormal;
    for (const AlarmEvent& e : rec.events) {
      if (e.segment != a.segment() || e.type != a.type()) continue;
      ASSERT_EQ(e.from, at) << e.ToString();
      at = e.to;
    }
    EXPECT_EQ(at, a.state());
  }
}

TEST(Alarm, RingOverwritesOldestAndCounts) {
  SequenceCounter seq;
  AlarmEventRing<4> ring;
  Alarm a;
  ASSERT_TRUE(a.Init(0, AlarmType::kLeak, TestOptions(false), &seq, &ring, nullptr));
  double t = 0.0;
  for (int k = 0; k < 3; ++k) {  // 6 events: raise, ack, and back via suppress/unsuppress
    a.Update(t += 1.0, true, Evidence(1));
    a.Suppress(t += 1.0);
    a.Unsuppress(t += 1.0);
    (void)k;
  }
  // Events: raise, suppress, unsuppress(UA), suppress, unsuppress, suppress, unsuppress = 7.
  EXPECT_EQ(seq.peek(), 8u);
  EXPECT_EQ(ring.size(), 4u);
  EXPECT_EQ(ring.overwritten(), 3u);
  AlarmEvent e;
  ASSERT_TRUE(ring.Pop(&e));
  EXPECT_EQ(e.seq, 4u);
  while (ring.Pop(&e)) {
  }
  EXPECT_EQ(e.seq, 7u);
  EXPECT_EQ(ring.size(), 0u);
}

// ---- Persistence -------------------------------------------------------------------

// Alarms in a variety of states, including a live shelve and a pending clear.
std::vector<Alarm> VarietyOfAlarms(SequenceCounter* seq, AlarmEventSink* sink) {
  std::vector<Alarm> v(7);
  for (std::size_t i = 0; i < v.size(); ++i) {
    AlarmOptions o = TestOptions(i == 2);
    o.priority = static_cast<AlarmPriority>(i % kAlarmPriorityCount);
    EXPECT_TRUE(v[i].Init(static_cast<int>(i), AlarmType::kLeak, o, seq, sink, nullptr));
  }
  AlarmEvidence ev = Evidence(4.25);
  ev.location_m = kNaN;  // unknown location
  ev.SetDetail("grad \"x\" \\ \xC3\xA9");
  // 0: fresh. 1: unack active, clearing pending.
  v[1].Update(100.0, true, ev);
  v[1].Update(130.0, false, ev);
  // 2: latching, latched with the condition clear.
  v[2].Update(100.0, true, ev);
  v[2].Update(101.0, false, ev);
  v[2].Update(101.0 + kHold_s, false, ev);
  // 3: shelved until 100.1 + 1234.5 with the condition active.
  v[3].Update(100.0, true, ev);
  v[3].Shelve(100.1, 1234.5, "op");
  // 4: acknowledged. 5: suppressed. 6: out of service.
  v[4].Update(100.0, true, ev);
  v[4].Acknowledge(101.0, "op");
  v[5].Suppress(100.0);
  v[6].Update(100.0, true, ev);
  v[6].RemoveFromService(102.0, "op");
  return v;
}

TEST(AlarmPersistence, RoundTripRestoresEqualState) {
  SequenceCounter seq;
  Recorder rec;
  std::vector<Alarm> alarms = VarietyOfAlarms(&seq, &rec);
  EXPECT_TRUE(alarms[2].options().latching);
  EXPECT_EQ(alarms[3].state(), AlarmState::kShelved);
  const std::string blob = SerializeAlarms(alarms, seq.peek());
  EXPECT_NE(blob.find("\"format\": \"holdfast-alarms/1\""), std::string::npos) << blob;

  std::vector<Alarm> back;
  uint64_t next_seq = 0;
  std::string why;
  ASSERT_TRUE(RestoreAlarms(blob, &back, &next_seq, &why)) << why << "\n" << blob;
  EXPECT_EQ(next_seq, seq.peek());
  ASSERT_EQ(back.size(), alarms.size());
  for (std::size_t i = 0; i < alarms.size(); ++i) {
    EXPECT_TRUE(back[i].SameStateAs(alarms[i])) << i;
    EXPECT_FALSE(back[i].ready());
  }
  EXPECT_EQ(back[3].shelved_until_s(), 100.1 + 1234.5);
  EXPECT_EQ(back[1].clearing_since_s(), 130.0);
  EXPECT_TRUE(std::isnan(back[1].evidence().location_m));
  EXPECT_STREQ(back[1].evidence().detail, alarms[1].evidence().detail);
  EXPECT_EQ(SerializeAlarms(back, next_seq), blob);

  // The restored alarms behave identically: same inputs, same events
  // (including the shelve's expiry at its stored time).
  SequenceCounter seq2(next_seq);
  Recorder rec2;
  for (Alarm& a : back) ASSERT_TRUE(a.Bind(&seq2, &rec2));
  rec.events.clear();
  for (double t = 200.0; t < 2000.0; t += 7.0) {
    const bool active = std::fmod(t, 300.0) < 100.0;
    for (std::size_t i = 0; i < alarms.size(); ++i) {
      EXPECT_EQ(alarms[i].Update(t, active, Evidence(1.0)),
                back[i].Update(t, active, Evidence(1.0)));
    }
  }
  ASSERT_EQ(rec.events.size(), rec2.events.size());
  bool saw_expiry = false;
  for (std::size_t k = 0; k < rec.events.size(); ++k) {
    EXPECT_EQ(rec.events[k].ToString(), rec2.events[k].ToString());
    saw_expiry = saw_expiry || rec.events[k].cause == AlarmCause::kShelveExpired;
  }
  EXPECT_TRUE(saw_expiry);
}

TEST(AlarmPersistence, EmptyListRoundTrips) {
  std::vector<Alarm> back(3);
  uint64_t next_seq = 0;
  std::string why;
  ASSERT_TRUE(RestoreAlarms(SerializeAlarms({}, 77), &back, &next_seq, &why)) << why;
  EXPECT_TRUE(back.empty());
  EXPECT_EQ(next_seq, 77u);
}

// Each replacement applied to a good blob must be rejected with a reason
// containing `expect`, leaving the outputs untouched.
struct Corruption {
  const char* find;
  const char* replace;
  const char* expect;
};

std::string ReplaceFirst(std::string s, const std::string& find, const std::string& repl) {
  const std::size_t at = s.find(find);
  EXPECT_NE(at, std::string::npos) << "test setup: '" << find << "' not in blob";
  if (at != std::string::npos) s.replace(at, find.size(), repl);
  return s;
}

TEST(AlarmPersistence, BadBlobsAreRejectedWithAReason) {
  SequenceCounter seq;
  Recorder rec;
  const std::string good = SerializeAlarms(VarietyOfAlarms(&seq, &rec), seq.peek());
  const Corruption cases[] = {
      {"holdfast-alarms/1", "holdfast-alarms/2", "unsupported format"},
      {"\"format\": \"holdfast-alarms/1\"", "\"format\": 1", "unsupported format"},
      {"\"format\": \"holdfast-alarms/1\",", "", "no \"format\" field"},
      {"\"next_seq\"", "\"next_sequence\"", "missing field 'next_seq'"},
      {"\"next_seq\"", "\"extra\": 1, \"next_seq\"", "unknown field 'extra'"},
      {"\"window_s\"", "\"wndow_s\"", "evidence: missing field 'window_s'"},
      {"\"next_seq\": ", "\"next_seq\": -", "next_seq"},
      {"\"state\": \"unack_active\"", "\"state\": \"unack_activ\"", "not a known alarm state"},
      {"\"type\": \"leak\"", "\"type\": \"Leak\"", "not a known alarm type"},
      {"\"priority\": \"low\"", "\"priority\": 3", "not a known priority"},
      {"\"segment\": 1,", "\"segment\": -1,", "segment"},
      {"\"segment\": 1,", "\"segment\": 1.5,", "segment"},
      {"\"segment\": 1,", "\"segment\": 0,", "duplicate alarm for segment 0"},
      {"\"condition_active\": true", "\"condition_active\": 1", "must be true or false"},
      {"\"latching\": false,", "", "missing field 'latching'"},
      {"\"max_shelve_s\": 3600.0", "\"max_shelve_s\": 0", "max_shelve_s"},
      {"\"max_shelve_s\": 3600.0", "\"max_shelve_s\": null", "max_shelve_s"},
      {"\"last_time_s\": null", "\"last_time_s\": \"now\"", "must be a number or null"},
      {"\"shelved_until_s\": 1334.6", "\"shelved_until_s\": 99999.0", "within max_shelve_s"},
      {"\"shelved_until_s\": 1334.6", "\"shelved_until_s\": null", "shelved_until_s"},
      {"\"alarms\": [", "\"alarms\": {\"x\": [", "not valid JSON"},
      {"\"format\"", "\"format\": \"holdfast-alarms/1\", \"format\"", "duplicate field 'format'"},
      {"\"statistic\": 7.5,", "\"statistic\": 7.5, \"statistic\": 1.0,", "duplicate field"},
  };
  for (const Corruption& c : cases) {
    SCOPED_TRACE(std::string(c.find) + " -> " + c.replace);
    const std::string bad = ReplaceFirst(good, c.find, c.replace);
    std::vector<Alarm> out(2);
    uint64_t next_seq = 99;
    std::string why;
    EXPECT_FALSE(RestoreAlarms(bad, &out, &next_seq, &why));
    EXPECT_NE(why.find(c.expect), std::string::npos) << why;
    EXPECT_EQ(out.size(), 2u);
    EXPECT_EQ(next_seq, 99u);
  }
  // A detail text too long to fit.
  {
    const std::string bad =
        ReplaceFirst(good, "\"detail\": \"", "\"detail\": \"" + std::string(70, 'z'));
    std::vector<Alarm> out;
    uint64_t next_seq = 0;
    std::string why;
    EXPECT_FALSE(RestoreAlarms(bad, &out, &next_seq, &why));
    EXPECT_NE(why.find("detail"), std::string::npos) << why;
  }
  // Inconsistent states.
  {
    std::string bad = ReplaceFirst(good, "\"state\": \"ack_active\"", "\"state\": \"normal\"");
    std::vector<Alarm> out;
    uint64_t next_seq = 0;
    std::string why;
    EXPECT_FALSE(RestoreAlarms(bad, &out, &next_seq, &why));
    EXPECT_NE(why.find("inconsistent"), std::string::npos) << why;
  }
  // Not JSON, empty, and the wrong JSON.
  for (const char* junk : {"", "garbage", "{}", "[]", "null", "{\"format\": null}", "\x01\xff"}) {
    std::vector<Alarm> out;
    uint64_t next_seq = 0;
    std::string why;
    EXPECT_FALSE(RestoreAlarms(junk, &out, &next_seq, &why)) << junk;
    EXPECT_FALSE(why.empty());
  }
  std::string why;
  EXPECT_FALSE(RestoreAlarms(good, nullptr, nullptr, &why));
}

// Every proper prefix of a good blob is a truncated blob: all rejected, none crash.
TEST(AlarmPersistence, EveryTruncationIsRejected) {
  SequenceCounter seq;
  Recorder rec;
  const std::string good = SerializeAlarms(VarietyOfAlarms(&seq, &rec), seq.peek());
  // The trailing newline is optional; cut the closing brace and everything before.
  const std::size_t body = good.find_last_of('}');
  ASSERT_NE(body, std::string::npos);
  int rejected = 0;
  for (std::size_t n = 0; n <= body; ++n) {
    std::vector<Alarm> out;
    uint64_t next_seq = 0;
    std::string why;
    if (!RestoreAlarms(good.substr(0, n), &out, &next_seq, &why)) {
      ++rejected;
      EXPECT_FALSE(why.empty());
    } else {
      ADD_FAILURE() << "prefix of " << n << " bytes accepted";
    }
  }
  EXPECT_EQ(rejected, static_cast<int>(body + 1));
}

// ---- No allocation on the tick path -------------------------------------------------

TEST(Alarm, UpdateAndTransitionsAllocateNothing) {
  SequenceCounter seq;
  AlarmEventRing<256> ring;
  std::vector<Alarm> alarms(4);
  for (std::size_t i = 0; i < alarms.size(); ++i) {
    ASSERT_TRUE(alarms[i].Init(0, static_cast<AlarmType>(i), TestOptions(i == 1), &seq, &ring,
                               nullptr));
  }
  const AlarmEvidence ev = Evidence(1.5);
  const uint64_t before = g_allocations.load();
  double t = 0.0;
  // Steady state: many ticks, no transitions.
  for (int k = 0; k < 10000; ++k) {
    t += 1.0;
    for (Alarm& a : alarms) a.Update(t, false, ev);
  }
  const uint64_t steady = g_allocations.load() - before;
  // Transitions and commands too (events go into the fixed ring).
  for (Alarm& a : alarms) {
    a.Update(t += 1.0, true, ev);
    a.Acknowledge(t, "op");
    a.Shelve(t, 10.0, "op");
    a.Update(t += 20.0, true, ev);
    a.Suppress(t);
    a.Unsuppress(t);
    a.RemoveFromService(t, "op");
    a.ReturnToService(t, "op");
  }
  AlarmEvent e;
  while (ring.Pop(&e)) {
  }
  const uint64_t total = g_allocations.load() - before;
  EXPECT_EQ(steady, 0u);
  EXPECT_EQ(total, 0u);
  EXPECT_GT(seq.peek(), 20u);
  // The counter itself works (a heap allocation is seen).
  const uint64_t probe = g_allocations.load();
  std::vector<AlarmEvent> v(3);
  EXPECT_GE(g_allocations.load() - probe, 1u);
  EXPECT_EQ(v.size(), 3u);
}

}  // namespace
}  // namespace holdfast
