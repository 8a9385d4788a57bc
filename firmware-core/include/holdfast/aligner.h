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

// Data-quality verdicts on a point (bit flags, HeldValue::dq and Aligner::Dq).
// None of them takes a point out of use by itself: the last good value is
// held until it is older than the point's staleness limit (Usable), so one
// bad sample costs nothing but a count and a flag.
enum PointDq : uint8_t {
  kDqOutOfRange = 1u << 0,   // latest reading outside the point's configured range (excluded)
  kDqRateOfChange = 1u << 1, // latest reading jumped faster than the plausible rate (excluded)
  kDqFlatline = 1u << 2,     // frozen: a point known to be noisy repeats one value implausibly long
  kDqBadQuality = 1u << 3,   // latest reading flagged bad by its source (excluded)
  kDqStale = 1u << 4,        // no good value within the staleness limit (set at tick: unusable)
  kDqMissing = 1u << 5,      // no good value ever (set at tick: unusable)
  kDqSpike = 1u << 6,        // a one-reading spike was just dropped (the reading after it returned);
                             // informational: the point stays in use and the segment is not suspect
};
// Comma-separated names of the set PointDq flags ("" when none).
std::string PointDqNames(uint8_t dq);

// Plausibility checks applied to every point (per-point ranges come from the
// site config).
//
// Frozen transmitters are found by evidence, never by a steady value alone:
// a closed meter reads exactly zero for hours, a low-flow cut-off reads zero,
// a quantised or report-by-exception value repeats at its heartbeat, and all
// of these are healthy. A point is called frozen only when it has shown that
// it is noisy (it changed on at least frozen_min_change_share of its recent
// readings) and then repeats one value so many times in a row that a healthy
// point with that change share would do so with probability below
// frozen_false_probability, (1 - p)^n < P, or when such a noisy point repeats
// one value for longer than flatline_s. A zero flow is never frozen. A
// frozen verdict raises data quality; the point stays in use.
struct DataQualityOptions {
  // A noisy point (see above) whose value has not changed for this long is
  // frozen whatever its reading count.
  double flatline_s = 6.0 * 3600.0;
  // Plausible rate of change: the whole configured range in this many seconds.
  // A faster jump excludes the reading (points without a range are not checked).
  double full_range_s = 5.0;
  // Probability that a healthy noisy point repeats its value as often as a
  // frozen verdict needs.
  double frozen_false_probability = 1e-9;
  // Share of readings that change a healthy point's value before it counts
  // as noisy (learnt with weight 1 / frozen_learning_readings).
  double frozen_min_change_share = 0.5;
  double frozen_learning_readings = 200.0;
  // At least this many repeats, whatever the change share.
  int frozen_min_repeats = 12;

