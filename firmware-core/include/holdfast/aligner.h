// Time alignment of irregular telemetry: sample-and-hold with a per-point
// staleness limit. Readings are converted to SI on entry. Out-of-order,
// duplicate, unknown and non-finite readings are counted, never fatal.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "holdfast/reading.h"
#include "holdfast/site.h"

namespace holdfast {

enum class FeedStatus : uint8_t {
  kAccepted = 0,
  kLate,          // older than the last tick but newer than the held value: accepted
  kOutOfOrder,    // older than the held value: ignored (the newer value stays)
  kDuplicate,     // same time as the held value: ignored
  kUnknownPoint,  // point index not in the site
  kNotFinite,     // NaN or infinite value or time
};
const char* FeedStatusName(FeedStatus s);

// Data-quality verdicts on a point (bit flags, HeldValue::dq).
enum PointDq : uint8_t {
  kDqOutOfRange = 1u << 0,   // latest reading outside the point's configured range
  kDqRateOfChange = 1u << 1, // latest reading jumped faster than the plausible rate
  kDqFlatline = 1u << 2,     // value unchanged for longer than the flatline limit (set at tick)
};

// Plausibility limits applied to every point (per-point ranges come from the
// site config).
struct DataQualityOptions {
  // A value that has not changed at all for this long is a frozen transmitter.
  double flatline_s = 6.0 * 3600.0;
  // Plausible rate of change: the whole configured range in this many seconds.
  // A faster jump excludes the reading (points without a range are not checked).
  double full_range_s = 5.0;
  bool IsValid(std::string* why) const;
};

struct AlignerCounters {
  uint64_t accepted = 0;
  uint64_t late = 0;
  uint64_t out_of_order = 0;
  uint64_t duplicate = 0;
  uint64_t unknown_point = 0;
  uint64_t not_finite = 0;
  uint64_t bad_quality = 0;  // accepted readings flagged bad by the source
  uint64_t out_of_range = 0;     // readings outside the point's range (excluded)
  uint64_t rate_of_change = 0;   // readings that jumped implausibly fast (excluded)
  std::string ToString() const;
};

// What the aligner holds for one point. A bad-quality reading never replaces
// the held value: it marks the point unusable until a good or uncertain
// reading arrives (the last good value stays for reference).
struct HeldValue {
  double value_si = 0.0;     // last good or uncertain value, SI
  double time_s = 0.0;       // its time
  double last_time_s = 0.0;  // newest reading of any quality (ordering)
  Quality quality = Quality::kBad;  // quality of the newest reading
  bool has_value = false;    // a good or uncertain value has arrived
  bool seen = false;         // any reading has arrived
  uint8_t dq = 0;            // PointDq flags of the latest reading
  double changed_s = 0.0;    // when the value last changed (flatline check)
};

class Aligner {
 public:
  // Sizes the per-point state; the site must outlive the aligner.
  void Reset(const Site& site, const DataQualityOptions& dq = {});

  FeedStatus Feed(const Reading& r);
  // Marks the time of the latest tick (for counting late readings).
  void SetTickTime(double t) { tick_time_s_ = t; }

  const HeldValue& held(int point) const { return held_[point]; }
  // True when the point has a value of good or uncertain quality no older
  // than its staleness limit at time t.
  bool Usable(int point, double t) const {
    const HeldValue& h = held_[point];
    return h.has_value && h.quality != Quality::kBad && h.dq == 0 && (t - h.time_s) <= staleness_s_[point] &&
           (t - h.changed_s) <= dq_.flatline_s;
  }
  // PointDq flags at time t, including a flatline verdict.
  uint8_t Dq(int point, double t) const {
    const HeldValue& h = held_[point];
    return static_cast<uint8_t>(h.dq | (h.has_value && (t - h.changed_s) > dq_.flatline_s ? kDqFlatline : 0));
  }
  double value(int point) const { return held_[point].value_si; }
  const AlignerCounters& counters() const { return counters_; }
  int point_count() const { return static_cast<int>(held_.size()); }

 private:
  const Site* site_ = nullptr;
  std::vector<HeldValue> held_;
  std::vector<double> staleness_s_;
  DataQualityOptions dq_;
  double tick_time_s_ = -1e300;
  AlignerCounters counters_;
};

}  // namespace holdfast
