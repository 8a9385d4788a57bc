#include "holdfast/aligner.h"

#include <algorithm>
#include <cmath>
#include <sstream>

namespace holdfast {

const char* QualityName(Quality q) {
  switch (q) {
    case Quality::kGood: return "good";
    case Quality::kUncertain: return "uncertain";
    case Quality::kBad: return "bad";
  }
  return "?";
}

const char* FeedStatusName(FeedStatus s) {
  switch (s) {
    case FeedStatus::kAccepted: return "accepted";
    case FeedStatus::kLate: return "late";
    case FeedStatus::kOutOfOrder: return "out_of_order";
    case FeedStatus::kDuplicate: return "duplicate";
    case FeedStatus::kUnknownPoint: return "unknown_point";
    case FeedStatus::kNotFinite: return "not_finite";
  }
  return "?";
}

std::string AlignerCounters::ToString() const {
  std::ostringstream o;
  o << "accepted=" << accepted << " late=" << late << " out_of_order=" << out_of_order
    << " duplicate=" << duplicate << " unknown_point=" << unknown_point
    << " not_finite=" << not_finite << " bad_quality=" << bad_quality << " out_of_range=" << out_of_range
    << " rate_of_change=" << rate_of_change << " spike=" << spike << " held_back=" << held_back;
  return o.str();
}

std::string PointDqNames(uint8_t dq) {
  static const struct { uint8_t bit; const char* name; } kNames[] = {
      {kDqOutOfRange, "out_of_range"}, {kDqRateOfChange, "rate_of_change"}, {kDqFlatline, "frozen"},
      {kDqBadQuality, "bad_quality"},  {kDqStale, "stale"},                 {kDqMissing, "missing"},
      {kDqSpike, "spike"},
  };
  std::string out;
  for (const auto& n : kNames) {
    if (dq & n.bit) {
      if (!out.empty()) out += '|';
      out += n.name;
    }
  }
  return out;
}

bool DataQualityOptions::IsValid(std::string* why) const {
  if (!(flatline_s > 0.0)) {
    if (why) *why = "data quality: flatline_s must be positive";
    return false;
  }
  if (!(full_range_s > 0.0)) {
    if (why) *why = "data quality: full_range_s must be positive";
    return false;
  }
  if (!(frozen_false_probability > 0.0 && frozen_false_probability < 0.5)) {
    if (why) *why = "data quality: frozen_false_probability must be in (0, 0.5)";
    return false;
  }
  if (!(frozen_min_change_share > 0.0 && frozen_min_change_share < 1.0)) {
    if (why) *why = "data quality: frozen_min_change_share must be in (0, 1)";
    return false;
  }
  if (!(frozen_learning_readings >= 10.0)) {
    if (why) *why = "data quality: frozen_learning_readings must be at least 10";
    return false;
  }
  if (frozen_min_repeats < 3) {
    if (why) *why = "data quality: frozen_min_repeats must be at least 3";
    return false;
  }
  if (!(spike_sigmas >= 1.0 && spike_sigmas < 1e6)) {
    if (why) *why = "data quality: spike_sigmas must be in [1, 1e6)";
    return false;
  }
  if (!(spike_range_fraction >= 0.0 && spike_range_fraction < 1.0)) {
    if (why) *why = "data quality: spike_range_fraction must be in [0, 1)";
    return false;
  }
  if (!(spike_learning_readings >= 10.0)) {
    if (why) *why = "data quality: spike_learning_readings must be at least 10";
    return false;
  }
  if (spike_min_learnt < 2) {
    if (why) *why = "data quality: spike_min_learnt must be at least 2";
    return false;
  }
  if (!(spike_hold_max_s > 0.0 && std::isfinite(spike_hold_max_s))) {
    if (why) *why = "data quality: spike_hold_max_s must be positive and finite";
    return false;
  }
  return true;
}

void Aligner::Reset(const Site& site, const DataQualityOptions& dq) {
  site_ = &site;
  dq_ = dq;
  held_.assign(site.points.size(), HeldValue{});
  staleness_s_.assign(site.points.size(), 0.0);
  for (size_t i = 0; i < site.points.size(); ++i) staleness_s_[i] = site.points[i].staleness_s;
  tick_time_s_ = -1e300;
  counters_ = AlignerCounters{};
  pending_count_ = 0;
}

void Aligner::SetTickTime(double t) {
  tick_time_s_ = t;
  if (pending_count_ == 0) return;
  for (size_t i = 0; i < held_.size(); ++i) {
    HeldValue& h = held_[i];
    if (!h.pending || !(t - h.pending_time_s > dq_.spike_hold_max_s)) continue;
    // Neither confirmed nor refuted in time: taken, as a step would be.
    h.pending = false;
    --pending_count_;
    h.dq = static_cast<uint8_t>(Take(static_cast<int>(i), h, h.pending_value_si, h.pending_time_s));
  }
}

double Aligner::SpikeThreshold(int point, const HeldValue& h) const {
  const PointSpec& spec = site_->points[point];
  // sigma from the mean |change| of white noise: E|d| = 2 sigma / sqrt(pi).
  const double sigma = h.change_abs_mean * 0.88622692545275801;  // sqrt(pi) / 2
  const double range = std::isfinite(spec.range_min) && std::isfinite(spec.range_max)
                           ? spec.range_max - spec.range_min
                           : 0.0;
  return std::max(dq_.spike_sigmas * sigma, dq_.spike_range_fraction * range);
}

uint8_t Aligner::Take(int point, HeldValue& h, double v, double t) {
  if (dq_.spike_check && h.has_value) {
    // Learn the point's reading-to-reading change, clipped at the threshold
    // once the check runs, so that a real step teaches it little.
    double d = std::fabs(v - h.value_si);
    if (h.change_learnt >= dq_.spike_min_learnt) d = std::min(d, SpikeThreshold(point, h));
    if (h.change_learnt < INT32_MAX) ++h.change_learnt;
    const double w = std::max(1.0 / h.change_learnt, 1.0 / dq_.spike_learning_readings);
    h.change_abs_mean += w * (d - h.change_abs_mean);
  }
  const bool changed = !h.has_value || v != h.value_si;
  if (changed) h.changed_s = t;
  const uint8_t dq = Frozen(point, h, changed, v);
  h.value_si = v;
  h.time_s = t;
  h.has_value = true;
  return dq;
}

// The frozen verdict of DataQualityOptions for one good reading: learns the
// share of readings that change the value, and calls the point frozen when a
// point known to be noisy repeats one value more often than chance allows.
uint8_t Aligner::Frozen(int point, HeldValue& h, bool changed, double v) const {
  const bool flow = site_->points[point].kind == PointKind::kFlow;
  if (changed) {
    h.repeats = 0;
  } else if (h.repeats < INT32_MAX) {
    ++h.repeats;
  }
  // A zero flow is a closed meter or a low-flow cut-off: healthy, and not
  // evidence about the meter's noise either way.
  if (flow && v == 0.0) return 0;
  if (h.learnt < INT32_MAX) ++h.learnt;
  const double w = std::max(1.0 / h.learnt, 1.0 / dq_.frozen_learning_readings);
  // Learn only from readings that are not themselves part of a suspected
  // freeze, so that a frozen point does not teach itself to be quiet.
  const double p = h.change_share;
  const int needed = p >= dq_.frozen_min_change_share
                         ? std::max(dq_.frozen_min_repeats,
                                    static_cast<int>(std::ceil(std::log(dq_.frozen_false_probability) /
                                                               std::log(std::max(1e-12, 1.0 - p)))))
                         : INT32_MAX;
  const bool frozen = h.learnt >= dq_.frozen_min_repeats && h.repeats >= needed;
  if (!frozen) h.change_share += w * ((changed ? 1.0 : 0.0) - h.change_share);
  return frozen ? kDqFlatline : 0;
}

FeedStatus Aligner::Feed(const Reading& r) {
  if (r.point < 0 || r.point >= static_cast<int32_t>(held_.size())) {
    ++counters_.unknown_point;
    return FeedStatus::kUnknownPoint;
  }
  if (!std::isfinite(r.value) || !std::isfinite(r.time_s)) {
    ++counters_.not_finite;
    return FeedStatus::kNotFinite;
  }
  HeldValue& h = held_[r.point];
  if (h.seen) {
    if (r.time_s < h.last_time_s) {
      ++counters_.out_of_order;
      return FeedStatus::kOutOfOrder;
    }
    if (r.time_s == h.last_time_s) {
      ++counters_.duplicate;
      return FeedStatus::kDuplicate;
    }
  }
  h.seen = true;
  h.last_time_s = r.time_s;
  h.quality = r.quality;
  if (r.quality == Quality::kBad) {
    ++counters_.bad_quality;
    h.dq = static_cast<uint8_t>((h.dq & kDqFlatline) | kDqBadQuality);
  } else {
    const PointSpec& spec = site_->points[r.point];
    const double v = spec.unit.ToSi(r.value);
    uint8_t dq = 0;
    if ((std::isfinite(spec.range_min) && v < spec.range_min) || (std::isfinite(spec.range_max) && v > spec.range_max)) {
      dq |= kDqOutOfRange;
      ++counters_.out_of_range;
    } else if (h.has_value && std::isfinite(spec.range_min) && std::isfinite(spec.range_max) &&
               std::fabs(v - h.value_si) > (spec.range_max - spec.range_min) / dq_.full_range_s *
                                               std::max(r.time_s - h.time_s, 1e-3)) {
      dq |= kDqRateOfChange;
      ++counters_.rate_of_change;
    }
    if (dq == 0) {  // an implausible value never replaces the held one
      // Spike check (DataQualityOptions): one-sample confirmation of jumps.
      bool hold = false;
      if (h.pending) {
        h.pending = false;
        --pending_count_;
        if (std::fabs(v - h.value_si) <= SpikeThreshold(r.point, h)) {
          // Back at the old level: the held-back reading was a spike.
          ++counters_.spike;
          if (h.spikes == 0) h.first_spike_s = h.pending_time_s;
          if (h.spikes < UINT32_MAX) ++h.spikes;
          h.last_spike_s = h.pending_time_s;
          dq = kDqSpike;
        } else {
          // Confirmed: the jump is taken one reading late, and this reading
          // is checked against the new level.
          Take(r.point, h, h.pending_value_si, h.pending_time_s);
          hold = SpikeReady(h) && std::fabs(v - h.value_si) > SpikeThreshold(r.point, h);
        }
      } else {
        hold = SpikeReady(h) && std::fabs(v - h.value_si) > SpikeThreshold(r.point, h);
      }
      if (hold) {
        h.pending = true;
        h.pending_value_si = v;
        h.pending_time_s = r.time_s;
        ++pending_count_;
        ++counters_.held_back;
        if (h.held_back < UINT32_MAX) ++h.held_back;
        dq = static_cast<uint8_t>(h.dq & kDqFlatline);
      } else {
        dq = static_cast<uint8_t>(dq | Take(r.point, h, v, r.time_s));
      }
    } else {
      dq = static_cast<uint8_t>(dq | (h.dq & kDqFlatline));
    }
    h.dq = dq;
  }
  if (r.time_s <= tick_time_s_) {
    ++counters_.late;
    return FeedStatus::kLate;
  }
  ++counters_.accepted;
  return FeedStatus::kAccepted;
}

}  // namespace holdfast