  // Spike check (one-sample confirmation). A good reading that jumps from
  // the point's last good value by more than
  //   max(spike_sigmas * sigma, spike_range_fraction * (range_max - range_min))
  // is held back one reading (sigma: the point's learnt noise; the range term
  // is 0 for a point without a configured range). If the next reading stays
  // away from the old level, both are taken: a real step costs one reading
  // of delay. If it returns to within that threshold of the old level, the
  // held-back reading was a spike: it is dropped, the last good value stays,
  // and the point's data quality carries kDqSpike. Water districts switch it
  // off: their loggers step legitimately (io/district_driver).
  bool spike_check = true;
  double spike_sigmas = 8.0;
  double spike_range_fraction = 0.002;
  // sigma is learnt from the reading-to-reading change d of accepted readings:
  // for white noise d ~ N(0, 2 sigma^2), so E|d| = 2 sigma / sqrt(pi) (the
  // half-normal mean, E|X| = s sqrt(2/pi); Johnson, Kotz & Balakrishnan 1994,
  // vol. 1, ch. 13). |d| is clipped at the threshold, and averaged with weight
  // max(1/n, 1/spike_learning_readings).
  double spike_learning_readings = 200.0;
  // The check starts once this many changes have been learnt.
  int spike_min_learnt = 20;
  // A held-back reading that no further reading confirms or refutes within
  // this time is taken at the next tick (a report-by-exception point may send
  // nothing after a step for a whole heartbeat).
  double spike_hold_max_s = 30.0;
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
  uint64_t held_back = 0;        // jumps held back one reading by the spike check
  uint64_t spike = 0;            // of these, spikes: the next reading returned (excluded)
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
  uint8_t dq = 0;            // PointDq flags of the latest reading (and a frozen verdict)
  double changed_s = 0.0;    // when the value last changed (flatline check)
  // Frozen check (DataQualityOptions): learnt share of readings that changed
  // the value, readings since it last changed, and that learning's count.
  double change_share = 0.0;
  int32_t repeats = 0;
  int32_t learnt = 0;
  // Spike check (DataQualityOptions): learnt mean |change| between accepted
  // readings and its count; the reading held back, if any; this point's
  // spike record.
  double change_abs_mean = 0.0;
  int32_t change_learnt = 0;
  bool pending = false;
  double pending_value_si = 0.0;
  double pending_time_s = 0.0;
  uint32_t held_back = 0;
  uint32_t spikes = 0;
  double first_spike_s = 0.0;  // time of the first and last dropped spike (valid when spikes > 0)
  double last_spike_s = 0.0;
};

class Aligner {
 public:
  // Sizes the per-point state; the site must outlive the aligner.
  void Reset(const Site& site, const DataQualityOptions& dq = {});

  FeedStatus Feed(const Reading& r);
  // Marks the time of the latest tick (for counting late readings), and
  // takes held-back readings older than spike_hold_max_s at t.
  void SetTickTime(double t);

  const HeldValue& held(int point) const { return held_[point]; }
  // True when the point has a value of good or uncertain quality no older
  // than its staleness limit at time t. Bad, out-of-range or implausibly
  // fast readings in between are excluded and flagged (Dq) but do not make
  // the point unusable: the last good value is held, as for a late reading.
  bool Usable(int point, double t) const {
    const HeldValue& h = held_[point];
    return h.has_value && (t - h.time_s) <= staleness_s_[point];
  }
  // PointDq flags at time t: the latest reading's verdict, a frozen verdict
  // (including the flatline_s limit for noisy points), stale and missing.
  uint8_t Dq(int point, double t) const {
    const HeldValue& h = held_[point];
    uint8_t dq = h.dq;
    if (!h.has_value) return static_cast<uint8_t>(dq | kDqMissing);
    if ((t - h.time_s) > staleness_s_[point]) dq |= kDqStale;
    if (h.change_share >= dq_.frozen_min_change_share && h.learnt >= dq_.frozen_min_repeats &&
        (t - h.changed_s) > dq_.flatline_s && !(site_->points[point].kind == PointKind::kFlow && h.value_si == 0.0))
      dq |= kDqFlatline;
    return dq;
  }
  double value(int point) const { return held_[point].value_si; }
  const AlignerCounters& counters() const { return counters_; }
  int point_count() const { return static_cast<int>(held_.size()); }

 private:
  uint8_t Frozen(int point, HeldValue& h, bool changed, double v) const;
  // Takes a good value as the point's held value (frozen check, spike learning).
  uint8_t Take(int point, HeldValue& h, double v, double t);
  double SpikeThreshold(int point, const HeldValue& h) const;
  bool SpikeReady(const HeldValue& h) const {
    return dq_.spike_check && h.has_value && h.change_learnt >= dq_.spike_min_learnt;
  }

  const Site* site_ = nullptr;
  std::vector<HeldValue> held_;
  std::vector<double> staleness_s_;
  DataQualityOptions dq_;
  double tick_time_s_ = -1e300;
  AlignerCounters counters_;
  int pending_count_ = 0;  // points with a held-back reading
};

}  // namespace holdfast
