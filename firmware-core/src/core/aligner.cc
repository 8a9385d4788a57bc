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
    << " rate_of_change=" << rate_of_change;
  return o.str();
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
    h.dq = dq;
    if (dq == 0) {  // an implausible value never replaces the held one
      if (!h.has_value || v != h.value_si) h.changed_s = r.time_s;
      h.value_si = v;
      h.time_s = r.time_s;
      h.has_value = true;
    }
  }
  if (r.time_s <= tick_time_s_) {
    ++counters_.late;
    return FeedStatus::kLate;
  }
  ++counters_.accepted;
  return FeedStatus::kAccepted;
}

}  // namespace holdfast
