// Readings payloads (JSON) as they arrive on the readings topics, checked and
// turned into core Readings. Pure: no clock (the caller passes its wall time
// for the absurd-timestamp check), no I/O, never throws.
//
//   P/readings/<point>:  {"time": T, "value": V, "quality": Q}   or an array of such
//   P/readings:          [{"point": ID, "time": T, "value": V, "quality": Q}, ...]
//
//   time     ISO 8601 with a zone ("2026-03-14T06:00:00.250Z") or epoch seconds (number)
//   value    a finite number, in the unit the point declares in the site file
//   quality  optional: "good" (default), "uncertain" or "bad"
//
// A bad item of an array is rejected alone; the other items stand. Unknown
// fields are rejected (a typo would otherwise pass silently).
#pragma once

#include <array>
#include <cstddef>
#include <cstdint>
#include <limits>
#include <string>
#include <string_view>
#include <unordered_map>
#include <vector>

#include "holdfast/reading.h"

namespace holdfast::daemon {

enum class Reject : uint8_t {
  kOversized,      // payload larger than max_payload_bytes
  kMalformedJson,  // not JSON, or nested too deep
  kWrongShape,     // not an object or an array of objects
  kBatchTooLarge,  // more items than max_batch
  kUnknownTopic,   // a topic outside the tree
  kUnknownPoint,   // point id not in the site
  kMissingField,   // time or value (or point, in a batch) missing
  kUnknownField,   // a field the schema does not have
  kWrongType,      // e.g. value as a string
  kNotFinite,      // value or time NaN or infinite (as a string or out of range)
  kBadTime,        // time string not ISO 8601 with a zone
  kAbsurdTime,     // before 2000, after 2100, or too far ahead of the wall clock
  kBadQuality,     // quality not good/uncertain/bad
};
constexpr int kRejectCount = 13;
const char* RejectName(Reject r);  // snake_case

struct PayloadLimits {
  std::size_t max_payload_bytes = 64 * 1024;
  std::size_t max_batch = 1000;
  int max_depth = 4;  // JSON nesting (array of objects is 2)
  // Wall clock (epoch s) and how far ahead of it a reading may be; NaN now_s
  // disables the check.
  double now_s = std::numeric_limits<double>::quiet_NaN();
  double max_future_s = 600.0;
};

// Earliest and latest plausible data times (epoch s): 2000-01-01 and 2100-01-01.
constexpr double kEarliestTime_s = 946684800.0;
constexpr double kLatestTime_s = 4102444800.0;

struct ParseResult {
  std::size_t accepted = 0;
  std::array<uint64_t, kRejectCount> rejected{};
  // The first problem, for a log line ("[3].value: must be a number").
  std::string first_error;
  Reject first_reason = Reject::kMalformedJson;
  uint64_t rejected_total() const;
};

using PointIndex = std::unordered_map<std::string, int>;

// Parses one payload. `topic_point` is the point id of a P/readings/<point>
// topic, or empty for the batch topic. Appends accepted readings to *out.
ParseResult ParseReadings(std::string_view payload, std::string_view topic_point, const PointIndex& points,
                          const PayloadLimits& limits, std::vector<Reading>* out);

}  // namespace holdfast::daemon
